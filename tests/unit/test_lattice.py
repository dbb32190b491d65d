"""Unit and property tests for lattices of compact features (pitchguard.geometry.lattice).

Expected values come from plane lattice geometry (any crystallography text,
e.g. Kittel, Introduction to Solid State Physics, ch. 1, the five
two-dimensional Bravais lattices; the Lagrange-Gauss reduction of a plane
basis, e.g. Nguyen & Vallee (eds.), The LLL Algorithm, ch. 2):

* a square lattice of pitch p has the reduced basis (p, 0), (0, p); turned by
  theta, the same lengths at theta and theta + 90 degrees;
* a rectangular lattice p x q (p < q): (p, 0), (0, q);
* a hexagonal lattice of spacing a: two vectors of length a at 60 degrees;
* a centred rectangular lattice (rows of pitch 2s, every other row shifted
  by s, rows t apart): (2s, 0), (s, t) when t > sqrt(3) s (a2 projects onto
  half of a1), else the rhombic pair (s, t), (-s, t); with t = s it is a
  square lattice of pitch s sqrt(2) at 45 degrees;
* an n x m block of a lattice has (n - 2)(m - 2) interior members, 4
  corners and 2 (n - 2) + 2 (m - 2) others on its edge (counting).

Rigid motions (turns, mirrors, translations) keep every length and angle;
the only change allowed is the rounding of vertices to the 1 nm grid: a
rectangle's centroid moves by at most 0.5 nm per axis, so a vector between
two centroids by at most sqrt(2) nm (``TOL_SNAP_NM``).
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import gdstk
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lattice_strategies import (
    GRID_NM,
    HALO_NM,
    INTERACTION_RANGE_NM,
    MAX_EXTENT_NM,
    Placement,
    ViaArray,
    layouts,
    placements,
    polygons,
    rectangle,
    scattered,
    snap,
    via_arrays,
)
from pitchguard.geometry import lattice as L
from pitchguard.layout.polygons import PolygonSet
from pitchguard.layout.reader import read_layout

EXACT_NM = 1e-6  # on the grid: the fitted values are rounded to 1e-6 nm
TOL_SNAP_NM = math.sqrt(2.0) + 0.01  # a vector between two snapped centroids
TOL_DEG = 0.5  # direction of a fitted vector of >= 100 nm over >= 2 pitches: atan(1.5/200) = 0.43

HYPOTHESIS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def run(polys, grid_nm=GRID_NM, max_extent=MAX_EXTENT_NM, reach=INTERACTION_RANGE_NM):
    return L.extract_lattices(PolygonSet.from_arrays(polys), grid_nm, max_extent, reach)


def block(a1, a2, columns, rows, w=50, h=50, origin=(0.0, 0.0)) -> list[np.ndarray]:
    """``columns`` x ``rows`` rectangles at origin + u a1 + v a2, snapped to 1 nm."""
    o, a1, a2 = np.asarray(origin, float), np.asarray(a1, float), np.asarray(a2, float)
    return [
        snap(rectangle(*(o + u * a1 + v * a2), w, h)) for u in range(columns) for v in range(rows)
    ]


def turned(polys, deg, about=(0.0, 0.0)):
    t = math.radians(deg)
    m = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    c = np.asarray(about)
    return [snap((p - c) @ m.T + c) for p in polys]


def angle_of(v) -> float:
    return math.degrees(math.atan2(v[1], v[0]))


def only(arrays: L.LatticeArrays) -> L.LatticeArray:
    assert len(arrays) == 1, [r.lattice for r in arrays.records()]
    return arrays.record(0)


# ---------------------------------------------------------------------------
# Reduced bases (pure geometry)


def test_gauss_reduction_of_a_skewed_hexagonal_basis():
    """b1 = a (1, 0), b2 = a (5.5, sqrt 3 / 2) span the hexagonal lattice of spacing a
    (b2 - 5 b1 = a (1/2, sqrt 3 / 2)): reduced, two vectors of length a at 60 degrees."""
    a = 137.0
    b1 = np.array([[a, 0.0]])
    b2 = np.array([[5.5 * a, a * math.sqrt(3) / 2]])
    a1, a2, T = L.reduced_basis(b1, b2, tol=1e-6)
    assert np.hypot(*a1[0]) == pytest.approx(a, abs=1e-9)
    assert np.hypot(*a2[0]) == pytest.approx(a, abs=1e-9)
    cos = a1[0] @ a2[0] / a**2
    assert math.degrees(math.acos(cos)) == pytest.approx(60.0, abs=1e-9)
    np.testing.assert_allclose(a1[0], [a, 0.0], atol=1e-9)  # shortest direction in [0, 180)
    np.testing.assert_allclose(a2[0], [a / 2, a * math.sqrt(3) / 2], atol=1e-9)  # acute, ccw
    # T maps the input basis onto the output: [a1 a2] = [b1 b2] T, |det T| = 1.
    B = np.stack([b1[0], b2[0]], axis=1)
    np.testing.assert_allclose(B @ T[0], np.stack([a1[0], a2[0]], axis=1), atol=1e-9)
    assert abs(round(np.linalg.det(T[0]))) == 1
    assert L.lattice_class(a1, a2, 1e-6)[0] == L.HEXAGONAL


@pytest.mark.parametrize(
    ("b1", "b2", "a1", "a2", "cls"),
    [
        # square p = 100 given as (100, 0), (300, 100)
        ((100, 0), (300, 100), (100, 0), (0, 100), L.SQUARE),
        # square p = 100 turned by 30 degrees, given as a1 + a2, a2
        (
            (100 * (math.cos(math.pi / 6) - 0.5), 100 * (0.5 + math.cos(math.pi / 6))),
            (-50, 100 * math.cos(math.pi / 6)),
            (100 * math.cos(math.pi / 6), 50),
            (-50, 100 * math.cos(math.pi / 6)),
            L.SQUARE,
        ),
        # rectangular 100 x 160, long side given first and skewed
        ((100, 160), (100, 0), (100, 0), (0, 160), L.RECTANGULAR),
        # staggered rows: pitch 200, shift 100, rows 300 apart -> (200, 0), (100, 300)
        ((-100, 300), (200, 0), (200, 0), (100, 300), L.CENTRED),
        # staggered rows 150 apart: rhombic pair (100, 150), (-100, 150), 67.4 degrees apart
        ((200, 0), (100, 150), (100, 150), (-100, 150), L.CENTRED),
        # staggered rows 100 apart: the square lattice of pitch 141.4 at 45 degrees
        ((200, 0), (100, 100), (100, 100), (-100, 100), L.SQUARE),
        # oblique: (100, 0), (30, 130): |a2| > |a1|, projection 30 (neither 0 nor 50)
        ((100, 0), (130, 130), (100, 0), (30, 130), L.OBLIQUE),
        # a mirrored oblique lattice keeps a2 at an acute angle: clockwise from a1 here
        ((100, 0), (30, -130), (100, 0), (30, -130), L.OBLIQUE),
    ],
)
def test_canonical_reduced_basis(b1, b2, a1, a2, cls):
    """Analytic reduced bases (module docstring) and the convention: a1 shortest with
    its direction least in [0, 180), a2 at no more than 90 degrees, counter-clockwise
    on a tie."""
    got1, got2, _ = L.reduced_basis(np.array([b1], float), np.array([b2], float), tol=1e-6)
    np.testing.assert_allclose(got1[0], a1, atol=1e-9)
    np.testing.assert_allclose(got2[0], a2, atol=1e-9)
    assert L.lattice_class(got1, got2, 1e-6)[0] == cls


def test_reduced_basis_equals_the_plain_search_on_random_lattices():
    """Random reduced bases, hidden behind random unimodular changes of basis
    (entries -3..3), give the same canonical basis as the brute-force search."""
    rng = np.random.default_rng(7)
    n = 200
    ang = rng.uniform(0, 2 * math.pi, n)
    p = rng.uniform(60, 300, n)
    q = p * rng.uniform(1.0, 2.5, n)
    gamma = rng.uniform(math.radians(60), math.radians(120), n)
    r1 = np.stack([p * np.cos(ang), p * np.sin(ang)], axis=1)
    r2 = np.stack([q * np.cos(ang + gamma), q * np.sin(ang + gamma)], axis=1)
    # Exact ties (square, hexagonal) as well as generic lattices.
    kind = rng.integers(0, 3, n)
    r2[kind == 1] = np.stack([p * np.cos(ang + math.pi / 2), p * np.sin(ang + math.pi / 2)], 1)[
        kind == 1
    ]
    r2[kind == 2] = np.stack([p * np.cos(ang + math.pi / 3), p * np.sin(ang + math.pi / 3)], 1)[
        kind == 2
    ]
    b1, b2 = r1.copy(), r2.copy()
    for k in range(n):
        while True:
            m = rng.integers(-3, 4, (2, 2))
            if abs(round(np.linalg.det(m))) == 1:
                break
        b1[k] = m[0, 0] * r1[k] + m[1, 0] * r2[k]
        b2[k] = m[0, 1] * r1[k] + m[1, 1] * r2[k]
    tol = 1e-6
    a1, a2, T = L.reduced_basis(b1, b2, tol)
    for k in range(n):
        e1, e2 = L.reduced_basis_plain(b1[k], b2[k], tol)
        np.testing.assert_allclose(a1[k], e1, atol=1e-6)
        np.testing.assert_allclose(a2[k], e2, atol=1e-6)
        B = np.stack([b1[k], b2[k]], axis=1)
        np.testing.assert_allclose(B @ T[k], np.stack([a1[k], a2[k]], axis=1), atol=1e-6)
    assert {int(c) for c in L.lattice_class(a1, a2, tol)} >= {L.SQUARE, L.HEXAGONAL, L.OBLIQUE}


# ---------------------------------------------------------------------------
# Compact features


def test_compact_features_of_drawn_shapes():
    """Each drawn case against its geometry: a via of two abutting halves is one
    50 x 50 feature; an L of 3 unit squares (side 40) has its centroid at
    (5/6, 5/6) x 40 from its corner (composite centroid of three squares); a
    1000 nm line is too long; a via touching it is part of it; an octagon is not
    Manhattan; a square ring has a hole; a 200 x 20 bar turned by 45 degrees is
    compact with its frame at 45 degrees."""
    ring = gdstk.boolean(
        gdstk.rectangle((0, 0), (120, 120)), gdstk.rectangle((40, 40), (80, 80)), "not"
    )
    shapes = [
        ("halves", [rectangle(0, 0, 25, 50) + [-12.5, 0], rectangle(0, 0, 25, 50) + [12.5, 0]]),
        ("L", [np.array([[0, 0], [80, 0], [80, 40], [40, 40], [40, 80], [0, 80]], float)]),
        ("line", [rectangle(0, 0, 1000, 50)]),
        ("via on line", [rectangle(0, 0, 1000, 50), rectangle(525, 0, 50, 50)]),
        ("octagon", [gdstk.regular_polygon((0, 0), 40, 8).points]),
        ("ring", [p.points for p in ring]),
        ("bar 45", [snap(turned([rectangle(0, 0, 200, 20)], 45)[0])]),
    ]
    polys, owner = [], []
    for k, (name, ps) in enumerate(shapes):
        for p in ps:
            polys.append(p + [3000.0 * k, 0.0])
            owner.append(name)
    cf = L.compact_features(PolygonSet.from_arrays(polys), 1.0, MAX_EXTENT_NM)
    reasons = {name: set() for name, _ in shapes}
    for name, r in zip(owner, cf.polygon_reason, strict=True):
        reasons[name].add(L.REASON_NAMES[r])
    assert reasons == {
        "halves": {"compact"},
        "L": {"compact"},
        "line": {"large"},
        "via on line": {"large"},
        "octagon": {"not Manhattan"},
        "ring": {"hole"},
        "bar 45": {"compact"},
    }
    f = cf.features
    assert len(f) == 3
    by_x = np.argsort(f.centroid[:, 0])
    halves, ell, bar = by_x
    np.testing.assert_allclose(f.size[halves], [50, 50], atol=EXACT_NM)
    assert f.area[halves] == pytest.approx(2500.0)
    np.testing.assert_allclose(f.centroid[ell] - [3000, 0], [200 / 6, 200 / 6], atol=1e-9)
    assert f.area[ell] == pytest.approx(3 * 1600.0)
    np.testing.assert_allclose(f.size[ell], [80, 80], atol=EXACT_NM)
    assert f.angle_deg[bar] == pytest.approx(45.0, abs=1.0)
    np.testing.assert_allclose(sorted(f.size[bar]), [20, 200], atol=1.5)
    assert cf.polygon_feature[owner.index("halves")] == halves
    assert cf.polygon_feature[owner.index("line")] == -1


def test_compact_features_equal_the_plain_merge_on_random_layouts():
    """Fast path (lone quads as drawn, groups of touching shapes merged, large shapes
    screened by box) against every shape through build_features: the same
    features.  Layouts hold lone vias, abutting pairs, overlapping pairs, vias on
    lines, L-shapes and turned bars."""
    rng = np.random.default_rng(5)
    kinds_seen = set()
    for _ in range(12):
        polys = []
        for _ in range(60):
            x, y = rng.integers(0, 6000, 2).astype(float)
            kind = rng.integers(0, 6)
            kinds_seen.add(int(kind))
            w, h = rng.integers(20, 120, 2)
            if kind == 0:
                polys.append(rectangle(x, y, w, h))
            elif kind == 1:  # abutting halves
                polys += [rectangle(x, y, w, h), rectangle(x + w, y, w, h)]
            elif kind == 2:  # overlapping
                polys += [rectangle(x, y, w, h), rectangle(x + w / 2, y + h / 3, w, h)]
            elif kind == 3:  # via on a line
                polys += [rectangle(x, y, 900, 40), rectangle(x + 100, y + 40, 40, 40)]
            elif kind == 4:  # L
                polys.append(
                    np.array([[0, 0], [w, 0], [w, h / 2], [w / 2, h / 2], [w / 2, h], [0, h]])
                    + [x, y]
                )
            else:  # turned bar
                polys.append(
                    turned([rectangle(x, y, 200, 30)], float(rng.integers(0, 90)), (x, y))[0]
                )
        ps = PolygonSet.from_arrays([snap(p) for p in polys])
        fast = L.compact_features(ps, 1.0, MAX_EXTENT_NM).features
        plain = L.compact_features_plain(ps, 1.0, MAX_EXTENT_NM)
        assert len(fast) == len(plain) > 0
        of, op = np.lexsort(fast.centroid.T), np.lexsort(plain.centroid.T)
        for name in ("centroid", "size", "angle_deg", "area", "bbox", "centre"):
            np.testing.assert_allclose(
                getattr(fast, name)[of], getattr(plain, name)[op], atol=1e-6, err_msg=name
            )
    assert kinds_seen == set(range(6))


# ---------------------------------------------------------------------------
# Arrays: the lattice kinds


def test_square_array():
    """10 x 8 vias at pitch 100: square, a1 = (100, 0), a2 = (0, 100); 48 interior,
    4 corners, 28 on the edge (counting); all of it exact on the grid."""
    res = run(block((100, 0), (0, 100), 10, 8))
    r = only(res)
    assert r.lattice == "square"
    assert r.a1_nm == (100.0, 0.0) and r.a2_nm == (0.0, 100.0)
    assert (r.count, r.columns, r.rows) == (80, 10, 8)
    assert (r.interior, r.edge, r.corner) == (48, 28, 4)
    assert r.feature_nm == (50.0, 50.0) and r.feature_angle_deg == 0.0
    assert r.origin_nm == (0.0, 0.0) and r.max_residual_nm == 0.0
    assert r.bbox_nm == (-25.0, -25.0, 925.0, 725.0)
    assert res.isolated == 0
    # Lattice coordinates: the centroid sits at origin + u a1 + v a2.
    c = res.sites.features.centroid
    np.testing.assert_array_equal(c, res.uv * 100.0)
    # Last column (u = 9, not a corner) misses its neighbour along a1.
    last = (res.uv[:, 0] == 9) & (res.uv[:, 1] == 4)
    assert res.role[last][0] == L.END_A1
    top = (res.uv[:, 0] == 4) & (res.uv[:, 1] == 7)
    assert res.role[top][0] == L.END_A2


def test_rectangular_array_and_its_quarter_turn():
    """100 x 160 nm pitches: rectangular, a1 the short side.  Turned by 90 degrees the
    short side runs along y: a1 = (0, 100), a2 = (-160, 0) (acute, counter-clockwise)."""
    polys = block((100, 0), (0, 160), 6, 5)
    r = only(run(polys))
    assert r.lattice == "rectangular"
    assert r.a1_nm == (100.0, 0.0) and r.a2_nm == (0.0, 160.0)
    assert (r.columns, r.rows) == (6, 5)
    q = only(run(turned(polys, 90)))
    assert q.lattice == "rectangular"
    assert q.a1_nm == (0.0, 100.0) and q.a2_nm == (-160.0, 0.0)
    assert (q.columns, q.rows, q.count) == (6, 5, 30)
    assert (q.interior, q.edge, q.corner) == (r.interior, r.edge, r.corner) == (12, 14, 4)


@pytest.mark.parametrize(
    ("t", "a1", "a2", "cls"),
    [
        (300, (200, 0), (100, 300), "centred"),  # t > sqrt(3) s: a2 projects onto a1 / 2
        (150, (100, 150), (-100, 150), "centred"),  # rhombic: |a1| = |a2|, 67.4 degrees
        (100, (100, 100), (-100, 100), "square"),  # a square lattice at 45 degrees
    ],
)
def test_staggered_rows(t, a1, a2, cls):
    """Rows of pitch 200, every other row shifted by 100, rows t apart: the centred
    rectangular lattice (module docstring)."""
    polys = []
    for row in range(6):
        shift = 100 * (row % 2)
        polys += [snap(rectangle(200 * k + shift, t * row, 40, 40)) for k in range(8)]
    r = only(run(polys))
    assert r.lattice == cls
    assert r.a1_nm == a1 and r.a2_nm == a2
    assert r.count == 48 and r.max_residual_nm == 0.0


def test_hexagonal_array_on_the_grid():
    """Spacing a = 120, rows sqrt(3)/2 a = 103.92 apart, snapped to 1 nm: hexagonal,
    |a1| = |a2| = a within the snapping of rows (0.5 nm), 60 degrees apart."""
    a = 120.0
    polys = block((a, 0), (a / 2, a * math.sqrt(3) / 2), 9, 7, w=40, h=40)
    r = only(run(polys))
    assert r.lattice == "hexagonal"
    assert r.pitch_nm == pytest.approx((a, a), abs=0.5)
    assert r.angle_deg == pytest.approx(60.0, abs=TOL_DEG)
    assert r.a1_nm == (a, 0.0)  # rows are exact on the grid
    assert r.count == 63 and r.max_residual_nm <= TOL_SNAP_NM


def test_oblique_array():
    """(100, 0), (30, 130): oblique (no two lengths equal, no right angle, a2 does not
    project onto half of a1)."""
    r = only(run(block((100, 0), (30, 130), 6, 6, w=40, h=40)))
    assert r.lattice == "oblique"
    assert r.a1_nm == (100.0, 0.0) and r.a2_nm == (30.0, 130.0)


def test_row_of_vias():
    """One row of 7 vias at pitch 90, nothing within range across: a row, a1 = (90, 0);
    5 interior, the 2 ends on the edge.  Two vias make no row."""
    res = run(block((90, 0), (0, 1), 7, 1) + block((90, 0), (0, 1), 2, 1, origin=(0, 5000)))
    r = only(res)
    assert r.lattice == "row" and r.a1_nm == (90.0, 0.0) and math.isnan(r.a2_nm[0])
    assert (r.count, r.columns, r.rows, r.interior, r.edge, r.corner) == (7, 7, 1, 5, 2, 0)
    assert res.isolated == 2


@pytest.mark.parametrize("theta", [30.0, 45.0, 17.0, 120.0])
def test_turned_square_array(theta):
    """A square lattice turned by theta stays square with |a1| = |a2| = p; a1 points
    along theta modulo 90 (the direction least in [0, 180))."""
    p = 110.0
    polys = turned(block((p, 0), (0, p), 8, 7, w=44, h=44), theta)
    res = run(polys)
    r = only(res)
    assert r.lattice == "square"
    assert r.pitch_nm == pytest.approx((p, p), abs=TOL_SNAP_NM / 4)
    assert angle_of(r.a1_nm) == pytest.approx(theta % 90.0, abs=TOL_DEG)
    assert r.angle_deg == pytest.approx(90.0, abs=TOL_DEG)
    assert (r.count, r.interior, r.edge, r.corner) == (56, 30, 22, 4)
    assert sorted((r.columns, r.rows)) == [7, 8]
    assert r.feature_nm == pytest.approx((44, 44), abs=1.5)
    assert r.max_residual_nm <= TOL_SNAP_NM


# ---------------------------------------------------------------------------
# Arrays: neighbourhoods


def test_missing_via_and_notched_corner():
    """A 7 x 7 square array with its centre via left out and its top-right 2 x 2
    corner cut: the 4 vias beside the hole miss a neighbour along a1 or a2, its 4
    diagonal ones only a diagonal (notch); the cut corner's inner vertex is a notch
    too (counting on the drawing)."""
    polys = block((100, 0), (0, 100), 7, 7)
    centres = [p.mean(axis=0) for p in polys]
    keep = [
        p
        for p, (x, y) in zip(polys, centres, strict=True)
        if (x, y) != (300, 300) and not (x >= 500 and y >= 500)
    ]
    res = run(keep)
    r = only(res)
    assert r.count == 49 - 1 - 4
    role = {tuple(int(v) for v in uv): int(k) for uv, k in zip(res.uv, res.role, strict=True)}
    assert role[(2, 3)] == role[(4, 3)] == L.END_A1
    assert role[(3, 2)] == role[(3, 4)] == L.END_A2
    assert role[(2, 2)] == role[(4, 4)] == role[(2, 4)] == role[(4, 2)] == L.NOTCH
    assert role[(4, 4)] == L.NOTCH  # also the inner corner of the cut
    assert role[(6, 4)] == L.CORNER and role[(4, 6)] == L.CORNER


def test_two_arrays_apart_and_random_vias_between():
    """A square array (pitch 100) and a hexagonal one (spacing 150) 2 um apart, 30
    random vias more than the interaction range from everything: two arrays, 30
    isolated."""
    polys = block((100, 0), (0, 100), 6, 6)
    polys += block((150, 0), (75, 150 * math.sqrt(3) / 2), 6, 5, w=60, h=60, origin=(2600, 0))
    rng = np.random.default_rng(3)
    far = scattered(rng, 30, 8000.0) + [0, 3000]
    polys += [snap(rectangle(x, y, 40, 40)) for x, y in far]
    res = run(polys)
    assert len(res) == 2 and res.isolated == 30
    got = {r.lattice: r.count for r in res.records()}
    assert got == {"square": 36, "hexagonal": 30}


def test_random_placements_form_no_array():
    """2000 vias placed at random (uniform, 20 x 20 um: on average 2.5 others within
    the interaction range) lie on no lattice: no array, every via isolated."""
    rng = np.random.default_rng(11)
    pts = np.round(rng.uniform(0, 20_000, (2000, 2)))
    polys = [rectangle(x, y, 40, 40) for x, y in pts]
    res = run(polys)
    n = len(res.sites)
    assert n > 1900  # a few random pairs overlap and merge into larger features
    assert len(res) == 0 and res.isolated == n
    assert np.sum(res.sites.lattice != L.NONE) > n / 2  # most do have neighbours


def test_touching_arrays_of_different_pitch():
    """Square arrays of pitch 100 (10 x 10) and 130 (8 x 8) side by side, 90 nm
    between the last column of one and the first of the other (closer than either
    pitch): the two columns that face each other see a foreign nearest neighbour,
    yet each is counted in its own array, as its last (first) column."""
    left = block((100, 0), (0, 100), 10, 10)
    right = block((130, 0), (0, 130), 8, 8, origin=(990, 0))
    res = run(left + right)
    assert len(res) == 2 and res.isolated == 0
    recs = sorted(res.records(), key=lambda r: r.pitch_nm[0])
    assert [(r.pitch_nm[0], r.count, r.columns, r.rows) for r in recs] == [
        (100.0, 100, 10, 10),
        (130.0, 64, 8, 8),
    ]
    c = res.sites.features.centroid
    facing = np.isclose(c[:, 0], 900) & (c[:, 1] > 0) & (c[:, 1] < 900)
    assert set(res.role[facing].tolist()) == {L.END_A1}
    assert not res.sites.core[facing].all()  # their own lattice differs: attached


def test_two_shapes_interleaved():
    """A checkerboard of 40 nm and 60 nm vias at pitch 100: each size alone is a
    square lattice of pitch 100 sqrt(2) at 45 degrees (the centred lattice of the
    checkerboard); features of different sizes never share an array."""
    polys = []
    for u in range(8):
        for v in range(8):
            s = 40 if (u + v) % 2 else 60
            polys.append(rectangle(100 * u, 100 * v, s, s))
    res = run(polys)
    assert len(res) == 2
    for r in res.records():
        assert r.lattice == "square" and r.count == 32
        assert r.pitch_nm == pytest.approx((100 * math.sqrt(2),) * 2, abs=EXACT_NM)
        assert angle_of(r.a1_nm) == pytest.approx(45.0, abs=1e-9)
    assert sorted(r.feature_nm[0] for r in res.records()) == [40.0, 60.0]


def test_arrays_from_gdstk_references():
    """Layouts built from references, written to GDSII and read back: a 20 x 12
    rectangular array of a via cell (spacing 0.1 x 0.14 um), the same cell in a
    16 x 16 array turned by 30 degrees (a regular repetition), and staggered rows
    from two arrays offset by half a pitch."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    via = lib.new_cell("VIA")
    via.add(gdstk.rectangle((-0.025, -0.025), (0.025, 0.025), layer=5))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(via, (0, 0), columns=20, rows=12, spacing=(0.1, 0.14)))
    top.add(
        gdstk.Reference(
            via, (10, 0), rotation=math.radians(30), columns=16, rows=16, spacing=(0.12, 0.12)
        )
    )
    top.add(gdstk.Reference(via, (0, 10), columns=10, rows=4, spacing=(0.2, 0.6)))
    top.add(gdstk.Reference(via, (0.1, 10.3), columns=10, rows=4, spacing=(0.2, 0.6)))
    path = Path(tempfile.mkdtemp(prefix="pitchguard-lattice-")) / "refs.gds"
    lib.write_gds(str(path))
    layout = read_layout(path, [(5, 0)])
    res = L.extract_lattices(
        layout.layers[(5, 0)], layout.grid_nm, MAX_EXTENT_NM, INTERACTION_RANGE_NM
    )
    assert len(res) == 3 and res.isolated == 0
    by_count = {r.count: r for r in res.records()}
    rect, turn, stag = by_count[240], by_count[256], by_count[80]
    assert (
        rect.lattice == "rectangular" and rect.a1_nm == (100.0, 0.0) and rect.a2_nm == (0.0, 140.0)
    )
    assert (rect.columns, rect.rows, rect.corner) == (20, 12, 4)
    assert turn.lattice == "square"
    assert turn.pitch_nm == pytest.approx((120, 120), abs=0.5)
    assert angle_of(turn.a1_nm) == pytest.approx(30.0, abs=TOL_DEG)
    assert turn.feature_angle_deg == pytest.approx(30.0, abs=2.0)
    assert stag.lattice == "centred" and stag.a1_nm == (200.0, 0.0) and stag.a2_nm == (100.0, 300.0)


