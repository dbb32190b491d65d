#!/usr/bin/env python
"""How much the light's polarisation moves NILS, through NA: the table in docs/light.md.

A script, not a pytest test::

    python tests/tools/light_table.py

For each NA and source it images equal lines and spaces (openings on a dark
field, binary mask, ArF: 193 nm, water above NA 1) at a fixed k1 and prints the
NILS of the scalar model and the ratios to it of TE light (E along the lines)
and of unpolarised light, imaged in the immersion medium (air or water, the
default) and in a resist of index 1.7.  The pitch is set from k1 = (p/2) NA / lambda.
"""

from __future__ import annotations

from pitchguard.deck import parse_deck
from pitchguard.optics.cut_images import grating_metrics

SOURCES = {
    "dipole, k1 0.30": (
        '{ shape = "dipole", sigma_inner = 0.7, sigma_outer = 0.95, opening_deg = 35.0, '
        'axis = "x" }',
        0.30,
    ),
    "annular, k1 0.40": ('{ shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }', 0.40),
    "conventional, k1 0.55": ('{ shape = "conventional", sigma = 0.7 }', 0.55),
}
NAS = (0.5, 0.65, 0.75, 0.85, 0.93, 1.1, 1.2, 1.35)

DECK = """
[exposures.e]
wavelength_nm = 193.0
na = {na}
immersion_index = {index}
illumination = {illumination}
polarization = "{light}"
{resist}

[[layers]]
name = "m"
source = "1/0"
exposure = "e"
field = "dark"
"""


def nils(na: float, illumination: str, k1: float, light: str, resist: str = "") -> float:
    index = 1.44 if na > 1.0 else 1.0
    text = DECK.format(na=na, index=index, illumination=illumination, light=light, resist=resist)
    rule = parse_deck(text)
    pitch = 2.0 * k1 * 193.0 / na
    return grating_metrics(rule.layers[0], pitch, pitch / 2.0, 0.0)[0].nils


def main() -> None:
    for name, (illumination, k1) in SOURCES.items():
        print(f"\n{name}")
        head = f"{'NA':>5} {'pitch nm':>9} {'scalar':>7} {'TE/scalar':>10} {'unpol/scalar':>13}"
        print(head + f" {'in resist 1.7':>14}")
        for na in NAS:
            s = nils(na, illumination, k1, "scalar")
            te = nils(na, illumination, k1, "y")
            un = nils(na, illumination, k1, "unpolarized")
            resist = nils(na, illumination, k1, "unpolarized", "resist_index = 1.7")
            pitch = 2.0 * k1 * 193.0 / na
            row = f"{na:5.2f} {pitch:9.1f} {s:7.2f} {te / s:10.3f} {un / s:13.3f}"
            print(row + f" {resist / s:14.3f}")


if __name__ == "__main__":
    main()
