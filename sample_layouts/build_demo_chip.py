"""Rebuild the demo chip layouts (demo_chip.gds and demo_chip.oas).

Scenario (invented for the demo): "Wren-3", a small mixed-signal test chip.
Its front end is checked with ``rules/demo_chip.toml``: active on a KrF annular
tool, poly on a dry ArF tool, metal1 (dark field) on an ArF immersion tool with
an x dipole, via1 (dark field) on the same tool with an annular source.  Every layer carries line/space arrays comfortably inside, near
and past what its tool resolves, placed through the hierarchy the checker must
see through: arrays of references, rotated (90 and 45 degrees), mirrored and
magnified references, lines drawn as abutting pieces, paths, and (in the OASIS
copy) polygon repetitions.  A layer the deck does not name (63/0, annotation)
holds shapes at an impossible pitch that the scan must ignore.

Usage::

    python sample_layouts/build_demo_chip.py [OUTPUT_DIR]

All dimensions are in nm at wafer scale; the layout unit is 1 um with a 1 nm
grid.  Expected verdicts with the demo deck are listed in EXPECTED and
EXPECTED_2D below.
"""

from __future__ import annotations

import datetime
import sys
from pathlib import Path

import gdstk

UM = 1e-3  # nm -> um (layout user unit)

ACTIVE = (1, 0)
POLY = (7, 0)
METAL1 = (17, 0)
VIA1 = (18, 0)
ANNOTATION = (63, 0)  # not in the deck: must be ignored

# (block, layer, drawn pitch nm, line direction deg, expected severity with
# rules/demo_chip.toml; None: no finding).  Lines along y are 90 degrees.
EXPECTED = [
    ("active relaxed, pitch 400", "active", 400, 90, None),
    # k1 0.355 is marginal, but unpolarised light at NA 0.8 keeps little of the
    # image (NILS 0.88 at the drawn edges, below 1: not controllable): fail.
    ("active rotated 90, pitch 220", "active", 220, 0, "fail"),
    # k1 0.29 is a risk; the lines bridge (NILS 0.15).
    ("active, pitch 180", "active", 180, 90, "fail"),
    ("active magnified x2, pitch 160", "active", 160, 90, "fail"),
    ("poly paths, pitch 300", "poly", 300, 90, None),
    # k1 0.376 is marginal, but the lines print narrow (an edge 7.8 nm in) with
    # NILS 0.88 at the printed edges: fail.
    ("poly split in pieces, pitch 156", "poly", 156, 90, "fail"),
    ("poly rotated 45, pitch 120", "poly", 120, 135, "fail"),  # NILS 0.05
    ("poly mirrored array, pitch 110", "poly", 110, 90, "fail"),
    # Relaxed by k1, but 90 nm trenches print 10 % wide at the dose anchored on
    # the 80 nm pitch (iso-dense bias), the last one with an edge 5.2 nm out:
    # an edge-placement risk.
    ("metal1 relaxed, pitch 180", "metal1", 180, 90, "risk"),
    # The anchor pitch: its inner lines print well (NILS 2.35), but the last line
    # of each array prints 17 nm off its place, outwards: an edge-placement risk.
    ("metal1 vertical arrayed, pitch 80", "metal1", 80, 90, "risk"),
    # k1 0.35 is marginal; the array's last line prints 4.3 nm off its place and
    # with NILS 1.7: a risk.
    ("metal1 vertical, pitch 100", "metal1", 100, 90, "risk"),
    ("metal1 horizontal, pitch 100 (dipole on x)", "metal1", 100, 0, "fail"),
    ("metal1 vertical, pitch 70", "metal1", 70, 90, "fail"),
    # k1 0.49 passes the k1 bands, but 40 nm trenches at this pitch do not print
    # at the anchored dose under the dipole: flagged on image grounds only.
    ("metal1 narrow trenches, pitch 140", "metal1", 140, 90, "fail"),
]

