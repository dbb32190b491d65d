"""Line ends: found on a layer's edges, what each faces, and their clip images.

Check values:

* Geometry by construction: a rectangle of length L > w has two ends of
  width w (its short edges); an L-shaped wire has two; a square has none
  wider than ``width_max``; the gap to a facing edge is the drawn distance.
* The fast imaging path (``point_images.PointImages``: coherent systems dropped
  within ``KERNEL_TOL``, images at +z only) against the plain Abbe sum
  (``aerial2d.abbe_image_2d``) at every focus: the truncation moves an
  intensity by at most KERNEL_TOL of clear field (the bound proved in
  ``PointImages``), and
  the aberration-free image of a real mask under a point-symmetric source is
  the same at +z and -z (the defocus phase only conjugates each source
  point's pupil, and a point-symmetric source pairs s with -s; from memory,
  any Fourier-optics text on partially coherent imaging).
"""

from __future__ import annotations

import math

import gdstk
import numpy as np
import pytest

from decks import DRY_ARF_DECK
from pitchguard.deck import parse_deck
from pitchguard.geometry.features import build_features
from pitchguard.geometry.line_ends import facing, facing_plain, find_line_ends
from pitchguard.layout.polygons import PolygonSet
from pitchguard.optics.aerial import Optics, mask_amplitudes, source_points
from pitchguard.optics.aerial2d import abbe_image_2d, cell_spectra, exposure_orders
from pitchguard.optics.point_images import KERNEL_TOL
from pitchguard.optics.tips import tip_cell, tip_metrics

GRID = 1.0


def _edges(rects):
    polys = [gdstk.rectangle((x0, y0), (x1, y1)).points for x0, y0, x1, y1 in rects]
    return build_features(PolygonSet.from_arrays(polys), GRID)


def test_a_rectangle_has_its_short_edges_as_ends():
    ends = find_line_ends(_edges([(0, 0, 1000, 90)]), 200.0, GRID)
    assert len(ends) == 2
    assert sorted(ends.width.tolist()) == [90.0, 90.0]
    assert sorted(map(tuple, ends.mid.tolist())) == [(0.0, 45.0), (1000.0, 45.0)]
    assert sorted(map(tuple, np.round(ends.normal).tolist())) == [(-1.0, 0.0), (1.0, 0.0)]
    assert ends.side.tolist() == [1000.0, 1000.0]


def test_an_l_shaped_wire_has_two_ends_and_a_square_none():
    # Two touching rectangles merged into an L; a 300 nm square beside it.
    ends = find_line_ends(
        _edges([(0, 0, 1000, 90), (910, 0, 1000, 800), (3000, 0, 3300, 300)]), 200.0, GRID
    )
    assert len(ends) == 2
    assert sorted(map(tuple, ends.mid.tolist())) == [(0.0, 45.0), (955.0, 800.0)]


def test_tip_to_tip_and_tip_to_side_gaps():
    edges = _edges(
        [(0, 0, 1000, 90), (1060, 0, 2000, 90), (0, 500, 1000, 590), (1030, 400, 1120, 900)]
    )
    ends = facing(find_line_ends(edges, 200.0, GRID), edges, 200.0, GRID)
    by_mid = {tuple(m): k for k, m in enumerate(ends.mid.tolist())}
    a, b = by_mid[(1000.0, 45.0)], by_mid[(1060.0, 45.0)]
    assert ends.gap[a] == ends.gap[b] == 60.0
    assert ends.facing_end[a] == b and ends.facing_end[b] == a  # tip to tip
    c = by_mid[(1000.0, 545.0)]
    assert ends.gap[c] == 30.0 and ends.facing_end[c] == -1  # tip to side
    far = by_mid[(0.0, 45.0)]
    assert math.isinf(ends.gap[far]) and ends.facing[far] == -1


def test_facing_agrees_with_its_plain_twin_on_random_wires():
    rng = np.random.default_rng(5)
    rects = []
    for _ in range(60):
        x, y = rng.integers(0, 4000, 2)
        w, n = rng.integers(40, 120), rng.integers(150, 900)
        rects.append((x, y, x + n, y + w) if rng.random() < 0.5 else (x, y, x + w, y + n))
    edges = _edges(rects)
    ends = find_line_ends(edges, 150.0, GRID)
    assert len(ends) > 40
    got = facing(ends, edges, 250.0, GRID).gap
    want = facing_plain(ends, edges, 250.0, GRID)
    assert np.array_equal(np.isfinite(got), np.isfinite(want))
    fin = np.isfinite(want)
    assert fin.sum() > 5
    np.testing.assert_allclose(got[fin], want[fin], atol=1e-9)


