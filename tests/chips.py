"""Generated layouts shared by the tests, the benchmarks and the output-identity script.

Demo data of our own invention, not check values.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np


def build_bench_chip(path: Path, target: float) -> int:
    """A hierarchical chip of about ``target`` flat shapes on layer 1/0; returns the exact count.

    Memory-like arrays, standard-cell-like rows and routing at several pitches,
    written as OASIS (or GDSII when ``path`` ends in ``.gds``).
    """
    import gdstk

    lib = gdstk.Library()
    # Memory-like: a 32-line cell at pitch 90, arrayed.
    bit = lib.new_cell("BITS")
    for k in range(32):
        bit.add(gdstk.rectangle((k * 0.09, 0), (k * 0.09 + 0.045, 1.6), layer=1))
    # Standard-cell-like: 6 lines at pitch 200 with a cut, in rows.
    std = lib.new_cell("STD")
    for k in range(6):
        std.add(gdstk.rectangle((k * 0.2, 0), (k * 0.2 + 0.1, 0.7), layer=1))
        std.add(gdstk.rectangle((k * 0.2, 0.8), (k * 0.2 + 0.1, 1.5), layer=1))
    # Routing: long lines at pitch 140 and 180.
    route = lib.new_cell("ROUTE")
    for k in range(20):
        route.add(gdstk.rectangle((0, k * 0.14), (40, k * 0.14 + 0.07), layer=1))
    for k in range(20):
        route.add(gdstk.rectangle((0, 3 + k * 0.18), (40, 3 + k * 0.18 + 0.09), layer=1))
    block = lib.new_cell("BLOCK")  # 200 x 200 um
    block.add(gdstk.Reference(bit, (0, 0), columns=30, rows=50, spacing=(3.0, 2.0)))
    block.add(gdstk.Reference(std, (100, 0), columns=60, rows=60, spacing=(1.5, 1.65)))
    block.add(gdstk.Reference(route, (0, 110), columns=4, rows=12, spacing=(45, 7.5)))
    per_block = 30 * 50 * 32 + 60 * 60 * 12 + 4 * 12 * 40
    n = max(1, math.ceil((target / per_block) ** 0.5))
    top = lib.new_cell("CHIP")
    top.add(gdstk.Reference(block, (0, 0), columns=n, rows=n, spacing=(210, 210)))
    if str(path).endswith(".gds"):
        lib.write_gds(str(path))
    else:
        lib.write_oas(str(path))
    return per_block * n * n


def place_side_by_side(files, path: Path, gap_um: float = 5.0, row_um: float = math.inf) -> int:
    """Every top cell of the GDSII ``files`` placed left to right, ``gap_um`` apart,
    in rows up to ``row_um`` wide, in one layout written to ``path``; returns how
    many were placed.  Cells of the same name are taken once (the first file's)."""
    import warnings

    import gdstk

    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell("CELLS")
    x = y = row = 0.0
    names: set[str] = set()
    placed = 0
    for f in files:
        with warnings.catch_warnings():  # real cells hold records gdstk skips (NODE)
            warnings.simplefilter("ignore", RuntimeWarning)
            src = gdstk.read_gds(str(f))
        for c in src.cells:
            if c.name not in names:
                names.add(c.name)
                lib.add(c)
        for t in src.top_level():
            (x0, y0), (x1, y1) = t.bounding_box()
            if x > 0 and x + x1 - x0 > row_um:
                x, y, row = 0.0, y + row + gap_um, 0.0
            top.add(gdstk.Reference(t, (x - x0, y - y0)))
            x, row, placed = x + x1 - x0 + gap_um, max(row, y1 - y0), placed + 1
    lib.write_gds(str(path))
    return placed


def build_routing(path: Path, n_target: float, seed: int = 2) -> int:
    """Write ``routing``: about ``n_target`` flat horizontal wires on layer 1/0, on
    tracks at random pitches of 100-400 nm (width 40 % of the pitch below), each
    track filled with wires 0.3-3 um long and gaps of 0.1-1 um."""
    import gdstk

    rng = np.random.default_rng(seed)
    n = int(n_target)
    side = math.sqrt(n * 0.2e6)  # the same area per shape as ``random``
    lib = gdstk.Library(unit=1e-9, precision=1e-9)
    top = lib.new_cell("TOP")
    y, count = 0.0, 0
    while count < n:
        pitch = float(rng.integers(10, 41)) * 10.0
        width = round(0.4 * pitch)
        x = float(rng.uniform(0, 500))
        while x < side and count < n:
            length = float(np.round(rng.uniform(300, 3000)))
            top.add(gdstk.rectangle((x, y), (x + length, y + width), layer=1, datatype=0))
            count += 1
            x += length + float(np.round(rng.uniform(100, 1000)))
        y += pitch
    lib.write_gds(str(path))
    return count


def build_cell_chip(path: Path, rows_target: int = 7500, seed: int = 5) -> dict:
    """A chip of standard-cell-like rows, for reports per cell; returns its counts.

    Ten leaf cells each hold ten arrays of 8 lines on layer 1/0 at pitches
    from 60 to 117 nm (many below what an ArF immersion scanner resolves);
    a row cell places the ten leaves side by side; a block stacks 50 rows,
    every other one mirrored.  The top cell holds a lattice of blocks, blocks
    scattered at random places and turns, and a few leaves placed alone with
    a foreign line within reach of an array (findings that depend on the
    placement).  About ``rows_target`` row placements in all.
    """
    import gdstk

    rng = np.random.default_rng(seed)
    lib = gdstk.Library()
    leaves = []
    for k in range(10):
        leaf = lib.new_cell(f"LEAF_{k}")
        for j in range(10):
            pitch = (60 + 0.6 * (10 * k + j) - (0.6 * (10 * k + j)) % 1.0) / 1000.0
            x0 = j * 3.0
            for i in range(8):
                x = x0 + i * pitch
                leaf.add(gdstk.rectangle((x, 0), (x + pitch / 2, 2.0), layer=1))
        leaves.append(leaf)
    row = lib.new_cell("ROW")
    for k, leaf in enumerate(leaves):
        row.add(gdstk.Reference(leaf, (k * 32.0, 0)))
    block = lib.new_cell("BLOCK")  # 320 x 150 um
    for r in range(50):
        mirrored = r % 2 == 1
        block.add(
            gdstk.Reference(row, (0, r * 3.0 + (2.0 if mirrored else 0.0)), x_reflection=mirrored)
        )
    top = lib.new_cell("TOP")
    blocks = max(1, rows_target // 50)
    lattice = max(1, int(0.8 * blocks))
    cols = max(1, int(math.sqrt(lattice)))
    rws = max(1, lattice // cols)
    top.add(gdstk.Reference(block, (0, 0), columns=cols, rows=rws, spacing=(340.0, 170.0)))
    scattered = blocks - cols * rws
    x_base = cols * 340.0 + 500.0
    # The turned block's lower-left corner from its origin, per quarter turn.
    corner = ((0.0, 0.0), (150.0, 0.0), (320.0, 150.0), (0.0, 320.0))
    for s in range(scattered):  # off the lattice, in 400 um slots, at random offsets and turns
        turn = int(rng.integers(0, 4))
        x = x_base + (s % 6) * 400.0 + corner[turn][0] + float(rng.integers(0, 1000)) * 0.013
        y = (s // 6) * 400.0 + corner[turn][1] + float(rng.integers(0, 1000)) * 0.011
        top.add(gdstk.Reference(block, (x, y), rotation=math.pi / 2 * turn))
    y_base = max(rws * 170.0, (scattered // 6 + 1) * 400.0)
    y_alone = y_base + 500.0
    for k in range(10):  # a leaf with a foreign line 200 nm beside its first array
        top.add(gdstk.Reference(leaves[k], (k * 40.0, y_alone)))
        top.add(
            gdstk.rectangle((k * 40.0 - 0.25, y_alone), (k * 40.0 - 0.2, y_alone + 2.0), layer=1)
        )
    if str(path).endswith(".gds"):
        lib.write_gds(str(path))
    else:
        lib.write_oas(str(path))
    n_rows = 50 * (cols * rws + scattered)
    return {
        "row_placements": n_rows,
        "leaf_placements": 10 * n_rows + 10,
        "shapes": 800 * n_rows + 810,
    }