# ---------------------------------------------------------------------------
# Invariance and plain twins


def same_arrays(x: L.LatticeArrays, y: L.LatticeArrays) -> None:
    """Equal records, and each feature (matched by centroid key) in the same array
    with the same lattice coordinates and role."""
    assert list(x.records()) == list(y.records()) or _records_close(x, y)
    kx = L.centroid_keys(x.sites.features.centroid, x.sites.grid_nm)
    ky = L.centroid_keys(y.sites.features.centroid, y.sites.grid_nm)
    ox, oy = np.argsort(kx), np.argsort(ky)
    np.testing.assert_array_equal(kx[ox], ky[oy])
    np.testing.assert_array_equal(x.array[ox], y.array[oy])
    np.testing.assert_array_equal(x.uv[ox], y.uv[oy])
    np.testing.assert_array_equal(x.role[ox], y.role[oy])
    np.testing.assert_array_equal(x.neighbours[ox], y.neighbours[oy])


def _records_close(x, y) -> bool:
    rx, ry = list(x.records()), list(y.records())
    assert len(rx) == len(ry)
    for a, b in zip(rx, ry, strict=True):
        for fa, fb, name in zip(a, b, a._fields, strict=True):
            if isinstance(fa, float | tuple):
                np.testing.assert_allclose(fa, fb, atol=1e-9, err_msg=name)
            else:
                assert fa == fb, name
    return True