# 2-D blocks: (block, layer, check, expected severity or None, a point in the
# block in um).  Line ends are judged on 2-D clips, via arrays by their lattice.
EXPECTED_2D = [
    # Poly lines 90 nm wide ending 40 nm apart (0.19 lambda/NA): the gap cannot open.
    ("poly tip to tip, gap 40", "poly", "line-end-bridged", "fail", (20.065, 9.52)),
    ("poly tip to tip, gap 160", "poly", "line-end-bridged", None, (21.265, 9.58)),
    # 50 nm vias at 70 nm: below lambda / (NA (1 + sigma)) = 75.2 nm, no 2-D image.
    ("via1 array, pitch 70", "via1", "unresolvable-pitch", "fail", (0.5, 24.5)),
    # 50 nm vias 200 nm apart: each opening's light at its centre barely
    # outweighs the 6 % background of opposite phase; they do not print.
    ("via1 50 nm array, pitch 200", "via1", "feature-not-printed", "fail", (4.5, 24.5)),
    # 80 nm vias print, with NILS 1.8 (unpolarised light at NA 1.35): marginal.
    ("via1 80 nm array, pitch 160", "via1", "low-nils", "marginal", (8.5, 24.5)),
    # Vias on their own, judged on a 2-D clip: a 50 nm one does not print, an
    # 80 nm one does (NILS 1.5, marginal).
    ("via1 50 nm alone", "via1", "feature-not-printed", "fail", (11.025, 24.525)),
    ("via1 80 nm alone", "via1", "low-nils", "marginal", (12.54, 24.54)),
]


def line_cell(
    lib: gdstk.Library,
    name: str,
    layer: tuple[int, int],
    pitch: float,
    width: float,
    count: int,
    length: float,
    pieces: int = 1,
) -> gdstk.Cell:
    """A cell of ``count`` lines along y, each drawn as ``pieces`` abutting rectangles."""
    cell = lib.new_cell(name)
    for k in range(count):
        x0 = k * pitch
        for p in range(pieces):
            y0 = length * p / pieces
            y1 = length * (p + 1) / pieces
            cell.add(
                gdstk.rectangle(
                    (x0 * UM, y0 * UM),
                    ((x0 + width) * UM, y1 * UM),
                    layer=layer[0],
                    datatype=layer[1],
                )  # fmt: skip
            )
    return cell


