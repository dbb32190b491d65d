"""Findings per cell (judge/per_cell.py): grouping by cell, place in the cell and message.

The boxes taken into a cell's frame are checked against the one-at-a-time
inverse (``layout.holders.in_cell_frame``), and the orientations against
``placement_of``; both follow GDSII's reference transform (mirror in x,
turn, scale, move: the stream format's reference record definitions).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from decks import DEMO_DECK, SAMPLE_GDS
from pitchguard.deck import load_deck
from pitchguard.judge.findings import FindingSet, placed, replaced
from pitchguard.judge.per_cell import boxes_in_cells, group_by_cell, orientations
from pitchguard.layout.holders import in_cell_frame, placement_of
from pitchguard.run.cells import CellMap
from pitchguard.run.scan import scan_layout


def _matrix(rot_deg, mag, mirrored):
    c, s = math.cos(math.radians(rot_deg)), math.sin(math.radians(rot_deg))
    return (mag * np.array([[c, -s], [s, c]]) @ np.diag([1.0, -1.0 if mirrored else 1.0])).ravel()


def test_boxes_and_orientations_agree_with_the_one_at_a_time_forms():
    rng = np.random.default_rng(3)
    n = 200
    rot = rng.choice([0.0, 90.0, 180.0, 270.0, 30.0], n)
    mag = rng.choice([1.0, 2.0, 0.5], n)
    mir = rng.random(n) < 0.5
    m = np.array([_matrix(*a) for a in zip(rot, mag, mir, strict=True)])
    t = rng.uniform(-1e6, 1e6, (n, 2))
    lo = rng.uniform(-1e5, 1e5, (n, 2))
    boxes = np.hstack([lo, lo + rng.uniform(1.0, 5e3, (n, 2))])
    got = boxes_in_cells(boxes, m, t)
    want = np.array([in_cell_frame(b, mm, tt) for b, mm, tt in zip(boxes, m, t, strict=True)])
    assert np.allclose(got, want, rtol=0, atol=1e-6)
    o = orientations(m)
    for k in range(n):
        _, _, r, g, f = placement_of(m[k], t[k])
        assert (o[k, 0], o[k, 1], bool(o[k, 2])) == (r, g, f) == (rot[k], mag[k], mir[k])


@pytest.fixture(scope="module")
def demo():
    return list(scan_layout(SAMPLE_GDS, load_deck(DEMO_DECK)).findings)


def test_placements_of_one_cell_finding_form_one_entry(demo):
    """A finding moved with its cell (turned placements move its box with them) is
    one entry; a different place in the cell, or another cell, is another."""
    # A square box: turned by a quarter it covers the same extents.
    x0, y0 = demo[0].bbox_nm[:2]
    f = replaced(demo[0], bbox_nm=(x0, y0, x0 + 800.0, y0 + 800.0))
    # The finding's cell "C" has its origin at the finding's lower-left corner.
    local = (0.0, 0.0, 800.0, 800.0)
    places = [(0.0, False, (5e5, 0.0)), (90.0, False, (0.0, 7e5)), (180.0, True, (-3e5, 2e5))]
    items, ms, ts = [], [], []
    for rot, mir, t in places:
        m = _matrix(rot, 1.0, mir)
        corners = np.array([[0, 0], [local[2], 0], [local[2], local[3]], [0, local[3]]])
        c = corners @ m.reshape(2, 2).T + t
        items.append(placed(f, c[:, 0].min() - x0, c[:, 1].min() - y0))
        ms.append(m)
        ts.append(t)
    # The same cell, another place in it; and a finding of another cell.
    items.append(placed(f, 1e6, 0.0))
    ms.append(_matrix(0.0, 1.0, False))
    ts.append((1e6 + 100.0, 0.0))
    items.append(placed(f, 2e6, 0.0))
    ms.append(_matrix(0.0, 1.0, False))
    ts.append((2e6, 0.0))
    cells = CellMap(
        ("C", "D"),
        (("TOP", "C"), ("TOP", "D")),
        np.array([0, 0, 0, 0, 1], np.int32),
        np.array([0, 0, 0, 0, 1], np.int32),
        np.array(ms),
        np.array(ts, dtype=float),
    )
    groups = group_by_cell(FindingSet.of(items), cells)
    assert [(g.cell, g.placements) for g in groups] == [("C", 3), ("C", 1), ("D", 1)]
    assert [g.items.tolist() for g in groups] == [[0, 1, 2], [3], [4]]
    assert np.allclose(groups[0].cell_bbox_nm, local, atol=1e-3)
    assert groups[0].finding == items[0] and groups[0].path == ("TOP", "C")


def test_ties_of_the_worst_site_do_not_split_a_cell_finding(demo):
    """Placements of one region whose worst site differs (an outer line in one, an
    interior one in another) are one entry; another severity is another entry."""
    f = demo[0]
    items = [
        f,
        replaced(placed(f, 1e6, 0.0), context="outer", message=f.message + " (outer)"),
        replaced(placed(f, 2e6, 0.0), severity="risk"),
    ]
    eye = np.array([[1.0, 0.0, 0.0, 1.0]] * 3)
    cells = CellMap(
        ("C",),
        (("TOP", "C"),),
        np.zeros(3, np.int32),
        np.zeros(3, np.int32),
        eye,
        np.array([[0.0, 0.0], [1e6, 0.0], [2e6, 0.0]]),
    )
    groups = group_by_cell(FindingSet.of(items), cells)
    assert [g.items.tolist() for g in groups] == [[0, 1], [2]]