@HYPOTHESIS
@given(layouts(), st.randoms(use_true_random=False))
def test_order_of_shapes_and_vertices_changes_nothing(polys, rnd):
    """Shuffled shapes, each starting at another vertex and some walked the other way."""
    ref = run(polys)
    moved = []
    for p in polys:
        q = np.roll(p, rnd.randrange(len(p)), axis=0)
        moved.append(q[::-1] if rnd.random() < 0.5 else q)
    rnd.shuffle(moved)
    same_arrays(ref, run(moved))


@HYPOTHESIS
@given(layouts(max_arrays=2), st.integers(0, 10_000), st.integers(-2000, 2000))
def test_tiles_with_halo_give_the_whole_layout(polys, cut_x, cut_y):
    """Four tiles cut at random lines, each read with HALO_NM around it, joined:
    the same arrays as the whole layout."""
    ps = PolygonSet.from_arrays(polys)
    whole = L.find_arrays(L.lattice_sites(ps, GRID_NM, MAX_EXTENT_NM, INTERACTION_RANGE_NM))
    bb = ps.bounding_boxes()
    x0, y0 = bb[:, 0].min() - 1, bb[:, 1].min() - 1
    x1, y1 = bb[:, 2].max() + 1, bb[:, 3].max() + 1
    cx = x0 + (x1 - x0) * cut_x / 10_000
    parts = []
    for rx in ((x0, cx), (cx, x1)):
        for ry in ((y0, float(cut_y)), (float(cut_y), y1)):
            region = (rx[0], ry[0], rx[1], ry[1])
            near = (
                (bb[:, 2] >= region[0] - HALO_NM)
                & (bb[:, 0] <= region[2] + HALO_NM)
                & (bb[:, 3] >= region[1] - HALO_NM)
                & (bb[:, 1] <= region[3] + HALO_NM)
            )
            parts.append(
                L.lattice_sites(
                    ps.select(near), GRID_NM, MAX_EXTENT_NM, INTERACTION_RANGE_NM, region=region
                )
            )
    tiled = L.find_arrays(L.LatticeSites.joined(parts))
    assert len(tiled.sites) == len(whole.sites)
    same_arrays(whole, tiled)