def build() -> gdstk.Library:
    lib = gdstk.Library("WREN3", unit=1e-6, precision=1e-9)
    top = lib.new_cell("WREN3_TOP")

    # ------------------------------------------------------------ active (KrF annular)
    relaxed = line_cell(lib, "ACT_RELAXED", ACTIVE, 400, 200, 12, 4000)
    top.add(gdstk.Reference(relaxed, (0, 0)))
    act220 = line_cell(lib, "ACT_P220", ACTIVE, 220, 110, 16, 3000)
    # Turned 90 degrees: lines along x.
    top.add(gdstk.Reference(act220, (10, 0.5), rotation=1.5707963267948966))
    act180 = line_cell(lib, "ACT_P180", ACTIVE, 180, 90, 16, 3000)
    top.add(gdstk.Reference(act180, (12, 0)))
    # Drawn at pitch 80 and placed with magnification 2: pitch 160 in the chip.
    act_small = line_cell(lib, "ACT_P80_HALF", ACTIVE, 80, 40, 12, 1500)
    top.add(gdstk.Reference(act_small, (18, 0), magnification=2.0))
    # An isolated wide line and a pad: nothing to flag.
    top.add(gdstk.rectangle((24, 0), (24.6, 4), layer=ACTIVE[0], datatype=ACTIVE[1]))
    top.add(gdstk.rectangle((26, 0), (29, 3), layer=ACTIVE[0], datatype=ACTIVE[1]))

    # ------------------------------------------------------------ poly (dry ArF)
    poly_paths = lib.new_cell("POLY_PATHS_P300")
    for k in range(10):
        x = (k * 300 + 75) * UM
        poly_paths.add(gdstk.FlexPath([(x, 0), (x, 3)], 0.15, layer=POLY[0], datatype=POLY[1]))
    top.add(gdstk.Reference(poly_paths, (0, 8)))
    poly156 = line_cell(lib, "POLY_P156_PIECES", POLY, 156, 78, 16, 3000, pieces=3)
    top.add(gdstk.Reference(poly156, (5, 8)))
    poly120 = line_cell(lib, "POLY_P120", POLY, 120, 60, 14, 2500)
    top.add(gdstk.Reference(poly120, (11, 8), rotation=0.7853981633974483))  # 45 deg
    poly110 = line_cell(lib, "POLY_P110", POLY, 110, 55, 10, 1500)
    # Mirrored (x reflection: lines stay vertical) and arrayed three times along y.
    top.add(
        gdstk.Reference(poly110, (16, 14.5), x_reflection=True, columns=1, rows=3, spacing=(0, 2.2))
    )

    # ------------------------------------------------------------ metal1 (immersion, dipole x)
    m1_relaxed = lib.new_cell("M1_P180")
    line = gdstk.rectangle((0, 0), (0.09, 4), layer=METAL1[0], datatype=METAL1[1])
    # A polygon repetition: OASIS keeps it compact, GDSII writes every copy.
    line.repetition = gdstk.Repetition(columns=12, rows=1, spacing=(0.18, 0))
    m1_relaxed.add(line)
    top.add(gdstk.Reference(m1_relaxed, (0, 18)))
    m1_80 = line_cell(lib, "M1_P80", METAL1, 80, 40, 10, 1200)
    top.add(gdstk.Reference(m1_80, (4, 18), columns=3, rows=2, spacing=(1.2, 1.6)))
    m1_100v = line_cell(lib, "M1_P100", METAL1, 100, 50, 12, 2000)
    top.add(gdstk.Reference(m1_100v, (9, 18)))
    # The same cell turned to horizontal lines: the x dipole cannot image them.
    top.add(gdstk.Reference(m1_100v, (16, 18.5), rotation=1.5707963267948966))
    m1_70 = line_cell(lib, "M1_P70", METAL1, 70, 35, 12, 1500)
    top.add(gdstk.Reference(m1_70, (20, 18)))

    m1_140 = line_cell(lib, "M1_P140_NARROW", METAL1, 140, 40, 10, 1500)
    top.add(gdstk.Reference(m1_140, (23, 18)))

    # Line ends facing each other across 40 and 160 nm: four pairs each, at a
    # relaxed 300 nm pitch.
    tips = lib.new_cell("POLY_TIPS")
    for k, gap in enumerate((40, 160)):
        x0 = k * 1200
        for j in range(4):
            x = (x0 + j * 300) * UM
            tips.add(gdstk.rectangle((x, 8.0), (x + 0.09, 9.5), layer=POLY[0], datatype=POLY[1]))
            y = 9.5 + gap * UM
            tips.add(gdstk.rectangle((x, y), (x + 0.09, y + 1.5), layer=POLY[0], datatype=POLY[1]))
    top.add(gdstk.Reference(tips, (20, 0)))

    # ------------------------------------------------------------ via1 (immersion, annular)
    via = lib.new_cell("VIA1_50")
    via.add(gdstk.rectangle((0, 0), (0.05, 0.05), layer=VIA1[0], datatype=VIA1[1]))
    top.add(gdstk.Reference(via, (0, 24), columns=16, rows=16, spacing=(0.07, 0.07)))
    top.add(gdstk.Reference(via, (3, 24), columns=10, rows=10, spacing=(0.2, 0.2)))
    via80 = lib.new_cell("VIA1_80")
    via80.add(gdstk.rectangle((0, 0), (0.08, 0.08), layer=VIA1[0], datatype=VIA1[1]))
    top.add(gdstk.Reference(via80, (7, 24), columns=12, rows=12, spacing=(0.16, 0.16)))
    top.add(gdstk.Reference(via, (11, 24.5)))
    top.add(gdstk.Reference(via80, (12.5, 24.5)))

    # ------------------------------------------------------------ ignored layer
    notes = line_cell(lib, "NOTES_P20", ANNOTATION, 20, 10, 20, 1000)
    top.add(gdstk.Reference(notes, (27, 18)))
    top.add(gdstk.Label("WREN-3 demo chip", (0, -1), layer=ANNOTATION[0]))
    return lib


def main(argv: list[str]) -> int:
    out = Path(argv[1]) if len(argv) > 1 else Path(__file__).resolve().parent
    out.mkdir(parents=True, exist_ok=True)
    lib = build()
    # A fixed timestamp keeps the file byte-identical from one rebuild to the next.
    stamp = datetime.datetime(2026, 1, 1, 0, 0, 0)
    lib.write_gds(str(out / "demo_chip.gds"), timestamp=stamp)
    lib.write_oas(str(out / "demo_chip.oas"))
    print(f"wrote {out / 'demo_chip.gds'} and {out / 'demo_chip.oas'}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
