"""The cell a finding belongs to (layout/holders.py) on small hand-built hierarchies.

Expected values follow from the placements written (GDSII's reference
transform: mirror in x, then rotate, then magnify, then move to the origin;
the GDSII stream format's reference record definitions) and, for the context
flag, from the distances drawn: which shapes lie within the finding's range
but outside its region.  The context cases run through the plain walk and
the batch (run.cells.holders_of) alike.
"""

from __future__ import annotations

import math

import gdstk
import numpy as np
import pytest

from pitchguard.layout.hierarchy import HierarchyQuery
from pitchguard.layout.holders import Holder, Holders, in_cell_frame, placement_of
from pitchguard.run.cells import CellMap, holders_of

LD = (1, 0)


def _row(lib):
    row = lib.new_cell("ROW")  # 5 lines 0.1 um wide at pitch 0.2 um, 2 um long
    for k in range(5):
        row.add(gdstk.rectangle((k * 0.2, 0), (k * 0.2 + 0.1, 2.0), layer=1))
    return row


def _query(lib, top):
    return HierarchyQuery(lib, [top], [LD], 1000.0)


def _window_in_row(m, t, box_cell):
    """A window given in ROW's frame, placed into the top frame (nm)."""
    x0, y0, x1, y1 = box_cell
    c = np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]]) @ np.asarray(m).reshape(2, 2).T + t
    return (*c.min(axis=0), *c.max(axis=0))


@pytest.mark.parametrize(
    "rotation,mirror,mag",
    [(0.0, False, 1.0), (90.0, False, 1.0), (180.0, True, 1.0), (270.0, True, 2.0)],
)
def test_a_window_inside_one_placement_belongs_to_its_cell(rotation, mirror, mag):
    lib = gdstk.Library()
    row = _row(lib)
    top = lib.new_cell("TOP")
    top.add(
        gdstk.Reference(
            row,
            (10.0, 20.0),
            rotation=math.radians(rotation),
            magnification=mag,
            x_reflection=mirror,
        )
    )
    top.add(gdstk.Reference(row, (50.0, 20.0)))  # another placement, far away
    h = Holders(_query(lib, top))
    c, s = math.cos(math.radians(rotation)), math.sin(math.radians(rotation))
    m = mag * np.array([[c, -s], [s, c]]) @ np.diag([1.0, -1.0 if mirror else 1.0])
    t = np.array([10_000.0, 20_000.0])
    inner = (250.0, 500.0, 550.0, 1500.0)  # the middle lines, well inside ROW (nm)
    got = h.of(_window_in_row(m, t, inner), LD)
    assert got.cell == "ROW" and got.path == ("TOP", "ROW")
    assert np.allclose(np.reshape(got.m, (2, 2)), m) and np.allclose(got.t, t)
    assert np.allclose(in_cell_frame(_window_in_row(m, t, inner), got.m, got.t), inner)
    x, y, rot, mg, mir = placement_of(got.m, got.t)
    assert (x, y, mir) == (10.0, 20.0, mirror) and math.isclose(rot, rotation)
    assert math.isclose(mg, mag)


def test_a_window_meeting_other_shapes_belongs_to_the_parent():
    lib = gdstk.Library()
    row = _row(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(row, (0.0, 0.0)))
    top.add(gdstk.Reference(row, (10.0, 0.0)))
    top.add(gdstk.Reference(row, (21.2, 0.0)))  # 0.3 um right of the ROW at 20 um
    top.add(gdstk.Reference(row, (20.0, 0.0)))
    top.add(gdstk.rectangle((10.35, 0.9), (10.45, 1.0), layer=1))  # top's own, on ROW 2
    top.add(gdstk.rectangle((0.35, 0.9), (0.45, 1.0), layer=2))  # another layer: no matter
    h = Holders(_query(lib, top))
    # The outer line with its range, reaching past ROW's box into empty space: ROW.
    got = h.of((-300.0, 500.0, 300.0, 1500.0), LD)
    assert got.cell == "ROW" and got.t == (0.0, 0.0)
    # The same on the ROW at 20 um, whose range reaches the next ROW's lines: TOP.
    assert h.of((20_600.0, 500.0, 21_250.0, 1500.0), LD).cell == "TOP"
    # ... and short of them (the boxes still meet): that ROW.
    assert h.of((20_600.0, 500.0, 21_100.0, 1500.0), LD).t == (20_000.0, 0.0)
    # Inside ROW 1: ROW; the same window on ROW 2 meets the top's own shape: TOP.
    assert h.of((250.0, 500.0, 550.0, 1500.0), LD).cell == "ROW"
    got = h.of((10_250.0, 500.0, 10_550.0, 1500.0), LD)
    assert got.cell == "TOP" and got.path == ("TOP",)
    assert got.m == (1.0, 0.0, 0.0, 1.0) and got.t == (0.0, 0.0)