def tiled(ps: PolygonSet, cuts_x, cuts_y, halo=HALO_NM) -> L.LatticeArrays:
    """Lattice sites of each tile between the cut lines, read with ``halo`` around
    it, joined, then the arrays."""
    bb = ps.bounding_boxes()
    xs = [bb[:, 0].min() - 1, *cuts_x, bb[:, 2].max() + 1]
    ys = [bb[:, 1].min() - 1, *cuts_y, bb[:, 3].max() + 1]
    parts = []
    for x0, x1 in zip(xs[:-1], xs[1:], strict=True):
        for y0, y1 in zip(ys[:-1], ys[1:], strict=True):
            near = (bb[:, 2] >= x0 - halo) & (bb[:, 0] <= x1 + halo)
            near &= (bb[:, 3] >= y0 - halo) & (bb[:, 1] <= y1 + halo)
            parts.append(
                L.lattice_sites(
                    ps.select(near),
                    GRID_NM,
                    MAX_EXTENT_NM,
                    INTERACTION_RANGE_NM,
                    region=(x0, y0, x1, y1),
                )
            )
    return L.find_arrays(L.LatticeSites.joined(parts))


def test_tiles_cut_anywhere_across_touching_arrays():
    """Arrays of pitch 100 x 380 (a2 near the interaction range) and of pitch 130
    beside them (90 nm apart, so the facing columns are attached, not core): cut
    in both directions at 23 positions each (every 43 nm across the interface
    and the arrays), the tiles joined give the whole layout's arrays; with a halo
    of half an interaction range they do not (the check can fail)."""
    polys = block((100, 0), (0, 380), 10, 4) + block((130, 0), (0, 130), 8, 10, origin=(990, 0))
    ps = PolygonSet.from_arrays(polys)
    whole = run(polys)
    assert len(whole) == 2 and whole.isolated == 0
    for k in range(23):
        same_arrays(whole, tiled(ps, [700 + 43 * k], [-40 + 43 * k]))
    broken = 0
    for k in range(23):
        t = tiled(ps, [700 + 43 * k], [-40 + 43 * k], halo=INTERACTION_RANGE_NM / 2)
        broken += list(t.records()) != list(whole.records())
    assert broken > 0


