"""Manhattan polygons as rectangles, and the canonical rectangles of a clip.

Check values: point-in-polygon by even-odd ray casting on a fine grid (the
plain twins ``rectangles_plain`` and a direct cover count), so the
decompositions cover exactly the polygon's area, each point once; an
array's continued clip by enumerating its lattice by hand.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from pitchguard.geometry.rectangles import (
    canonical_rectangles,
    lattice_rectangles,
    rectangles,
    rectangles_plain,
    same_rectangles,
)

STEP = 5.0


def _cells(rects) -> dict:
    """Grid cells (i, j) whose centres the rectangles cover, with the cover count."""
    out: dict = {}
    for x0, y0, x1, y1 in np.asarray(rects).reshape(-1, 4):
        for i in range(int(np.floor(x0 / STEP)), int(np.ceil(x1 / STEP))):
            for j in range(int(np.floor(y0 / STEP)), int(np.ceil(y1 / STEP))):
                if x0 < (i + 0.5) * STEP < x1 and y0 < (j + 0.5) * STEP < y1:
                    out[(i, j)] = out.get((i, j), 0) + 1
    return out


def _random_manhattan(rng) -> np.ndarray:
    """A comb: a bar with teeth of random lengths (vertices on a 5 nm grid)."""
    teeth = rng.integers(2, 6)
    pts = [(0.0, 0.0)]
    x = 0.0
    for _ in range(teeth):
        w, gap, h = (float(v) * STEP for v in rng.integers(2, 8, 3))
        pts += [(x, 50.0 + h), (x + w, 50.0 + h), (x + w, 50.0)]
        x += w + gap
        pts += [(x, 50.0)]
    pts += [(x, 0.0)]
    p = np.array(pts)
    keep = np.r_[True, np.any(np.diff(p, axis=0) != 0, axis=1)]
    return p[keep]


def test_rectangles_cover_the_polygon_once():
    rng = np.random.default_rng(2)
    for _ in range(20):
        poly = _random_manhattan(rng)
        r = rectangles(poly, 0.1)
        cover = _cells(r)
        assert set(cover) == rectangles_plain(poly, 0.1, STEP)
        assert set(cover.values()) == {1}


def test_canonical_rectangles_depend_only_on_the_union():
    rng = np.random.default_rng(4)
    window = (-20.0, -10.0, 150.0, 120.0)
    for _ in range(20):
        poly = _random_manhattan(rng)
        whole = rectangles(poly, 0.1)
        # The same area cut another way: every rectangle split at a random height,
        # plus a copy of one of them (overlap).
        pieces = []
        for x0, y0, x1, y1 in whole:
            cut = y0 + STEP * rng.integers(0, max(1, int((y1 - y0) / STEP)))
            pieces += (
                [(x0, y0, x1, cut), (x0, cut, x1, y1)] if y0 < cut < y1 else [(x0, y0, x1, y1)]
            )
        pieces.append(tuple(whole[0]))
        a = canonical_rectangles(whole, window, 0.1)
        b = canonical_rectangles(np.array(pieces), window, 0.1)
        assert np.array_equal(a, b)
        cover = _cells(a)
        assert set(cover.values()) == {1}
        wx0, wy0, wx1, wy1 = window
        inside = {
            (i, j)
            for i, j in rectangles_plain(poly, 0.1, STEP)
            if wx0 < (i + 0.5) * STEP < wx1 and wy0 < (j + 0.5) * STEP < wy1
        }
        assert set(cover) == inside


def test_neighbourhood_hashes_follow_the_shapes_around_a_point():
    """Equal neighbourhoods up to a shift hash alike; moving, reshaping or removing a
    shape changes the hash (by construction: the hash is over shape and place)."""
    from pitchguard.geometry.rectangles import neighbourhood_hashes, shape_hashes
    from pitchguard.layout.polygons import PolygonSet

    def square(x, y, s=50.0):
        return np.array([(x, y), (x + s, y), (x + s, y + s), (x, y + s)], dtype=np.float64)

    base = [square(0, 0), square(120, 0), square(0, 200, 80)]
    shifted = [p + (5000.0, -3000.0) for p in base]
    moved = [square(0, 0), square(121, 0), square(0, 200, 80)]
    reshaped = [square(0, 0), square(120, 0), square(0, 200, 81)]
    polys = base + shifted + moved + reshaped
    ps = PolygonSet.from_arrays(polys)
    q = np.repeat(np.arange(4), 3)
    hit = np.arange(12)
    origins = np.array([(0.0, 0.0), (5000.0, -3000.0), (0.0, 0.0), (0.0, 0.0)])
    h = neighbourhood_hashes(q, hit, 4, origins, ps, shape_hashes(ps, 0.01), 0.01)
    assert h[0] == h[1]
    assert len({int(h[0]), int(h[2]), int(h[3])}) == 3
    # The order in which the shapes were found does not matter.
    h2 = neighbourhood_hashes(
        q, hit[[2, 0, 1, 3, 4, 5, 6, 7, 8, 9, 10, 11]], 4, origins, ps, shape_hashes(ps, 0.01), 0.01
    )
    assert h2[0] == h[0]


def test_an_arrays_continued_clip_is_its_lattice_in_the_feature_frame():
    """40 nm squares on a 100 nm square lattice seen through a +-190 nm window: the
    centre and the 8 neighbours whole, the 16 of the next ring (180-220 nm out) cut
    to their 10 nm inside the window (arithmetic: 9 x 1600 + 12 x 400 + 4 x 100 nm^2);
    the same lattice turned by 30 degrees, seen from a feature turned alike, is the
    same clip (the frame turns with the feature)."""
    window = (-190.0, -190.0, 190.0, 190.0)
    got = lattice_rectangles((100.0, 0.0), (0.0, 100.0), (40.0, 40.0), 0.0, window)
    want = []
    for i in range(-2, 3):
        for j in range(-2, 3):
            x0, y0 = 100 * i - 20, 100 * j - 20
            x1, y1 = x0 + 40, y0 + 40
            want.append((max(x0, -190), max(y0, -190), min(x1, 190), min(y1, 190)))
    assert len(got) == 25
    area = np.prod(got[:, 2:] - got[:, :2], axis=1).sum()
    assert area == pytest.approx(9 * 1600 + 12 * 400 + 4 * 100)
    assert same_rectangles(got, np.array(want), 1e-9)
    t = math.radians(30.0)
    a1 = (100 * math.cos(t), 100 * math.sin(t))
    a2 = (-100 * math.sin(t), 100 * math.cos(t))
    turned = lattice_rectangles(a1, a2, (40.0, 40.0), 30.0, window)
    assert same_rectangles(turned, got, 1e-9)


def test_rectangle_sets_match_one_to_one_within_the_tolerance():
    a = np.array([(0.0, 0.0, 10.0, 10.0), (20.0, 0.0, 30.0, 10.0)])
    assert same_rectangles(a, a[::-1], 0.0)  # order does not matter
    assert same_rectangles(a, a + 0.4, 0.5)
    assert not same_rectangles(a, a + 0.6, 0.5)
    assert not same_rectangles(a, a[:1], 1.0)  # a missing rectangle
    assert not same_rectangles(a, np.array([a[0], a[0]]), 1.0)  # not one to one
    assert same_rectangles(np.zeros((0, 4)), np.zeros((0, 4)), 0.0)
