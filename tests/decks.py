"""Paths and decks shared by the test folders (``tests/`` is on ``sys.path``, see conftest)."""

from __future__ import annotations

import textwrap
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SAMPLE_GDS = REPO / "sample_layouts" / "demo_chip.gds"
SAMPLE_OAS = REPO / "sample_layouts" / "demo_chip.oas"
DEMO_DECK = REPO / "rules" / "demo_chip.toml"

# Dry ArF, conventional sigma 0.8, binary mask: cutoff = 193 / (0.93 * 1.8) =
# 115.29 nm (lambda / (NA (1 + sigma_max)), arithmetic); k1 = 0.6 at pitch 249.0 nm.
DRY_ARF_DECK = textwrap.dedent(
    """
    [exposures.arf]
    wavelength_nm = 193.0
    na = 0.93
    illumination = { shape = "conventional", sigma = 0.8 }
    mask = { kind = "binary" }

    [[layers]]
    name = "poly"
    source = "7/0"
    exposure = "arf"
    field = "clear"
    """
)
DRY_ARF_METAL1_DECK = DRY_ARF_DECK.replace(
    'name = "poly"\nsource = "7/0"', 'name = "metal1"\nsource = "17/0"'
)
"""The same exposure judging metal1 (17/0): 35/35 nm lines there fail."""

POLY_ORDERS_DECK = textwrap.dedent(
    """
    [exposures.a]
    wavelength_nm = 193.0
    na = 0.93
    illumination = { shape = "conventional", sigma = 0.8 }
    [layer_defaults]
    image_checks = false
    [[layers]]
    name = "poly"
    source = "7/0"
    exposure = "a"
    field = "clear"
    """
)
"""Dry ArF, poly (7/0) judged by orders and k1 only: fast scans of test layouts."""

DRY_ARF_CUTOFF_NM = 193.0 / (0.93 * 1.8)

# The benchmark chip's deck (tests/benchmarks/, chips.py): ArF immersion, annular
# 0.6-0.9, one dark-field layer on 1/0.  Demo data, not a check value.
BENCH_DECK = textwrap.dedent(
    """
    [deck]
    name = "bench"

    [exposures.arfi]
    wavelength_nm = 193.0
    na = 1.35
    immersion_index = 1.44
    illumination = { shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }

    [[layers]]
    name = "M1"
    source = "1/0"
    exposure = "arfi"
    field = "dark"
    """
)

# Decks for the SkyWater 130 nm cells in tests/fixtures/sky130/ (layer numbers
# from the PDK's layer map: poly 66/20, li1 67/20, met1 68/20, met2 69/20).
# A capable KrF scanner for a 130 nm node (NA 0.8, annular 0.55-0.85, 6 %
# attenuated PSM: common practice for that node, from memory) and a weak one
# (NA 0.7, conventional sigma 0.6, binary), which flags the tightest pitches.
SKY130_LAYERS = (("poly", "66/20"), ("li1", "67/20"), ("met1", "68/20"), ("met2", "69/20"))
ATT_PSM = '{ kind = "attenuated", transmission = 0.06 }'


def _krf_deck(name: str, na: float, illumination: str, mask: str, layers, field: str) -> str:
    """A deck with one KrF exposure (248 nm) for ``layers`` ((name, source) pairs)."""
    head = (
        f'[deck]\nname = "{name}"\n\n[exposures.krf]\nwavelength_nm = 248.0\nna = {na}\n'
        f"illumination = {illumination}\nmask = {mask}\n"
    )
    return head + "".join(
        f'\n[[layers]]\nname = "{n}"\nsource = "{src}"\nexposure = "krf"\nfield = "{field}"\n'
        for n, src in layers
    )


SKY130_CAPABLE_DECK = _krf_deck(
    "sky130-krf-capable",
    0.8,
    '{ shape = "annular", sigma_inner = 0.55, sigma_outer = 0.85 }',
    ATT_PSM,
    SKY130_LAYERS,
    "clear",
)
SKY130_WEAK_DECK = _krf_deck(
    "sky130-krf-weak",
    0.7,
    '{ shape = "conventional", sigma = 0.6 }',
    '{ kind = "binary" }',
    SKY130_LAYERS,
    "clear",
)
# A KrF scanner with a diagonal quadrupole (NA 0.75, poles 0.55-0.85 of 30
# degrees, 6 % attenuated PSM): it images dense lines well and semi-isolated
# spaces poorly, the forbidden pitches of off-axis illumination (common
# practice).
SKY130_QUADRUPOLE_DECK = _krf_deck(
    "sky130-krf-quadrupole",
    0.75,
    '{ shape = "quadrupole", sigma_inner = 0.55, sigma_outer = 0.85, opening_deg = 30.0 }',
    ATT_PSM,
    SKY130_LAYERS,
    "clear",
)
# The contact and via layers of the same cells (licon1 66/44, mcon 67/44, via 68/44,
# via2 69/44: the PDK's layer map), holes on dark-field masks, printed with a
# small conventional source (sigma 0.4) and a 6 % attenuated PSM on the same KrF
# NA 0.8 scanner: a usual set-up for contact layers (common practice, from memory).
SKY130_CONTACT_LAYERS = (
    ("licon1", "66/44"),
    ("mcon", "67/44"),
    ("via", "68/44"),
    ("via2", "69/44"),
)
SKY130_CONTACT_DECK = _krf_deck(
    "sky130-krf-contacts",
    0.8,
    '{ shape = "conventional", sigma = 0.4 }',
    ATT_PSM,
    SKY130_CONTACT_LAYERS,
    "dark",
)
SKY130_CELLS = REPO / "tests" / "fixtures" / "sky130"


def with_optional_layers(deck_text: str) -> str:
    """``deck_text`` with every layer marked optional: for test layouts drawn on
    some of a deck's layers only (a missing required layer is an error)."""
    return deck_text.replace("[[layers]]\n", "[[layers]]\noptional = true\n")
