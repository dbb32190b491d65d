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
_SKY130_LAYERS_TOML = "".join(
    f'\n[[layers]]\nname = "{name}"\nsource = "{src}"\nexposure = "krf"\nfield = "clear"\n'
    for name, src in SKY130_LAYERS
)
SKY130_CAPABLE_DECK = (
    textwrap.dedent(
        """
        [deck]
        name = "sky130-krf-capable"

        [exposures.krf]
        wavelength_nm = 248.0
        na = 0.8
        illumination = { shape = "annular", sigma_inner = 0.55, sigma_outer = 0.85 }
        mask = { kind = "attenuated", transmission = 0.06 }
        """
    )
    + _SKY130_LAYERS_TOML
)
SKY130_WEAK_DECK = (
    textwrap.dedent(
        """
        [deck]
        name = "sky130-krf-weak"

        [exposures.krf]
        wavelength_nm = 248.0
        na = 0.7
        illumination = { shape = "conventional", sigma = 0.6 }
        mask = { kind = "binary" }
        """
    )
    + _SKY130_LAYERS_TOML
)
# A KrF scanner with a diagonal quadrupole (NA 0.75, poles 0.55-0.85 of 30
# degrees, 6 % attenuated PSM): it images dense lines well and semi-isolated
# spaces poorly, the forbidden pitches of off-axis illumination (common
# practice).
SKY130_QUADRUPOLE_DECK = (
    textwrap.dedent(
        """
        [deck]
        name = "sky130-krf-quadrupole"

        [exposures.krf]
        wavelength_nm = 248.0
        na = 0.75
        illumination = { shape = "quadrupole", sigma_inner = 0.55, sigma_outer = 0.85, opening_deg = 30.0 }
        mask = { kind = "attenuated", transmission = 0.06 }
        """
    )
    + _SKY130_LAYERS_TOML
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
SKY130_CONTACT_DECK = textwrap.dedent(
    """
    [deck]
    name = "sky130-krf-contacts"

    [exposures.krf_holes]
    wavelength_nm = 248.0
    na = 0.8
    illumination = { shape = "conventional", sigma = 0.4 }
    mask = { kind = "attenuated", transmission = 0.06 }
    """
) + "".join(
    f'\n[[layers]]\nname = "{name}"\nsource = "{src}"\nexposure = "krf_holes"\nfield = "dark"\n'
    for name, src in SKY130_CONTACT_LAYERS
)
SKY130_CELLS = REPO / "tests" / "fixtures" / "sky130"


def with_optional_layers(deck_text: str) -> str:
    """``deck_text`` with every layer marked optional: for test layouts drawn on
    some of a deck's layers only (a missing required layer is an error)."""
    return deck_text.replace("[[layers]]\n", "[[layers]]\noptional = true\n")
