"""The holders of many windows at once (layout/holders_batch.py, via run.cells.holders_of)
against the plain walk, one window at a time (layout/holders.py, holders_of_plain).

The reference is the plain walk: the rule of layout/holders.py applied window by
window with HierarchyQuery's own placement and polygon searches.  Random
hierarchies hold what the batch must get right: several levels, GDSII/OASIS
arrays (rectangular, skewed, degenerate, explicit offsets), single placements
many enough to be kept as an offset list, turns by right angles and by other
angles, mirrors, magnifications, overlapping placements, shapes of a parent
near its children's, cells with many polygons, several top cells.  Windows are
the boxes of placed polygons grown by a range (on the nm grid, so that window
edges fall on polygon edges and ties are common) and random boxes of any size.
"""

from __future__ import annotations

import functools
import math

import gdstk
import numpy as np
import pytest

from pitchguard.layout.hierarchy import HierarchyQuery
from pitchguard.layout.holders_batch import first_of_groups
from pitchguard.run.cells import holders_of, holders_of_plain

LAYERS = [(1, 0), (2, 0)]
ANGLES = (0.0, 90.0, 180.0, 270.0, 30.0)  # degrees; 30 is neither exact nor axis-aligned
MAGS = (1.0, 1.0, 2.0, 0.5, 1.25)


def _rects(rng, cell, n, span, layer=1, size=(2, 30)):
    """``n`` rectangles on a 10 nm grid (um) within ``span`` um; a few triangles."""
    for _ in range(n):
        x, y = rng.integers(0, int(span * 100), 2) / 100
        w, h = rng.integers(*size, 2) / 100
        if rng.random() < 0.1:
            cell.add(gdstk.Polygon([(x, y), (x + w, y), (x, y + h)], layer=layer))
        else:
            cell.add(gdstk.rectangle((x, y), (x + w, y + h), layer=layer))


def _ref(rng, cell, origin, **kw):
    return gdstk.Reference(
        cell,
        origin,
        rotation=math.radians(float(rng.choice(ANGLES))),
        magnification=float(rng.choice(MAGS)),
        x_reflection=bool(rng.random() < 0.4),
        **kw,
    )


def _random_library(seed: int):
    """A random hierarchy: ``(library, top cells)``."""
    rng = np.random.default_rng(seed)
    lib = gdstk.Library()
    line = lib.new_cell("LINE")  # lines at pitch 0.2 um
    for k in range(5):
        line.add(gdstk.rectangle((k * 0.2, 0), (k * 0.2 + 0.1, 1.5), layer=1))
    blob = lib.new_cell("BLOB")
    _rects(rng, blob, 12, 1.0)
    _rects(rng, blob, 4, 1.0, layer=2)
    dense = lib.new_cell("DENSE")  # more polygons than FEW_POLYGONS: the bucket grid
    _rects(rng, dense, 150, 3.0, size=(2, 8))
    lib.new_cell("EMPTY")
    mid = lib.new_cell("MID")
    mid.add(gdstk.Reference(line, (0, 0), columns=3, rows=2, spacing=(1.2, 2.0)))
    mid.add(_ref(rng, blob, (4.0, 0.5)))
    mid.add(_ref(rng, blob, (4.6, 1.0)))  # overlapping the one before
    for k in range(9):  # one orientation, many times: an offset list
        mid.add(gdstk.Reference(blob, (k * 1.3, 5.0)))
    mid.add(gdstk.Reference(lib.cells[-2], (1, 1)))  # an empty cell
    _rects(rng, mid, 6, 6.0)  # the parent's own shapes, near its children's
    skew = lib.new_cell("SKEW")
    ref = _ref(rng, line, (0, 0))
    ref.repetition = gdstk.Repetition(3, 2, v1=(1.5, 0.3), v2=(-0.2, 2.1))
    skew.add(ref)
    ref = gdstk.Reference(blob, (8, 0))
    ref.repetition = gdstk.Repetition(offsets=[(0, 0), (1.1, 0.2), (2.5, -0.4), (0.3, 1.7)])
    skew.add(ref)
    if rng.random() < 0.5:  # collinear lattice vectors: the plain search
        ref = gdstk.Reference(line, (0, -3))
        ref.repetition = gdstk.Repetition(3, 2, v1=(1.5, 0), v2=(3.0, 0))
        skew.add(ref)
    top = lib.new_cell("TOP")
    top.add(_ref(rng, mid, (0, 0), columns=2, rows=2, spacing=(16.0, 14.0)))
    top.add(_ref(rng, mid, (40.0, 3.0)))
    top.add(_ref(rng, skew, (5.0, 32.0), columns=2, rows=1, spacing=(14.0, 0)))
    top.add(_ref(rng, dense, (48.0, 30.0)))
    top.add(_ref(rng, line, (float(rng.uniform(0, 50)), float(rng.uniform(0, 40)))))
    top.add(_ref(rng, blob, (46.0, 1.0), columns=4, rows=3, spacing=(1.0, 1.0)))  # abutting
    _rects(rng, top, 25, 60.0)
    tops = [top]
    if rng.random() < 0.4:  # another top cell, apart or overlapping
        other = lib.new_cell("OTHER")
        other.add(
            _ref(rng, blob, (float(rng.uniform(0, 90)), 5.0), columns=3, rows=3, spacing=(2.0, 2.0))
        )
        tops.append(other)
    return lib, tops