def test_overlapping_placements_with_shapes_in_the_window_give_the_parent():
    lib = gdstk.Library()
    row = _row(lib)
    dot = lib.new_cell("DOT")
    dot.add(gdstk.rectangle((0, 0), (0.05, 0.05), layer=1))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(row, (0.0, 0.0)))
    top.add(gdstk.Reference(dot, (0.4, 1.0)))  # inside ROW's box, in the window
    top.add(gdstk.Reference(dot, (0.4, 1.9)))  # inside ROW's box, outside the window
    h = Holders(_query(lib, top))
    assert h.of((250.0, 500.0, 550.0, 1500.0), LD).cell == "TOP"
    assert h.of((250.0, 100.0, 550.0, 800.0), LD).cell == "ROW"


def test_nested_arrays_give_the_deepest_cell_and_its_path():
    lib = gdstk.Library()
    row = _row(lib)
    block = lib.new_cell("BLOCK")
    block.add(gdstk.Reference(row, (0, 0), columns=3, rows=2, spacing=(2.0, 3.0)))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(block, (100.0, 0.0), columns=2, rows=2, spacing=(10.0, 10.0)))
    h = Holders(_query(lib, top))
    # ROW (column 2, row 1) of BLOCK (column 1, row 0): origin (100 + 10 + 4, 0 + 3) um.
    t = np.array([114_000.0, 3_000.0])
    got = h.of(_window_in_row(np.eye(2), t, (250.0, 500.0, 550.0, 1500.0)), LD)
    assert got.path == ("TOP", "BLOCK", "ROW") and np.allclose(got.t, t)
    # Between two ROWs of a BLOCK (the window spans both): BLOCK, placed at (110, 0) um.
    got = h.of((110_850.0, 500.0, 112_050.0, 1500.0), LD)
    assert got.path == ("TOP", "BLOCK") and np.allclose(got.t, (110_000.0, 0.0))


# -- context: the finding's region held by one placement, its window not -----------
# The finding: ROW's outer line (x 800..900 nm) over y 500..1500 nm; range 400 nm.
REGION = (800.0, 500.0, 900.0, 1500.0)
REACH = 400.0


def _grown(box, reach=REACH):
    return (box[0] - reach, box[1] - reach, box[2] + reach, box[3] + reach)


def _moved(box, dx, dy=0.0):
    return (box[0] + dx, box[1] + dy, box[2] + dx, box[3] + dy)


def _holders_plain(q, regions):
    return [Holders(q).of(_grown(r), LD, r) for r in regions]


def _holders_batch(q, regions):
    cmap = holders_of(
        q, np.array([_grown(r) for r in regions]), np.array(regions), [LD] * len(regions)
    )
    return [
        Holder(cmap.names[c], cmap.paths[p], tuple(m), tuple(t), bool(x))
        for c, p, m, t, x in zip(
            cmap.cell.tolist(),
            cmap.path.tolist(),
            cmap.m.tolist(),
            cmap.t.tolist(),
            cmap.context.tolist(),
            strict=True,
        )
    ]


BOTH = pytest.mark.parametrize("holders", [_holders_plain, _holders_batch], ids=["plain", "batch"])


