"""The bucket grid over a big cell's polygon boxes (layout/box_grid.py) against its
plain twin, checking every box: the same polygons meet each window, in the same
order, for placements turned by right and other angles, mirrored, magnified
and shifted, and windows inside, across and outside the cell."""

from __future__ import annotations

import math

import gdstk
import numpy as np

from pitchguard.layout import hierarchy
from pitchguard.layout.box_grid import BoxGrid
from pitchguard.layout.hierarchy import HierarchyQuery, _boxes_meeting, _selected


def _boxes(rng, n):
    lo = rng.uniform(0, 100_000, (n, 2))
    size = rng.uniform(10, 3_000, (n, 2)) * rng.choice([1.0, 0.05], (n, 2))
    return np.concatenate([lo, lo + size], axis=1)


def _placements():
    for deg in (0.0, 90.0, 180.0, 30.0, 247.0):
        for mirror in (False, True):
            for mag in (1.0, 2.5):
                c, s = math.cos(math.radians(deg)), math.sin(math.radians(deg))
                m = mag * np.array([[c, -s], [s, c]])
                if mirror:
                    m = m @ np.diag([1.0, -1.0])
                yield m


def test_grid_candidates_select_what_checking_every_box_selects():
    rng = np.random.default_rng(5)
    bb = _boxes(rng, 20_000)
    grid = BoxGrid(bb)

    class Cell:
        grids: dict = {}

    cell = Cell()
    cell.grids = {}
    picked = looked = windows = 0
    for m in _placements():
        shifts = rng.uniform(-50_000, 50_000, (3, 2))
        placed = bb[:, :2] @ m.T + shifts[0]
        for _ in range(6):
            centre = placed[rng.integers(len(placed))] + rng.normal(0, 20_000, 2)
            side = rng.uniform(500, 40_000)
            window = (*(centre - side / 2), *(centre + side / 2))
            want = _boxes_meeting(bb, m, shifts, window)
            got = _selected(cell, (1, 0), bb, m, shifts, window)
            np.testing.assert_array_equal(got[0], want[0])
            np.testing.assert_array_equal(got[1], want[1])
            picked += len(want[1])
            looked += len(grid.candidates(m, shifts[0], window))
            windows += 1
    assert picked > 100  # windows met polygons, not only empty space
    assert looked < 0.2 * len(bb) * windows  # the grid looked at few of the boxes
    assert grid.near((1e9, 1e9, 2e9, 2e9)).size == 0


def test_queries_of_a_big_flat_cell_are_those_of_checking_every_box(monkeypatch):
    lib = gdstk.Library()
    flat = lib.new_cell("FLAT")
    rng = np.random.default_rng(9)
    for x0, y0, x1, y1 in _boxes(rng, 3 * hierarchy.COUNT_EXACT_ABOVE) / 1000.0:
        flat.add(gdstk.rectangle((x0, y0), (x1, y1), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(flat, (200, 0), rotation=math.radians(30), x_reflection=True))
    windows = [
        (x, y, x + 9_000.0, y + 7_000.0)
        for x in (-60_000.0, 40_000.0, 150_000.0)
        for y in (0.0, 50_000.0)
    ]
    results = []
    grid_limit = hierarchy.COUNT_EXACT_ABOVE
    for limit in (grid_limit, 10**9):  # grid, then every box
        monkeypatch.setattr(hierarchy, "COUNT_EXACT_ABOVE", limit)
        for tops in ([flat], [top]):
            q = HierarchyQuery(lib, tops, [(7, 0)], 1000.0)
            for w in windows:
                ps = q.query(w)[(7, 0)]
                results.append((len(ps), ps.points.tobytes()))
                if limit == grid_limit:
                    assert q.count(w) == len(ps)
    half = len(results) // 2
    assert results[:half] == results[half:]
    assert sum(r[0] for r in results[:half]) > 50
