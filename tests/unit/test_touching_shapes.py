"""Shapes that touch print as one piece: one feature, and no cut holds two
abutting intervals (geometry.features, geometry.cuts).

The layout library's union leaves shapes that only share a stretch of edge
as separate outlines; these cases are the junctions of real cells (see
tests/integration/test_real_cells.py) drawn small.
"""

from __future__ import annotations

import numpy as np
import pytest

from pitchguard.geometry.cuts import site_cuts
from pitchguard.geometry.features import build_features
from pitchguard.geometry.sites import find_sites
from pitchguard.layout.polygons import PolygonSet


def _rect(x0, y0, x1, y1):
    return np.array([(x0, y0), (x1, y0), (x1, y1), (x0, y1)], dtype=np.float64)


def _area(edges) -> float:
    """Area enclosed by the oriented edges (shoelace over the edge soup)."""
    a, b = edges.a, edges.b
    return 0.5 * float(np.sum(a[:, 0] * b[:, 1] - b[:, 0] * a[:, 1]))


CASES = {
    # name: (shapes, features, area nm^2) -- areas by arithmetic
    "T junction": (
        [_rect(0, 0, 140, 2000), _rect(-1000, 2000, 1140, 2330)],
        1,
        140 * 2000 + 2140 * 330,
    ),
    "L junction": ([_rect(0, 0, 150, 1000), _rect(150, 850, 900, 1000)], 1, 150_000 + 750 * 150),
    "abutting pieces": ([_rect(0, 0, 100, 500), _rect(0, 500, 100, 1200)], 1, 100 * 1200),
    "comb on a bar": (
        [_rect(-200, 2000, 1500, 2300)]
        + [_rect(k * 280, 0, k * 280 + 140, 2000) for k in range(5)],
        1,
        1700 * 300 + 5 * 140 * 2000,
    ),
    "apart by one grid step": ([_rect(0, 0, 100, 500), _rect(0, 501, 100, 1200)], 2, 100 * 1199),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_touching_shapes_are_one_feature(name):
    shapes, features, area = CASES[name]
    edges = build_features(PolygonSet.from_arrays(shapes), 1.0)
    assert len(np.unique(edges.feature)) == features == edges.n_features
    assert _area(edges) == pytest.approx(area)


def test_a_polygon_touching_itself_is_one_clean_outline():
    """A polygon whose boundary runs over one stretch twice (a zero-width slit,
    as drawn in a manufactured transistor cell): the doubled stretch is no edge."""
    slit = np.array(
        [
            (615, 2025),
            (545, 2025),
            (545, 4175),
            (615, 4175),
            (615, 4870),
            (395, 4870),
            (395, 2025),
            (115, 2025),
            (115, 4175),
            (395, 4175),
            (395, 4870),
            (-105, 4870),
            (-105, 4175),
            (-35, 4175),
            (-35, 2025),
            (-105, 2025),
            (-105, 1330),
            (615, 1330),
        ],
        dtype=np.float64,
    )
    edges = build_features(PolygonSet.from_arrays([slit]), 1.0)
    on_slit = (edges.a[:, 0] == 395) & (edges.b[:, 0] == 395)
    ys = np.sort(np.concatenate([edges.a[on_slit, 1], edges.b[on_slit, 1]]))
    # Only the notch's side (2025..4175) is boundary at x = 395; 4175..4870 is inside.
    assert ys.tolist() == [2025.0, 4175.0]


def _cut_bounds(shapes, reach=900.0):
    edges = build_features(PolygonSet.from_arrays(shapes), 1.0)
    sites, _ = find_sites(edges, 100.0, reach, 1.0)
    cuts = site_cuts(edges, sites, reach, 1.0).cuts
    return [c.bounds for c in cuts]


@pytest.mark.parametrize("name", sorted(CASES))
def test_no_cut_holds_abutting_intervals(name):
    bounds = _cut_bounds(CASES[name][0])
    assert bounds, "no cut to check"
    for b in bounds:
        assert all(b[k] < b[k + 1] for k in range(len(b) - 1)), b


def test_random_junctions_never_give_abutting_intervals():
    """Random combs, bars and stubs on a 5 nm grid that touch end to side."""
    rng = np.random.default_rng(16)
    checked = 0
    for _ in range(40):
        shapes = []
        for _ in range(rng.integers(3, 9)):
            x, y = rng.integers(0, 200) * 5, rng.integers(0, 200) * 5
            w, h = rng.integers(20, 40) * 5, rng.integers(60, 300) * 5
            shapes.append(_rect(x, y, x + w, y + h))
            # A bar across its top end, touching it.
            shapes.append(_rect(x - 200, y + h, x + w + 300, y + h + 150))
        for b in _cut_bounds(shapes):
            assert all(b[k] < b[k + 1] for k in range(len(b) - 1)), b
            checked += 1
    assert checked > 100  # cuts exist to check (each layout has several sites)


def _changes(shapes, probe, reach=900.0):
    edges = build_features(PolygonSet.from_arrays(shapes), 1.0)
    sites, _ = find_sites(edges, 100.0, reach, 1.0)
    cut_set = site_cuts(edges, sites, reach, 1.0, probe_nm=probe)
    return sites, cut_set.changes


def test_a_site_near_a_line_end_or_junction_is_not_a_1d_cut():
    """Lines 3 um long at pitch 280 nm, one of them only 300 nm long: its sites lie
    within 200 nm of its ends, so a cut there does not see a line that runs on
    unchanged (the probe finds the end); the long lines' sites far from any end
    and from the short line do."""
    shapes = [_rect(k * 280, 0, k * 280 + 140, 3000) for k in range(5)]
    shapes.append(_rect(5 * 280, 1350, 5 * 280 + 140, 1650))  # a 300 nm stub
    sites, changes = _changes(shapes, probe=200.0)
    mid = sites.midpoints()
    on_stub = (mid[:, 0] > 5 * 280 - 1) & (mid[:, 0] < 5 * 280 + 141)
    assert on_stub.any() and changes[on_stub].all()
    far = (mid[:, 0] < 3 * 280) & (np.abs(mid[:, 1] - 1500) > 900)
    assert far.any() and not changes[far].any()
    # Without the probe nothing is flagged (the default of site_cuts).
    assert not _changes(shapes, probe=0.0)[1].any()


def test_a_line_meeting_the_cut_end_on_beyond_the_feature_is_a_change():
    """A comb as drawn in a manufactured decap cell (sky130_fd_sc_hd, met1): a
    320 nm bar with fingers hanging from it, and between them fingers from
    below that stop 140 nm short of the bar.  The bar's far edge between two
    hanging fingers is a piece 450 nm long (its width changes where they
    join), so its middle is 225 nm from the piece's ends; its cut runs down
    the length of a finger from below.  That cut is no 1-D profile: 70 nm to
    either side it misses the finger.  The site is 2-D."""
    bar = _rect(0, 4270, 2420, 4590)
    hanging = [_rect(x, 460, x + w, 4270) for x, w in ((0, 270), (720, 140), (1280, 140))]
    rising = [_rect(x, 320, x + 140, 4130) for x in (440, 1000)]
    sites, changes = _changes([bar, *hanging, *rising], probe=165.0, reach=990.0)
    mid = sites.midpoints()
    top = (np.abs(mid[:, 1] - 4590) < 0.5) & (mid[:, 0] > 270) & (mid[:, 0] < 720)
    assert top.sum() == 1 and changes[top].all()
    # A long finger's side, far from its ends, still runs on unchanged.
    side = (np.abs(mid[:, 0] - 440) < 0.5) & (np.abs(mid[:, 1] - 2200) < 600)
    assert side.any() and not changes[side].any()


def test_a_slanted_array_is_not_a_change_along_its_lines():
    """Grid snapping makes a 45 degree edge a staircase: crossings of the probe
    cuts move by a grid step or two, which is not a change of the neighbourhood."""
    import math

    c, s = math.cos(math.pi / 4), math.sin(math.pi / 4)
    shapes = []
    for k in range(6):
        x0 = k * 200.0
        box = np.array([(x0, 0), (x0 + 100, 0), (x0 + 100, 4000), (x0, 4000)])
        rot = np.round(box @ np.array([[c, s], [-s, c]]))
        shapes.append(rot)
    sites, changes = _changes(shapes, probe=150.0)
    long_ = (sites.u1 - sites.u0) > 1000
    assert long_.any() and not changes[long_].any()
