"""Window queries from the hierarchy equal a full flatten restricted to the window.

Reference: gdstk's own ``Cell.get_polygons`` (full flatten, applying every
reference transform and repetition), filtered to polygons whose bounding
box meets the window.
"""

from __future__ import annotations

import math
import random

import gdstk
import numpy as np
import pytest

from pitchguard.layout.hierarchy import HierarchyQuery

LAYERS = [(7, 0), (8, 0)]
NM_PER_UM = 1000.0


def _library(tmp_path, fmt: str) -> gdstk.Library:
    lib = gdstk.Library()
    leaf = lib.new_cell("LEAF")
    for k in range(5):
        leaf.add(gdstk.rectangle((k * 0.1, 0), (k * 0.1 + 0.05, 1), layer=7))
    leaf.add(gdstk.rectangle((0, 1.2), (0.6, 1.4), layer=8))
    rep = gdstk.rectangle((0, -1), (0.1, -0.5), layer=7)
    rep.repetition = gdstk.Repetition(3, 2, spacing=(0.3, 0.2))  # a polygon repetition
    leaf.add(rep)
    leaf.add(gdstk.FlexPath([(0, 2), (1, 2.5)], 0.05, layer=7))  # a path
    leaf.add(gdstk.rectangle((0, 0), (9, 9), layer=9))  # a layer not asked for
    mid = lib.new_cell("MID")
    mid.add(
        gdstk.Reference(
            leaf,
            (1, 1),
            rotation=0.3,
            magnification=1.5,
            x_reflection=True,
            columns=3,
            rows=2,
            spacing=(2, 3),
        )
    )
    mid.add(gdstk.Reference(leaf, (-5, 2), rotation=math.pi / 2))
    # Vias placed one by one (kept as one reference with a list of offsets when
    # there are many of one orientation), and by an explicit list of offsets
    # (OASIS keeps the list; GDSII writes single references).
    via = lib.new_cell("VIA")
    via.add(gdstk.rectangle((-0.02, -0.02), (0.02, 0.02), layer=8))
    rng = random.Random(3)
    for _ in range(30):
        mid.add(gdstk.Reference(via, (rng.uniform(-6, 8), rng.uniform(-2, 6)), rotation=0.7))
    for _ in range(3):
        mid.add(gdstk.Reference(via, (rng.uniform(-6, 8), rng.uniform(-2, 6))))
    listed = gdstk.Reference(via, (1, -1))
    listed.repetition = gdstk.Repetition(offsets=[(0.5 * k, 0.3 * k * k % 2) for k in range(12)])
    mid.add(listed)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(mid, (10, 10), rotation=1.1, columns=4, rows=5, spacing=(15, 12)))
    top.add(gdstk.Reference(mid, (0, 0), x_reflection=True))
    top.add(gdstk.rectangle((3, 3), (4, 4), layer=7))
    path = tmp_path / f"h.{fmt}"
    if fmt == "gds":
        lib.write_gds(str(path))
        return gdstk.read_gds(str(path))
    lib.write_oas(str(path))
    return gdstk.read_oas(str(path))


def _key(polys, w):
    out = []
    for pts in polys:
        b = (pts[:, 0].min(), pts[:, 1].min(), pts[:, 0].max(), pts[:, 1].max())
        if b[0] <= w[2] and b[2] >= w[0] and b[1] <= w[3] and b[3] >= w[1]:
            out.append(tuple(np.round(np.sort(pts, axis=0).ravel(), 3)))
    return sorted(out)


@pytest.mark.parametrize("fmt", ["gds", "oas"])
def test_window_queries_match_the_full_flatten(tmp_path, fmt):
    lib = _library(tmp_path, fmt)
    tops = lib.top_level()
    q = HierarchyQuery(lib, tops, LAYERS, NM_PER_UM)
    full = {
        ld: [
            p.points * NM_PER_UM for t in tops for p in t.get_polygons(layer=ld[0], datatype=ld[1])
        ]
        for ld in LAYERS
    }
    bb = q.bounding_box()
    rng = random.Random(7)
    for _ in range(40):
        x0, y0 = rng.uniform(bb[0], bb[2]), rng.uniform(bb[1], bb[3])
        size = rng.uniform(300.0, 30_000.0)
        win = (x0, y0, x0 + size, y0 + size)
        got = q.query(win)
        for ld in LAYERS:
            assert _key(list(got[ld]), win) == _key(full[ld], win)
    # The whole extent holds everything.
    everything = q.query(bb)
    for ld in LAYERS:
        assert len(everything[ld]) == len(full[ld])