@HYPOTHESIS
@given(via_arrays(), placements())
def test_rigid_motions_keep_class_pitches_and_counts(arr: ViaArray, pl: Placement):
    """Turned, mirrored and translated (to +-10 mm): the same class, pitches (within
    the snapping of centroids), angle, count; square and rectangular arrays also
    keep their role counts."""
    local = run(polygons(arr, Placement(0, False, 0, 0)))
    placed = run(polygons(arr, pl))
    a, b = only(local), only(placed)
    assert a.lattice == b.lattice == arr.kind
    assert a.count == b.count == arr.count
    np.testing.assert_allclose(a.pitch_nm, arr.pitches, atol=TOL_SNAP_NM)
    np.testing.assert_allclose(b.pitch_nm, arr.pitches, atol=TOL_SNAP_NM)
    # Each fitted vector may turn by asin(TOL_SNAP / p) from snapping; the angle between
    # two of them by twice that, and the two placements differ by up to twice again.
    tol_deg = 4.0 * math.degrees(math.asin(TOL_SNAP_NM / min(arr.pitches)))
    assert b.angle_deg == pytest.approx(a.angle_deg, abs=tol_deg)
    if arr.kind in ("square", "rectangular"):
        assert (a.interior, a.edge, a.corner) == (b.interior, b.edge, b.corner)
        assert sorted((a.columns, a.rows)) == sorted((b.columns, b.rows))