def _windows(rng, lib, tops, q, n):
    """``(windows, regions, lds)``: placed polygons' boxes (nm, on the nm grid) grown by
    a range, and random boxes."""
    polys = [p for t in tops for ld in LAYERS for p in t.get_polygons(layer=ld[0], datatype=ld[1])]
    boxes, lds = [], []
    for _ in range(n):
        if rng.random() < 0.8:
            p = polys[int(rng.integers(len(polys)))]
            (x0, y0), (x1, y1) = p.bounding_box()
            b = np.round(np.array([x0, y0, x1, y1]) * 1000.0)
            if rng.random() < 0.3:  # a region spanning a neighbour too
                b[2:] += rng.integers(0, 2000, 2)
            lds.append((p.layer, p.datatype))
        else:
            x0, y0, x1, y1 = q.bounding_box()
            c = rng.uniform((x0, y0), (x1, y1))
            half = rng.uniform(1.0, 3000.0, 2)
            b = np.concatenate([c - half, c + half])
            lds.append(LAYERS[int(rng.integers(2))])
        boxes.append(b)
    regions = np.array(boxes)
    reach = rng.choice([0.0, 20.0, 100.0, 300.0, 428.88888889, 1500.0], n)[:, None]
    windows = regions + reach * np.array([-1.0, -1.0, 1.0, 1.0])
    # Findings with one window and different regions (layers of one source, other
    # ranges): a window's walk is shared, its region's verdict is not.
    k = rng.choice(n, n // 10, replace=False)
    j = rng.choice(n, n // 10, replace=False)
    windows[j] = windows[k]
    regions[j] = np.hstack([windows[k, :2], (windows[k, :2] + windows[k, 2:]) / 2])
    for a, b in zip(j.tolist(), k.tolist(), strict=True):
        lds[a] = lds[b]
    return windows, regions, lds


def _resolved(cmap):
    """Per finding: (cell, path, m, t, context), names resolved."""
    return [
        (cmap.names[c], cmap.paths[p], tuple(m), tuple(t), bool(x))
        for c, p, m, t, x in zip(
            cmap.cell.tolist(),
            cmap.path.tolist(),
            cmap.m.tolist(),
            cmap.t.tolist(),
            cmap.context.tolist(),
            strict=True,
        )
    ]


SEEDS = range(24)


@functools.cache
def _case(seed: int):
    """``(batch, plain)`` holders of one random hierarchy's windows, resolved."""
    rng = np.random.default_rng(1000 + seed)
    lib, tops = _random_library(seed)
    q = HierarchyQuery(lib, tops, LAYERS, 1000.0)
    windows, regions, lds = _windows(rng, lib, tops, q, 250)
    fast = _resolved(holders_of(q, windows, regions, lds))
    return fast, _resolved(holders_of_plain(q, windows, regions, lds))


@pytest.mark.parametrize("seed", SEEDS)
def test_batch_equals_plain_on_random_hierarchies(seed):
    fast, plain = _case(seed)
    bad = [k for k in range(len(fast)) if fast[k] != plain[k]]
    assert not bad, f"window {bad[0]}: batch {fast[bad[0]]} plain {plain[bad[0]]}"


def test_the_random_hierarchies_reach_every_case():
    """The comparison above is not vacuous: holders at every depth, through every
    kind of placement, with and without context."""
    depths, cells, context = set(), set(), set()
    for seed in SEEDS:
        for cell, path, _, _, ctx in _case(seed)[1]:
            depths.add(len(path))
            cells.add(cell)
            context.add((len(path), ctx))
    assert depths == {1, 2, 3}
    assert {"TOP", "MID", "SKEW", "LINE", "BLOB", "DENSE"} <= cells
    assert {(1, True), (1, False), (2, True), (2, False), (3, False)} <= context


def test_batch_equals_plain_on_a_cell_with_many_polygons():
    """A top cell with more polygons than HierarchyQuery checks one by one (its bucket
    grid), placed in turn, windows of every size."""
    rng = np.random.default_rng(7)
    lib = gdstk.Library()
    big = lib.new_cell("BIG")
    _rects(rng, big, 5000, 80.0, size=(2, 12))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(big, (0, 0), rotation=math.radians(90.0)))
    top.add(gdstk.Reference(big, (100.0, 0), x_reflection=True, magnification=1.5))
    _rects(rng, top, 5000, 200.0, size=(2, 12))
    q = HierarchyQuery(lib, [top], LAYERS, 1000.0)
    windows, regions, lds = _windows(rng, lib, [top], q, 300)
    assert _resolved(holders_of(q, windows, regions, lds)) == _resolved(
        holders_of_plain(q, windows, regions, lds)
    )


def test_batch_equals_plain_with_hundreds_of_single_placements():
    """A cell placing hundreds of cells one at a time, overlapping, in any orientation
    (too few of each to be kept as an offset list): their bulk box search."""
    rng = np.random.default_rng(11)
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for c in range(70):
        cell = lib.new_cell(f"C{c}")
        _rects(rng, cell, 4, 1.5)
        for _ in range(5):
            top.add(_ref(rng, cell, tuple(rng.uniform(0, 40, 2))))
    _rects(rng, top, 20, 40.0)
    q = HierarchyQuery(lib, [top], LAYERS, 1000.0)
    assert sum(kind == "one" for _, _, (kind, _) in q.cells["TOP"].refs) > 256  # grid of 2x2
    windows, regions, lds = _windows(rng, lib, [top], q, 150)
    fast = _resolved(holders_of(q, windows, regions, lds))
    assert fast == _resolved(holders_of_plain(q, windows, regions, lds))
    assert len({cell for cell, *_ in fast}) > 10


def test_first_of_groups_numbers_groups_by_first_row():
    keys = np.array([[3.0, 1.0], [1.0, 2.0], [3.0, 1.0], [0.0, 0.0], [1.0, 2.0], [3.0, 1.0]])
    first, inverse = first_of_groups(keys)
    # By hand: groups in order of their first rows 0, 1, 3.
    assert first.tolist() == [0, 1, 3]
    assert inverse.tolist() == [0, 1, 0, 2, 1, 0]