@BOTH
def test_a_row_placed_alone_holds_its_finding_without_context(holders):
    lib = gdstk.Library()
    row = _row(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(row, (0.0, 0.0)))
    (got,) = holders(_query(lib, top), [REGION])
    assert got.cell == "ROW" and got.path == ("TOP", "ROW") and got.context is False


@BOTH
def test_another_cells_line_within_range_gives_the_parent_with_context(holders):
    lib = gdstk.Library()
    row = _row(lib)
    dot = lib.new_cell("DOT")  # a line 0.1 um wide
    dot.add(gdstk.rectangle((0, 0), (0.1, 2.0), layer=1))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(row, (0.0, 0.0)))
    top.add(gdstk.Reference(dot, (1.1, 0.0)))  # 1100 nm: within 900 + 400, not in the region
    top.add(gdstk.Reference(row, (10.0, 0.0)))
    top.add(gdstk.Reference(dot, (11.4, 0.0)))  # 11400 nm: 100 nm beyond the range
    near, far = holders(_query(lib, top), [REGION, _moved(REGION, 10_000.0)])
    assert near.cell == "TOP" and near.path == ("TOP",) and near.context is True
    assert far.cell == "ROW" and far.t == (10_000.0, 0.0) and far.context is False


@BOTH
def test_the_parents_own_shape_within_range_gives_context(holders):
    lib = gdstk.Library()
    row = _row(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(row, (0.0, 0.0)))
    top.add(gdstk.rectangle((1.1, 0.0), (1.2, 2.0), layer=1))  # TOP's own, within range
    (got,) = holders(_query(lib, top), [REGION])
    assert got.cell == "TOP" and got.context is True


@BOTH
def test_a_region_spanning_two_placements_has_no_context(holders):
    lib = gdstk.Library()
    row = _row(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(row, (0.0, 0.0)))
    top.add(gdstk.Reference(row, (1.0, 0.0)))  # its first line at 1000..1100 nm
    spanning = (800.0, 500.0, 1100.0, 1500.0)  # the space between the two ROWs
    (got,) = holders(_query(lib, top), [spanning])
    assert got.cell == "TOP" and got.context is False


@BOTH
def test_context_is_decided_in_the_cell_the_walk_stops_in(holders):
    lib = gdstk.Library()
    row = _row(lib)
    dot = lib.new_cell("DOT")
    dot.add(gdstk.rectangle((0, 0), (0.1, 2.0), layer=1))
    block = lib.new_cell("BLOCK")
    block.add(gdstk.Reference(row, (0.0, 0.0)))
    block.add(gdstk.Reference(dot, (1.1, 0.0)))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(block, (20.0, 30.0), columns=2, rows=1, spacing=(10.0, 0.0)))
    # ROW in BLOCK (column 1): origin (30, 30) um; DOT within range keeps it in BLOCK.
    (got,) = holders(_query(lib, top), [_moved(REGION, 30_000.0, 30_000.0)])
    assert got.path == ("TOP", "BLOCK") and got.t == (30_000.0, 30_000.0)
    assert got.context is True


def test_cell_maps_carry_context_through_take_and_joined():
    lib = gdstk.Library()
    row = _row(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(row, (0.0, 0.0)))
    top.add(gdstk.rectangle((11.1, 0.0), (11.2, 2.0), layer=1))
    top.add(gdstk.Reference(row, (10.0, 0.0)))
    q = _query(lib, top)
    regions = np.array([REGION, _moved(REGION, 10_000.0), REGION])
    windows = np.array([_grown(r) for r in regions])
    whole = holders_of(q, windows, regions, [LD] * 3)
    assert whole.context.tolist() == [False, True, False]  # the second has TOP's line near
    assert whole.take([1, 0]).context.tolist() == [True, False]
    parts = [holders_of(q, windows[a:b], regions[a:b], [LD] * (b - a)) for a, b in ((0, 1), (1, 3))]
    joined = CellMap.joined(parts)
    assert joined.context.tolist() == whole.context.tolist()
    assert [joined.names[c] for c in joined.cell] == ["ROW", "TOP", "ROW"]