def _rule(field: str, illumination: str | None = None):
    text = DRY_ARF_DECK.replace('field = "clear"', f'field = "{field}"')
    if illumination:
        text = text.replace('{ shape = "conventional", sigma = 0.8 }', illumination)
    return parse_deck(text).layers[0]


CLIPS = (
    # w, gap, rectangles (wafer nm, tip frame: the tip at 0, the gap along +x)
    (90.0, 60.0, [(-600, -45, 0, 45), (60, -45, 660, 45)]),
    (90.0, 150.0, [(-600, -45, 0, 45), (150, -45, 750, 45), (-600, 135, 0, 225)]),
    (130.0, 40.0, [(-600, -65, 0, 65), (40, -400, 170, 400)]),
)
SOURCES = (
    None,
    '{ shape = "annular", sigma_inner = 0.5, sigma_outer = 0.8 }',
    '{ shape = "dipole", sigma_inner = 0.5, sigma_outer = 0.8, opening_deg = 35.0, axis = "x" }',
)


@pytest.mark.parametrize("field", ["clear", "dark"])
@pytest.mark.parametrize("source", SOURCES)
def test_the_fast_path_agrees_with_the_plain_abbe_sum(field, source):
    rule = _rule(field, source)
    for w, gap, rects in CLIPS:
        rects = np.array(rects, dtype=np.float64)
        for angle in (0.0, 90.0):
            fast = tip_metrics(rule, rects, w, gap, 600.0, angle)
            plain = tip_metrics(rule, rects, w, gap, 600.0, angle, plain=True)
            assert fast.closed_at_best == plain.closed_at_best
            assert fast.threshold == pytest.approx(plain.threshold, abs=KERNEL_TOL)
            if math.isfinite(plain.pullback_nm):
                assert fast.pullback_nm == pytest.approx(plain.pullback_nm, abs=1.0)
            same = fast.closes_at_focus_nm == plain.closes_at_focus_nm
            assert same or (
                math.isnan(fast.closes_at_focus_nm) and math.isnan(plain.closes_at_focus_nm)
            )


def test_a_real_mask_images_alike_at_plus_and_minus_focus():
    rule = _rule("clear", SOURCES[1])
    e = rule.exposure
    cell = tip_cell(rule, np.array(CLIPS[1][2], dtype=np.float64))
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    spec = cell_spectra([cell], orders, *mask_amplitudes(e, rule.field))[0]
    x = np.linspace(-300.0, 300.0, 41)
    y = np.linspace(-150.0, 150.0, 7)
    xx, yy = (v.ravel() for v in np.meshgrid(x, y))
    z = rule.focus_nm[-1]
    src = source_points(e, 0.0)
    plain_plus = abbe_image_2d(spec, orders, Optics.of(e), src, z, xx, yy)
    plain_minus = abbe_image_2d(spec, orders, Optics.of(e), src, -z, xx, yy)
    np.testing.assert_allclose(plain_plus, plain_minus, atol=1e-12)
    assert np.ptp(plain_plus) > 0.1  # a real image, not a flat field


@pytest.mark.parametrize("gap", [120.0, 160.0])
def test_a_printed_gap_between_two_tips_opens_by_both_pullbacks(gap):
    # Geometry: two equal lines end to end, mirror images about the gap's middle,
    # pull back equally, so the gap prints its drawn width plus twice one tip's
    # pullback (to the sampling step along the axis, lambda/NA / 32).
    rule = _rule("clear")
    rects = np.array([(-600, -45, 0, 45), (gap, -45, gap + 600, 45)], dtype=np.float64)
    m = tip_metrics(rule, rects, 90.0, gap, 600.0, 0.0)
    assert not m.closed_at_best and m.pullback_nm > 1.0
    step = rule.exposure.lambda_over_na_nm / 32
    assert m.gap_printed_nm == pytest.approx(gap + 2 * m.pullback_nm, abs=step)