def test_neighbour_search_equals_the_rtree_twin():
    """Grid search against one R-tree query per feature: the same a1, a2, reach and
    pairs, on arrays (several kinds and turns), random vias, a row and mixed sizes."""
    rng = np.random.default_rng(2)
    polys = block((100, 0), (0, 100), 6, 6)
    polys += turned(block((130, 0), (65, 200), 6, 5, w=40, h=40, origin=(3000, 0)), 30, (3000, 0))
    polys += block((120, 0), (0, 1), 6, 1, origin=(0, 3000))  # a row
    polys += [snap(rectangle(x, y, 40, 40)) for x, y in rng.uniform(5000, 9000, (150, 2))]
    polys += [snap(rectangle(x, y, 60, 30)) for x, y in rng.uniform(5000, 9000, (100, 2))]
    cf = L.compact_features(PolygonSet.from_arrays(polys), 1.0, MAX_EXTENT_NM)
    f, tol = cf.features, 2.0
    fast = L.neighbour_lattices(f, INTERACTION_RANGE_NM, 1.0, tol)
    plain = L.neighbour_lattices_plain(f, INTERACTION_RANGE_NM, 1.0, tol)
    for x, y in zip(fast[:3], plain[:3], strict=True):
        np.testing.assert_array_equal(x, y)
    pf = set(zip(fast[3].tolist(), fast[4].tolist(), strict=True))
    pp = set(zip(plain[3].tolist(), plain[4].tolist(), strict=True))
    assert pf == pp and len(pf) == len(fast[3])
    kinds = L.lattice_class(*L.reduced_basis(fast[0], fast[1], tol)[:2], tol)
    assert {L.NONE, L.ROW, L.SQUARE, L.CENTRED} <= set(kinds.tolist())