def test_small_window_of_a_huge_array_is_cheap_and_exact(tmp_path):
    """10^5 x 10^5 instances (10^10): a flatten would never finish; a window query must."""
    lib = gdstk.Library()
    unit = lib.new_cell("U")
    unit.add(gdstk.rectangle((0, 0), (0.05, 0.05), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, (0, 0), columns=100_000, rows=100_000, spacing=(0.1, 0.1)))
    q = HierarchyQuery(lib, [top], [(7, 0)], NM_PER_UM)
    # 1 um square in the middle: 10 x 10 instances start inside it, plus the
    # row and column whose squares reach in from below/left: 11 x 11 (boxes touch).
    x = 5_000_000.0  # nm
    got = q.query((x, x, x + 1000.0, x + 1000.0))[(7, 0)]
    assert len(got) == 11 * 11
    assert q.bounding_box() == pytest.approx((0.0, 0.0, 9_999_950.0, 9_999_950.0))


def test_a_flat_cell_is_counted_by_what_meets_the_window():
    """A flat layout's top cell holds every shape: the shape count that guards a
    worker's memory must be what the window holds (a bound of :meth:`query`'s
    result), not the whole cell, or no tile of a large flat layout could run.
    Checked against the query itself, in the cell frame and placed turned."""
    from pitchguard.layout.hierarchy import COUNT_EXACT_ABOVE

    lib = gdstk.Library()
    flat = lib.new_cell("FLAT")
    rng = random.Random(3)
    n = 3 * COUNT_EXACT_ABOVE
    for _ in range(n):
        x, y = rng.uniform(0, 100), rng.uniform(0, 100)
        flat.add(gdstk.rectangle((x, y), (x + 0.2, y + 0.05), layer=7))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(flat, (200, 0), rotation=math.pi / 2))
    for tops in ([flat], [top]):
        q = HierarchyQuery(lib, tops, [(7, 0)], NM_PER_UM)
        x0, y0, x1, y1 = q.bounding_box()
        for fx, fy in ((0.0, 0.0), (0.4, 0.7), (0.9, 0.1)):
            w = (x0 + fx * (x1 - x0), y0 + fy * (y1 - y0))
            window = (w[0], w[1], w[0] + 10_000.0, w[1] + 10_000.0)
            got = len(q.query(window)[(7, 0)])
            assert q.count(window) == got
            assert 0 < got < n // 20


def _shifted(polys, dx, dy):
    return sorted(tuple(np.round(np.sort(p - (dx, dy), axis=0).ravel(), 3)) for p in polys)


@pytest.mark.parametrize("fmt", ["gds", "oas"])
def test_equal_content_keys_mean_equal_polygons_up_to_the_shift(tmp_path, fmt):
    """The reuse contract of tiled scans: windows of one size with equal keys return
    the same polygons, moved by the difference of their origins.  Checked on every
    pair of equal keys among a grid of windows (the reference is the query itself,
    which the test above checks against gdstk's flatten)."""
    lib = _library(tmp_path, fmt)
    # Add a plain array whose pitch divides the window grid, so keys do repeat.
    leaf = next(c for c in lib.cells if c.name == "LEAF")
    top = lib.new_cell("TOP2")
    top.add(gdstk.Reference(leaf, (100, -100), columns=40, rows=40, spacing=(2.5, 5.0)))
    tops = lib.top_level()
    q = HierarchyQuery(lib, tops, LAYERS, NM_PER_UM)
    x0, y0, x1, y1 = q.bounding_box()
    size, halo = 10_000.0, 700.0
    seen: dict[bytes, tuple] = {}
    repeats = 0
    for i in range(math.floor(x0 / size), math.floor(x1 / size) + 1):
        for j in range(math.floor(y0 / size), math.floor(y1 / size) + 1):
            ox, oy = i * size, j * size
            win = (ox - halo, oy - halo, ox + size + halo, oy + size + halo)
            key = q.content_key(win, (ox, oy))
            got = q.query(win)
            if key not in seen:
                seen[key] = (ox, oy, got)
                continue
            repeats += 1
            rx, ry, ref = seen[key]
            for ld in LAYERS:
                assert _shifted(list(got[ld]), ox, oy) == _shifted(list(ref[ld]), rx, ry)
    assert repeats > 50  # the array's interior windows repeat ...
    assert len(seen) > 20  # ... and the rest of the layout does not


def test_content_key_sees_a_one_nm_move_and_a_rotation(tmp_path):
    lib = gdstk.Library()
    leaf = lib.new_cell("L")
    leaf.add(gdstk.rectangle((0, 0), (0.05, 1), layer=7))
    top = lib.new_cell("T")
    top.add(gdstk.Reference(leaf, (1, 1)))
    top.add(gdstk.Reference(leaf, (21.001, 1)))  # 1 nm off the 20 um shift
    top.add(gdstk.Reference(leaf, (41, 1), rotation=math.pi))
    top.add(gdstk.Reference(leaf, (61, 1)))  # exactly the 60 um shift of the first
    q = HierarchyQuery(lib, [top], [(7, 0)], NM_PER_UM)
    keys = [q.content_key((x, 0, x + 20_000, 20_000), (x, 0)) for x in (0, 20_000, 40_000, 60_000)]
    assert keys[0] == keys[3]
    assert len({keys[0], keys[1], keys[2]}) == 3
