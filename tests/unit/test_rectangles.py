"""Manhattan polygons as rectangles, and the canonical rectangles of a clip.

Check values: point-in-polygon by even-odd ray casting on a fine grid (the
plain twins ``rectangles_plain`` and a direct cover count), so the
decompositions cover exactly the polygon's area, each point once.
"""

from __future__ import annotations

import numpy as np

from pitchguard.geometry.rectangles import canonical_rectangles, rectangles, rectangles_plain

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