@HYPOTHESIS
@given(layouts())
def test_lattice_sites_with_the_plain_search_give_the_same_arrays(polys):
    """lattice_sites(plain=True) (R-tree per feature) and the grid search: the same arrays."""
    ps = PolygonSet.from_arrays(polys)
    fast = L.find_arrays(L.lattice_sites(ps, GRID_NM, MAX_EXTENT_NM, INTERACTION_RANGE_NM))
    plain = L.find_arrays(
        L.lattice_sites(ps, GRID_NM, MAX_EXTENT_NM, INTERACTION_RANGE_NM, plain=True)
    )
    same_arrays(fast, plain)


def test_roles_equal_the_plain_loop():
    """Roles and neighbour bits from sorted site keys against a set and a loop, on
    arrays with holes, cut corners, rows and a turned rectangular array whose
    diagonal lies beyond the interaction range (ignored for the role)."""
    rng = np.random.default_rng(9)
    polys = [p for p in block((100, 0), (0, 100), 12, 12) if rng.random() > 0.15]
    polys += turned(block((120, 0), (0, 350), 8, 5, origin=(3000, 0)), 45, (3000, 0))
    polys += block((90, 0), (0, 1), 9, 1, origin=(0, 4000))
    res = run(polys)
    role, bits = L.member_roles_plain(res)
    np.testing.assert_array_equal(res.role, role)
    np.testing.assert_array_equal(res.neighbours, bits)
    assert set(role.tolist()) >= {L.INTERIOR, L.END_A1, L.END_A2, L.CORNER, L.NOTCH}


def test_growth_equals_the_plain_breadth_first_search():
    """Arrays grown in vectorised rounds against one feature at a time, breadth first,
    on layouts where features join by growth (touching arrays: the facing
    columns, and three columns where a2 is near the range; the same turned by
    30 degrees); every drawn array comes out whole (its drawn count)."""
    layouts_ = [
        (
            block((100, 0), (0, 100), 10, 10) + block((130, 0), (0, 130), 8, 8, origin=(990, 0)),
            [100, 64],
        ),
        (
            block((100, 0), (0, 380), 10, 4) + block((130, 0), (0, 130), 8, 10, origin=(990, 0)),
            [40, 80],
        ),
        (
            turned(
                block((100, 0), (0, 100), 8, 8) + block((120, 0), (0, 120), 6, 6, origin=(790, 30)),
                30,
            ),
            [64, 36],
        ),
    ]
    for polys, counts in layouts_:
        sites = L.lattice_sites(
            PolygonSet.from_arrays(polys), GRID_NM, MAX_EXTENT_NM, INTERACTION_RANGE_NM
        )
        fast, plain = L.find_arrays(sites), L.find_arrays(sites, plain=True)
        same_arrays(fast, plain)
        assert sorted(r.count for r in fast.records()) == sorted(counts)
        assert fast.isolated == 0
        assert np.sum((fast.array >= 0) & ~sites.core) >= 8  # placed by growth


def test_row_beside_an_array():
    """A row of 8 vias (pitch 100) 190 nm above a 6 x 6 array, shifted by 30 nm: the
    row's second vector points into the array, yet the row is found (a1 = (100,
    0), 6 inside, 2 ends) and the array stays whole."""
    res = run(block((100, 0), (0, 100), 6, 6) + block((100, 0), (0, 1), 8, 1, origin=(30, 690)))
    recs = {r.lattice: r for r in res.records()}
    assert set(recs) == {"square", "row"} and res.isolated == 0
    assert recs["square"].count == 36
    row = recs["row"]
    assert (row.count, row.a1_nm, row.interior, row.edge) == (8, (100.0, 0.0), 6, 2)
    assert row.origin_nm == (30.0, 690.0)


