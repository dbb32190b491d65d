"""The hull of a region's site corners (judge.regions.convex_hull), against an independent one.

Reference: scipy.spatial.ConvexHull (Qhull), a separate build from gdstk's.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import ConvexHull

from pitchguard.judge.regions import convex_hull

MIN_CASES = 40  # of 300 seeded sets, each kind below must occur at least this often


def _boundary_points_off_the_vertices(pts: np.ndarray, vertices: np.ndarray) -> int:
    """Points lying on a hull edge strictly between its two vertices (collinear with it)."""
    a, b = vertices, np.roll(vertices, -1, axis=0)
    ab, ap = b - a, pts[:, None, :] - a[None, :, :]
    cross = ab[None, :, 0] * ap[..., 1] - ab[None, :, 1] * ap[..., 0]
    along = np.einsum("pek,ek->pe", ap, ab)
    on_edge = (np.abs(cross) < 1e-6) & (along > 0) & (along < np.einsum("ek,ek->e", ab, ab))
    return int(on_edge.any(axis=1).sum())


def test_hull_vertices_equal_qhull_on_random_point_sets():
    """Both kinds of set are compared: general ones, and ones with points on a hull
    edge between its corners (site corners share lines), which a hull must leave out."""
    rng = np.random.default_rng(5)
    kinds = {"points on an edge": 0, "general": 0}
    for k in range(300):
        pts = np.round(rng.uniform(-5000, 5000, (int(rng.integers(3, 80)), 2)), 1)
        if k % 3 == 0:  # many points on shared lines, as site corners are
            pts[:, 0] = np.round(pts[:, 0] / 1000) * 1000
        pts = np.unique(pts, axis=0)
        ref = pts[ConvexHull(pts).vertices]  # counter-clockwise in 2-D (scipy docs)
        got = convex_hull(np.concatenate([pts, pts[:5]]))  # repeats are dropped
        assert {tuple(p) for p in got.tolist()} == {tuple(p) for p in ref.tolist()}
        on_edge = _boundary_points_off_the_vertices(pts, ref)
        kinds["points on an edge" if on_edge else "general"] += 1
    assert min(kinds.values()) >= MIN_CASES, kinds


def test_hull_of_a_rectangle_with_inner_points_is_its_corners():
    inner = np.array([[1.0, 1.0], [2.0, 0.5], [3.5, 1.5]])
    corners = np.array([[0.0, 0.0], [4.0, 0.0], [4.0, 2.0], [0.0, 2.0]])
    got = convex_hull(np.concatenate([inner, corners]))
    assert {tuple(p) for p in got.tolist()} == {tuple(p) for p in corners.tolist()}


def test_collinear_points_come_back_whole_and_silent(capfd):
    """Qhull prints an error on collinear input (it reaches the terminal from C);
    such points are returned as they are, unique, with nothing printed."""
    line = np.array([[0.0, 0.0], [1.0, 1.0], [3.0, 3.0], [2.0, 2.0], [1.0, 1.0]])
    got = convex_hull(line)
    assert got.tolist() == [[0.0, 0.0], [1.0, 1.0], [2.0, 2.0], [3.0, 3.0]]
    assert len(convex_hull(np.array([[5.0, 5.0], [5.0, 5.0]]))) == 1
    out, err = capfd.readouterr()
    assert out == "" and err == ""


def test_unique_rows_is_numpys_unique_over_rows():
    """``regions.unique_rows`` (the fast path behind line counting) against its plain
    twin, ``np.unique(a, axis=0)``, on points with many repeats and ties."""
    from pitchguard.judge.regions import unique_rows

    rng = np.random.default_rng(11)
    for n in (0, 1, 2, 3, 7, 40):
        for _ in range(50):
            a = np.round(
                rng.choice([-1.5, 0.0, 2.0, 3.25], size=(n, 2)) + rng.integers(0, 2, (n, 2)), 1
            )
            np.testing.assert_array_equal(unique_rows(a), np.unique(a.reshape(-1, 2), axis=0))
