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