def test_deduplicated_rows_and_lattice_table_equal_direct_work():
    """Rows deduplicated by hashing against numpy's unique rows (NaN rows, exact
    repeats, near repeats 1e-12 apart); lattice equality from the table of all
    basis pairs against pair by pair."""
    rng = np.random.default_rng(4)
    base = rng.integers(0, 5, (300, 4)).astype(float)
    base[rng.random(300) < 0.2, 2:] = np.nan
    base[::7, 0] += 1e-12
    rep, inv = L.dedupe_rows(base)
    key = np.nan_to_num(base, nan=-1.0)
    _, ref_inv = np.unique(key, axis=0, return_inverse=True)
    # Same partition: classes map one to one.
    pairs = set(zip(inv.tolist(), ref_inv.ravel().tolist(), strict=True))
    assert len(pairs) == len(set(inv.tolist())) == len(set(ref_inv.ravel().tolist()))
    np.testing.assert_array_equal(key[rep[inv]], key)
    # Lattice equality: square, rectangular and row bases, some equal up to labelling.
    a1 = np.array([[100, 0], [0, 100], [100, 0], [100, 0], [-100, 0]], float)
    a2 = np.array([[0, 100], [-100, 0], [0, 160], [np.nan, np.nan], [np.nan, np.nan]])
    line = np.isnan(a2[:, 0])
    bi, bj = rng.integers(0, 5, 200), rng.integers(0, 5, 200)
    direct = L.same_lattice(a1[bi], a2[bi], line[bi], a1[bj], a2[bj], line[bj], 2.0)
    np.testing.assert_array_equal(L.same_lattice_of_pairs(a1, a2, line, bi, bj, 2.0), direct)
    many = np.repeat(a1, 300, axis=0), np.repeat(a2, 300, axis=0), np.repeat(line, 300)
    bi2, bj2 = bi * 300 + rng.integers(0, 300, 200), bj * 300 + rng.integers(0, 300, 200)
    np.testing.assert_array_equal(L.same_lattice_of_pairs(*many, bi2, bj2, 2.0), direct)
    assert direct.any() and not direct.all()


SKY130 = Path(__file__).resolve().parents[1] / "fixtures" / "sky130"
CONTACTS = [(66, 44), (67, 44)]  # licon, mcon in the sky130 layer map (from memory)


# The RF transistor cells hold a GDSII record gdstk skips with this warning (on every
# layer); the shapes are read.
@pytest.mark.filterwarnings("ignore:Unsupported record in file:RuntimeWarning")
def test_contacts_of_manufactured_cells():
    """licon and mcon of the 17 SkyWater 130 nm cells (tests/fixtures/sky130):
    every shape is a compact 170 x 170 nm feature (the sky130 contact size, from
    memory), and cutting each cell into four tiles changes no array.  The
    inverter's licon, as drawn (centres read from the file: x 465 and 885 nm,
    y 400, 740 and 1660, 2000, 2340 nm, and the gate contact at (485, 1160)):
    a 2 x 2 and a 3 x 2 rectangular array of pitches 340 x 420 nm, one isolated."""
    cells = sorted(SKY130.glob("*.gds"))
    assert len(cells) == 17
    arrays = 0
    for path in cells:
        layout = read_layout(path, CONTACTS)
        for ps in layout.layers.values():
            if not len(ps):
                continue
            cf = L.compact_features(ps, layout.grid_nm, MAX_EXTENT_NM)
            assert (cf.polygon_reason == L.COMPACT).all(), path.name
            np.testing.assert_array_equal(cf.features.size, 170.0)
            sites = L.lattice_sites(None, layout.grid_nm, MAX_EXTENT_NM, 500.0, compact=cf)
            whole = L.find_arrays(sites)
            bb = ps.bounding_boxes()
            mid = 0.5 * (bb[:, :2].min(axis=0) + bb[:, 2:].max(axis=0))
            parts = []
            for rx in ((-np.inf, mid[0]), (mid[0], np.inf)):
                for ry in ((-np.inf, mid[1]), (mid[1], np.inf)):
                    region = (rx[0], ry[0], rx[1], ry[1])
                    parts.append(
                        L.lattice_sites(ps, layout.grid_nm, MAX_EXTENT_NM, 500.0, region=region)
                    )
            same_arrays(whole, L.find_arrays(L.LatticeSites.joined(parts)))
            arrays += len(whole)
    assert arrays == 93  # regression record: measured with this code (199 of 1,525 isolated)
    layout = read_layout(SKY130 / "sky130_fd_sc_hd__inv_1.gds", [(66, 44)])
    res = L.extract_lattices(layout.layers[(66, 44)], layout.grid_nm, MAX_EXTENT_NM, 500.0)
    got = [
        (r.lattice, r.count, r.a1_nm, r.a2_nm, r.columns, r.rows, r.origin_nm)
        for r in res.records()
    ]
    assert got == [
        ("rectangular", 4, (0.0, 340.0), (-420.0, 0.0), 2, 2, (885.0, 400.0)),
        ("rectangular", 6, (0.0, 340.0), (-420.0, 0.0), 3, 2, (885.0, 1660.0)),
    ]
    assert res.isolated == 1


def test_hull_and_empty_input():
    """The hull of an axis-aligned 4 x 3 array at pitch 100 with 50 nm vias is its
    bounding rectangle; an empty layer gives no feature and no array."""
    res = run(block((100, 0), (0, 100), 4, 3))
    hull = res.hull(0)
    np.testing.assert_allclose(
        np.sort(hull, axis=0), np.sort([[-25, -25], [325, -25], [325, 225], [-25, 225]], axis=0)
    )
    empty = L.extract_lattices(PolygonSet.empty(), 1.0, MAX_EXTENT_NM, INTERACTION_RANGE_NM)
    assert len(empty) == 0 and empty.isolated == 0 and len(empty.sites) == 0
