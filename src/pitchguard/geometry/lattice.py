"""Lattices of compact features: contacts, vias, posts and short lines in arrays.

Three steps, each usable on its own:

``compact_features``
    Polygons of one layer -> features (touching shapes merged) whose extents in
    their own frame are both below ``max_extent_nm`` (the layer's ``min_run_nm``),
    Manhattan (at any rotation) and without holes; every polygon that is not
    part of one gets a reason.
``lattice_sites``
    Per compact feature, its local lattice: the shortest vector to a feature of
    the same shape within the interaction range and the shortest one
    independent of it, reduced and made canonical; its links to neighbours of
    the same lattice; and, where its lattice is not confirmed, its same-shape
    neighbours.  Every value depends only on the layout within ``HALO_RANGES``
    interaction ranges of the feature, so tiles with that much halo give the
    whole layout's values (``region`` keeps what a tile owns,
    ``LatticeSites.joined`` puts tiles together).
``find_arrays``
    Linked features -> arrays, grown by the features that sit on an array's
    lattice next to it; basis fitted to all members, lattice class, feature
    size, rows and columns, bounding box, hull, and each member's place
    (interior, last column, last row, corner).

``extract_lattices`` runs all three on one layer.

Conventions (all lengths nm as drawn):

* Feature frame: the direction of the feature's edges (modulo 90 degrees),
  ``angle_deg`` in (-22.5, 67.5]; ``w`` is the extent along that direction,
  ``h`` across it.  The cut sits away from the usual placements (0, 30, 45, 60,
  90 degrees), so snapping noise does not swap ``w`` and ``h`` there.
* Basis: ``a1`` is the shortest lattice vector; among vectors within the
  tolerance of the shortest length, the one whose direction is smallest in
  [0, 180) degrees.  ``a2`` is the shortest vector independent of ``a1``; among
  near-ties, one at no more than 90 degrees from ``a1``, then the one
  counter-clockwise from ``a1``.  So ``|a1| <= |a2|``, the angle between them is
  60 to 90 degrees, and the basis is reduced (Lagrange-Gauss).
* Lattice classes from the reduced basis (tolerance ``tol``): square
  (``|a1| = |a2|``, 90 degrees), rectangular (90 degrees), hexagonal
  (``|a1| = |a2|``, 60 degrees), centred (staggered rows: ``|a1| = |a2|`` at
  another angle, or ``a2`` projecting onto half of ``a1``), oblique; ``row``
  for features in a line with no second direction within the interaction
  range (``a2`` is NaN).
* Lattice coordinates ``(u, v)`` of a member: its centroid is
  ``origin + u a1 + v a2``, with ``u, v >= 0`` and both reaching 0 in the array.

The tolerance ``tol`` is ``tol_grid`` database grid steps (2 by default): the
centroid of a snapped, rotated shape moves by up to half a step per axis.

Speed: numpy grids, not one R-tree query per feature (13 s for 10^6 features);
identical shapes and identical local bases are worked out once.
``tests/benchmarks/bench_lattice.py`` prints the figures beside a gdstk read.

Limits:

* Only features of the same size, shape and orientation share an array; a
  lattice of two alternating sizes gives one array per size.
* Octagonal or round posts are not Manhattan and so not compact.
* Pitches within ``tol`` of each other count as equal (a 100 x 101.5 nm
  lattice is square at 1 nm grid); an array whose pitch drifts by less than
  ``tol`` per step is one array (its ``max_residual_nm`` shows the drift).
* Four features at the corners of a parallelogram form an array, three
  evenly spaced in a line a row: among 10^5 vias at random places (about 2.5
  others within range of each) one such parallelogram and two such rows
  turned up (``bench_lattice.py``).
* A row whose shortest vector points at a foreign feature (another array
  closer than its own pitch) is not found as a row: its members are isolated.
* Centroid keys hold coordinates up to 2^31 / 16 grid steps (134 mm at 1 nm).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from typing import NamedTuple

import numpy as np

from pitchguard.geometry.features import build_features
from pitchguard.geometry.sites import in_region
from pitchguard.geometry.spatial import build_rtree, components, query_pairs
from pitchguard.layout.polygons import PolygonSet

TOL_GRID = 2.0
"""Default tolerance in database grid steps (snapping noise of centroids)."""

HALO_RANGES = 2
"""A tile's values equal the whole layout's when it reads shapes this many
interaction ranges (plus twice the largest compact diagonal) around its region:
a local lattice needs the features within one range, a link also its
neighbour's lattice."""

MIN_MEMBERS = 4
"""Members an array of two directions needs (three points always lie on a lattice)."""

MIN_MEMBERS_ROW = 3
"""Members a row needs (two points are a pair, not a period)."""

FRAME_CUT_DEG = 67.5
"""Upper end of the feature frame's angle range (-22.5, 67.5] (see the module notes)."""

BASIS_ANGLE_EPS_DEG = 1e-6
"""Directions are taken in [-eps, 180 - eps): a fitted basis vector along +x with
float noise in y must not flip to -x."""

LEVEL_BASE_GRID = 8.0
"""Neighbour search radii are this many grid steps times powers of two."""

PAIR_CHUNK = 1 << 16
"""Features whose candidate neighbours are expanded at once (bounds memory)."""

KEY_STEPS = 16
"""Centroids are keyed on a grid this many times finer than the database grid."""

# Lattice classes.
NONE, ROW, SQUARE, RECTANGULAR, CENTRED, HEXAGONAL, OBLIQUE = range(7)
LATTICE_NAMES = ("none", "row", "square", "rectangular", "centred", "hexagonal", "oblique")

# Why a polygon is not part of a compact feature.
COMPACT, LARGE, NOT_MANHATTAN, HOLE, DEGENERATE = range(5)
REASON_NAMES = ("compact", "large", "not Manhattan", "hole", "degenerate")

# A member's place in its array.
INTERIOR, END_A1, END_A2, CORNER, NOTCH = range(5)
ROLE_NAMES = ("interior", "last column", "last row", "corner", "notch")

NEIGHBOUR_STEPS = np.array([(1, 0), (1, 1), (0, 1), (-1, 1), (-1, 0), (-1, -1), (0, -1), (1, -1)])
"""Lattice steps of the neighbour bits (bit k: a member at ``NEIGHBOUR_STEPS[k]``)."""

_SQRT2 = math.sqrt(2.0)


# ---------------------------------------------------------------------------
# Records


@dataclass(frozen=True)
class FeatureColumns:
    """Compact features as columns (one row per feature, nm)."""

    centroid: np.ndarray  # (n, 2) area centroid
    size: np.ndarray  # (n, 2) w, h: extents along the frame and across it
    angle_deg: np.ndarray  # (n,) frame direction in (-22.5, 67.5]
    area: np.ndarray  # (n,)
    bbox: np.ndarray  # (n, 4) x0, y0, x1, y1
    centre: np.ndarray  # (n, 2) centre of the frame rectangle

    def __len__(self) -> int:
        return len(self.area)

    def take(self, idx: np.ndarray) -> FeatureColumns:
        return FeatureColumns(*(getattr(self, f.name)[idx] for f in fields(FeatureColumns)))

    @classmethod
    def empty(cls) -> FeatureColumns:
        z2 = np.zeros((0, 2))
        return cls(z2, z2, np.zeros(0), np.zeros(0), np.zeros((0, 4)), z2)

    @classmethod
    def joined(cls, parts: list[FeatureColumns]) -> FeatureColumns:
        if not parts:
            return cls.empty()
        return cls(*(np.concatenate([getattr(p, f.name) for p in parts]) for f in fields(cls)))

    def corners(self, idx: np.ndarray) -> np.ndarray:
        """The frame rectangles of features ``idx`` as (k, 4, 2) corners."""
        t = np.radians(self.angle_deg[idx])
        eu = np.stack([np.cos(t), np.sin(t)], axis=1)
        ev = np.stack([-np.sin(t), np.cos(t)], axis=1)
        hw = 0.5 * self.size[idx, :1] * eu
        hh = 0.5 * self.size[idx, 1:] * ev
        c = self.centre[idx]
        return np.stack([c - hw - hh, c + hw - hh, c + hw + hh, c - hw + hh], axis=1)


@dataclass(frozen=True)
class CompactFeatures:
    """Compact features of one layer and what became of every polygon.

    ``polygon_feature[k]``: the compact feature polygon ``k`` is part of, or -1;
    ``polygon_reason[k]``: ``COMPACT`` or why not (``LARGE``: its feature, or a
    shape it touches, is too large; ``NOT_MANHATTAN``; ``HOLE``; ``DEGENERATE``).
    """

    features: FeatureColumns
    polygon_feature: np.ndarray
    polygon_reason: np.ndarray

    def __len__(self) -> int:
        return len(self.features)

    def reason_counts(self) -> dict[str, int]:
        """Polygons per reason, by name."""
        counts = np.bincount(self.polygon_reason, minlength=len(REASON_NAMES))
        return {name: int(c) for name, c in zip(REASON_NAMES, counts, strict=True)}


@dataclass(frozen=True)
class LatticeSites:
    """Compact features with their local lattices and links (one tile's own, or joined).

    Per feature: ``a1``, ``a2`` the canonical reduced basis of its local
    lattice (NaN where missing), ``lattice`` its class (``NONE``: no feature of
    its shape within range), ``core`` whether neighbours of the same lattice
    confirm it (see :func:`lattice_sites`).  Links join core features of one
    lattice one step apart: from a feature (row index ``link_from``) to a
    feature named by its centroid key (``link_to``, see :func:`centroid_keys`),
    which may belong to another tile.  ``near_from``, ``near_to``: every
    same-shape neighbour (by key) of each feature that is not core, in either
    one's reach; :func:`find_arrays` places such features on a neighbouring
    array's lattice.
    """

    features: FeatureColumns
    a1: np.ndarray
    a2: np.ndarray
    lattice: np.ndarray
    core: np.ndarray
    link_from: np.ndarray
    link_to: np.ndarray
    near_from: np.ndarray
    near_to: np.ndarray
    grid_nm: float
    tol_nm: float
    range_nm: float

    def __len__(self) -> int:
        return len(self.features)

    @classmethod
    def joined(cls, parts: list[LatticeSites]) -> LatticeSites:
        """The sites of tiles (disjoint regions), one after the other."""
        if not parts:
            raise ValueError("no parts to join")
        offsets = np.cumsum([0] + [len(p) for p in parts[:-1]])
        return cls(
            FeatureColumns.joined([p.features for p in parts]),
            np.concatenate([p.a1 for p in parts]),
            np.concatenate([p.a2 for p in parts]),
            np.concatenate([p.lattice for p in parts]),
            np.concatenate([p.core for p in parts]),
            np.concatenate([p.link_from + o for p, o in zip(parts, offsets, strict=True)]),
            np.concatenate([p.link_to for p in parts]),
            np.concatenate([p.near_from + o for p, o in zip(parts, offsets, strict=True)]),
            np.concatenate([p.near_to for p in parts]),
            parts[0].grid_nm,
            parts[0].tol_nm,
            parts[0].range_nm,
        )


class LatticeArray(NamedTuple):
    """One array of compact features (nm as drawn; see the module notes for conventions)."""

    index: int
    lattice: str  # square, rectangular, centred, hexagonal, oblique, row
    a1_nm: tuple[float, float]
    a2_nm: tuple[float, float]  # NaN for a row
    pitch_nm: tuple[float, float]  # |a1|, |a2|
    angle_deg: float  # between a1 and a2 (NaN for a row)
    feature_nm: tuple[float, float]  # mean w, h in the feature frame
    feature_angle_deg: float
    count: int
    columns: int  # lattice sites spanned along a1
    rows: int  # along a2 (1 for a row)
    origin_nm: tuple[float, float]  # the site u = v = 0
    bbox_nm: tuple[float, float, float, float]
    interior: int
    edge: int  # last column, last row or notch
    corner: int
    max_residual_nm: float  # largest distance of a member's centroid from its site


@dataclass(frozen=True)
class LatticeArrays:
    """Arrays found among lattice sites, as columns.

    Per site (the rows of ``sites``): ``array`` (-1 for isolated features),
    ``uv`` lattice coordinates, ``role`` (``INTERIOR``, ``END_A1``: a neighbour
    missing along a1, i.e. first or last column; ``END_A2``: first or last
    row; ``CORNER``: both; ``NOTCH``: only a diagonal neighbour missing), and
    ``neighbours``: bit k set when a member sits at ``NEIGHBOUR_STEPS[k]``.
    Only neighbour sites within the interaction range decide the role.  Roles
    follow the basis: on a hexagonal or centred array drawn in a rectangular
    outline, the members of its zigzag sides miss neighbours along a1 and a2
    and count as corners.  Per array: the fields of :class:`LatticeArray`;
    ``records()`` yields them.
    """

    sites: LatticeSites
    array: np.ndarray
    uv: np.ndarray
    role: np.ndarray
    neighbours: np.ndarray
    lattice: np.ndarray
    a1: np.ndarray
    a2: np.ndarray
    origin: np.ndarray
    count: np.ndarray
    extent: np.ndarray  # (k, 2) columns, rows
    bbox: np.ndarray
    feature: np.ndarray  # (k, 2) w, h
    feature_angle_deg: np.ndarray
    role_counts: np.ndarray  # (k, 3) interior, edge, corner
    residual: np.ndarray

    def __len__(self) -> int:
        return len(self.count)

    @property
    def isolated(self) -> int:
        """Compact features in no array."""
        return int(np.sum(self.array < 0))

    def members(self, k: int) -> np.ndarray:
        """Site rows of array ``k``, in increasing order."""
        return np.flatnonzero(self.array == k)

    def record(self, k: int) -> LatticeArray:
        a1, a2 = self.a1[k], self.a2[k]
        p1, p2 = float(np.hypot(*a1)), float(np.hypot(*a2))
        angle = math.degrees(math.atan2(abs(_cross(a1, a2)), float(a1 @ a2)))
        rc = self.role_counts[k]
        return LatticeArray(
            index=k,
            lattice=LATTICE_NAMES[self.lattice[k]],
            a1_nm=(float(a1[0]), float(a1[1])),
            a2_nm=(float(a2[0]), float(a2[1])),
            pitch_nm=(p1, p2),
            angle_deg=angle,
            feature_nm=(float(self.feature[k, 0]), float(self.feature[k, 1])),
            feature_angle_deg=float(self.feature_angle_deg[k]),
            count=int(self.count[k]),
            columns=int(self.extent[k, 0]),
            rows=int(self.extent[k, 1]),
            origin_nm=(float(self.origin[k, 0]), float(self.origin[k, 1])),
            bbox_nm=tuple(float(x) for x in self.bbox[k]),
            interior=int(rc[0]),
            edge=int(rc[1]),
            corner=int(rc[2]),
            max_residual_nm=float(self.residual[k]),
        )

    def records(self):
        for k in range(len(self)):
            yield self.record(k)

    def hull(self, k: int) -> np.ndarray:
        """Convex hull (counter-clockwise, nm) of the frame rectangles of array ``k``."""
        m = self.members(k)
        m = m[self.role[m] != INTERIOR]  # the hull's corners lie on the array's edge
        return convex_hull(self.sites.features.corners(m).reshape(-1, 2))


# ---------------------------------------------------------------------------
# Small helpers


def _cross(a, b):
    return a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]


def _dot(a, b):
    return a[..., 0] * b[..., 0] + a[..., 1] * b[..., 1]


def _norm(a):
    return np.hypot(a[..., 0], a[..., 1])


def _coords(a1, a2, v):
    """Coordinates ``(t1, t2)`` of ``v`` in the basis ``a1, a2``: ``v = t1 a1 + t2 a2``."""
    with np.errstate(invalid="ignore", divide="ignore"):
        det = _cross(a1, a2)
        return _cross(v, a2) / det, _cross(a1, v) / det


_HASH_WEIGHTS = np.random.default_rng(20261205).standard_normal(16)


def _dedupe_rows(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct rows of ``x`` (exact, NaN equal to NaN): one representative row index
    per class and each row's class.  Rows are hashed to one float and checked
    against their representative; a row that collides with another is a class
    of its own."""
    n = len(x)
    if n == 0:
        z = np.zeros(0, dtype=np.int64)
        return z, z
    nan = np.isnan(x)
    y = np.hstack([np.where(nan, 0.0, x), nan])
    h = y @ _HASH_WEIGHTS[: y.shape[1]]
    _, rep, inv = np.unique(h, return_index=True, return_inverse=True)
    inv = inv.ravel()
    bad = np.flatnonzero(np.any(y != y[rep[inv]], axis=1))
    if len(bad):
        inv[bad] = len(rep) + np.arange(len(bad))
        rep = np.r_[rep, bad]
    return rep, inv


def _first_per_group(group: np.ndarray, n: int) -> np.ndarray:
    """Position of the first row of each group in ``group`` (sorted), -1 where empty."""
    first = np.full(n, -1, dtype=np.int64)
    if len(group):
        new = np.r_[True, group[1:] != group[:-1]]
        first[group[new]] = np.flatnonzero(new)
    return first


def _expand(starts: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For runs ``starts[k] .. starts[k] + counts[k] - 1``: (run k, position) per element."""
    counts = counts.astype(np.int64)
    total = int(counts.sum())
    run = np.repeat(np.arange(len(counts)), counts)
    offset = np.arange(total) - np.repeat(np.cumsum(counts) - counts, counts)
    return run, starts[run] + offset


def _cell_keys(kx: np.ndarray, ky: np.ndarray) -> tuple[np.ndarray, int]:
    """One int64 per integer grid cell (kx, ky), ordered by (kx, ky), and the stride
    of x: cell (kx + dx, ky + dy) with |dx|, |dy| <= 1 has key ``+ dx * stride + dy``
    (no wrapping)."""
    if not len(kx):
        return np.zeros(0, dtype=np.int64), 1
    ky0 = ky.min() - 1
    stride = int(ky.max() - ky0) + 2
    return (kx - kx.min() + 1) * stride + (ky - ky0), stride


def centroid_keys(centroid: np.ndarray, grid_nm: float) -> np.ndarray:
    """One int64 per centroid: its position on a grid ``KEY_STEPS`` times finer than
    the database grid (x in the high 32 bits, y in the low 32), how tiles name
    features of other tiles."""
    q = np.floor(centroid / (grid_nm / KEY_STEPS) + 0.5).astype(np.int64)
    if len(q) and (np.abs(q).max() >= 1 << 31):
        raise ValueError("coordinates too large for centroid keys")
    return (q[:, 0] << 32) + (q[:, 1] + (1 << 31))


def convex_hull(points: np.ndarray) -> np.ndarray:
    """Convex hull, counter-clockwise from the lowest-left point (Andrew's monotone chain);
    collinear points give the two extremes."""
    pts = np.unique(np.asarray(points, dtype=np.float64), axis=0)
    if len(pts) < 3:
        return pts
    p = pts.tolist()

    def half(seq):
        out: list = []
        for q in seq:
            while len(out) >= 2:
                (ax, ay), (bx, by) = out[-2], out[-1]
                if (bx - ax) * (q[1] - ay) - (by - ay) * (q[0] - ax) > 0:
                    break
                out.pop()
            out.append(q)
        return out

    lower, upper = half(p), half(p[::-1])
    return np.array(lower[:-1] + upper[:-1], dtype=np.float64)


# ---------------------------------------------------------------------------
# Feature properties


def _ring_properties(a: np.ndarray, b: np.ndarray, starts: np.ndarray, tol: float):
    """Properties of features given as edges ``a -> b`` grouped by feature
    (feature ``k``: rows ``starts[k]:starts[k + 1]``), any orientation.

    Returns centroid, size (w, h), angle_deg, area, bbox, centre, Manhattan flag.
    Coordinates are taken from each feature's lowest-left bounding corner so that
    chip-sized offsets do not cancel in the area sums.
    """
    s = starts[:-1]
    owner = np.repeat(np.arange(len(s)), np.diff(starts))
    lo = np.minimum.reduceat(np.minimum(a, b), s, axis=0)
    hi = np.maximum.reduceat(np.maximum(a, b), s, axis=0)
    la, lb = a - lo[owner], b - lo[owner]
    cross = la[:, 0] * lb[:, 1] - lb[:, 0] * la[:, 1]
    area2 = np.add.reduceat(cross, s)
    with np.errstate(invalid="ignore", divide="ignore"):
        cx = np.add.reduceat((la[:, 0] + lb[:, 0]) * cross, s) / (3.0 * area2)
        cy = np.add.reduceat((la[:, 1] + lb[:, 1]) * cross, s) / (3.0 * area2)
    centroid = lo + np.stack([cx, cy], axis=1)
    # Frame: length-weighted mean of 4 theta (edges modulo 90 degrees); exact for
    # edges along the axes or the diagonals.
    d = b - a
    l2 = _dot(d, d)
    length = np.sqrt(l2)
    with np.errstate(invalid="ignore", divide="ignore"):
        c2 = np.where(l2 > 0, (d[:, 0] ** 2 - d[:, 1] ** 2) / l2, 0.0)
        s2 = np.where(l2 > 0, 2.0 * d[:, 0] * d[:, 1] / l2, 0.0)
    c4 = np.add.reduceat(length * (c2 * c2 - s2 * s2), s)
    s4 = np.add.reduceat(length * (2.0 * s2 * c2), s)
    phi = np.degrees(np.arctan2(s4, c4)) / 4.0  # (-45, 45]
    phi = np.where(phi <= FRAME_CUT_DEG - 90.0, phi + 90.0, phi)
    t = np.radians(phi)
    cu, su = np.cos(t), np.sin(t)
    # Axis frames exactly: cos and sin of 0 and 90 degrees without round-off.
    cu = np.where(phi == 0.0, 1.0, np.where(phi == 90.0, 0.0, cu))
    su = np.where(phi == 0.0, 0.0, np.where(phi == 90.0, 1.0, su))
    pu = la[:, 0] * cu[owner] + la[:, 1] * su[owner]
    pv = -la[:, 0] * su[owner] + la[:, 1] * cu[owner]
    u0, u1 = np.minimum.reduceat(pu, s), np.maximum.reduceat(pu, s)
    v0, v1 = np.minimum.reduceat(pv, s), np.maximum.reduceat(pv, s)
    size = np.stack([u1 - u0, v1 - v0], axis=1)
    um, vm = 0.5 * (u0 + u1), 0.5 * (v0 + v1)
    centre = lo + np.stack([um * cu - vm * su, um * su + vm * cu], axis=1)
    off = np.minimum(
        np.abs(d[:, 0] * cu[owner] + d[:, 1] * su[owner]),
        np.abs(-d[:, 0] * su[owner] + d[:, 1] * cu[owner]),
    )
    manhattan = np.maximum.reduceat(off, s) <= tol
    area = 0.5 * np.abs(area2)
    cols = FeatureColumns(centroid, size, phi, area, np.hstack([lo, hi]), centre)
    return cols, manhattan


def _quad_edges(ps: PolygonSet) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Edges of every polygon of ``ps`` as drawn, grouped by polygon."""
    p = ps.points
    nxt = np.arange(len(p)) + 1
    nxt[ps.starts[1:] - 1] = ps.starts[:-1]
    return p, p[nxt], ps.starts


def _quad_properties(qs: PolygonSet, tol: float):
    """:func:`_ring_properties` of four-vertex polygons, worked out once per distinct
    shape (vertices relative to the lowest-left bounding corner) and placed."""
    pts = qs.points.reshape(-1, 4, 2)
    lo = pts.min(axis=1)
    rel = (pts - lo[:, None, :]).reshape(-1, 8)
    rep, inv = _dedupe_rows(rel)
    uniq = PolygonSet(rel[rep].reshape(-1, 2), np.arange(0, 4 * len(rep) + 1, 4))
    u, man = _ring_properties(*_quad_edges(uniq), tol)
    cols = FeatureColumns(
        lo + u.centroid[inv],
        u.size[inv],
        u.angle_deg[inv],
        u.area[inv],
        u.bbox[inv] + np.hstack([lo, lo]),
        lo + u.centre[inv],
    )
    return cols, man[inv]


def _overlapping_pairs(lo: np.ndarray, hi: np.ndarray, cell: float):
    """Pairs ``i < j`` of boxes that overlap or touch, each once.

    Boxes are filed in every cell of a square grid they cover; a pair is kept
    in the one cell holding the lower-left corner of their intersection."""
    n = len(lo)
    if n < 2:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    c0 = np.floor(lo / cell).astype(np.int64)
    c1 = np.floor(hi / cell).astype(np.int64)
    span = c1 - c0 + 1
    box, k = _expand(np.zeros(n, np.int64), span[:, 0] * span[:, 1])
    cx = c0[box, 0] + k % span[box, 0]
    cy = c0[box, 1] + k // span[box, 0]
    key, _ = _cell_keys(cx, cy)
    order = np.argsort(key, kind="stable")
    key_s, box_s = key[order], box[order]
    cx_s, cy_s = cx[order], cy[order]
    new = np.r_[True, key_s[1:] != key_s[:-1]]
    gid = np.cumsum(new) - 1
    gstart = np.flatnonzero(new)
    gend = np.r_[gstart[1:], len(key_s)]
    after = gend[gid] - np.arange(len(key_s)) - 1
    qi, qj = _expand(np.arange(len(key_s)) + 1, after)
    a, b = box_s[qi], box_s[qj]
    keep = np.all(lo[a] <= hi[b], axis=1) & np.all(lo[b] <= hi[a], axis=1)
    corner = np.floor(np.maximum(lo[a], lo[b]) / cell).astype(np.int64)
    keep &= (corner[:, 0] == cx_s[qi]) & (corner[:, 1] == cy_s[qi])
    a, b = a[keep], b[keep]
    return np.minimum(a, b), np.maximum(a, b)


def _touching_large(lo, hi, small, large, block: float) -> np.ndarray:
    """Which boxes ``small`` (indices) touch one of the boxes ``large``.

    The R-tree holds the large boxes; it is queried once per block of small
    boxes (their common bounding box), not once per box."""
    hit_small = np.zeros(len(small), dtype=bool)
    if not len(large) or not len(small):
        return hit_small
    tree = build_rtree(lo[large], hi[large])
    centre = 0.5 * (lo[small] + hi[small])
    bk = np.floor(centre / block).astype(np.int64)
    bkey, _ = _cell_keys(bk[:, 0], bk[:, 1])
    order = np.argsort(bkey, kind="stable")
    new = np.r_[True, bkey[order][1:] != bkey[order][:-1]]
    gstart = np.flatnonzero(new)
    gsize = np.diff(np.r_[gstart, len(order)])
    bmin = np.minimum.reduceat(lo[small][order], gstart, axis=0)
    bmax = np.maximum.reduceat(hi[small][order], gstart, axis=0)
    q, hit = query_pairs(tree, bmin, bmax)
    run, pos = _expand(gstart[q], gsize[q])
    s_local = order[pos]
    s_box, l_box = small[s_local], large[hit[run]]
    touch = np.all(lo[s_box] <= hi[l_box], axis=1) & np.all(lo[l_box] <= hi[s_box], axis=1)
    hit_small[s_local[touch]] = True
    return hit_small


def _ring_counts(a: np.ndarray, b: np.ndarray, feature: np.ndarray, n: int, grid_nm: float):
    """Closed rings per feature: components of the graph of edges joined end to start."""
    pts = np.round(np.concatenate([a, b]) / (grid_nm * 1e-3)).astype(np.int64)
    _, pid = np.unique(pts, axis=0, return_inverse=True)
    pid = pid.ravel()
    m = len(a)
    _, label = components(int(pid.max(initial=-1)) + 1, pid[:m], pid[m:])
    ring = label[pid[:m]]
    pairs = np.unique(np.stack([feature, ring], axis=1), axis=0)
    return np.bincount(pairs[:, 0], minlength=n)


def compact_features(
    ps: PolygonSet, grid_nm: float, max_extent_nm: float, tol_grid: float = TOL_GRID
) -> CompactFeatures:
    """Compact features of one layer: touching shapes merged, both frame extents
    below ``max_extent_nm``, Manhattan at some rotation (every edge within ``tol``
    of the frame's axes), no hole.

    Fast path: a shape whose box touches no other box and has four vertices is a
    feature as drawn; shapes whose box is at least ``sqrt(2) max_extent_nm`` wide
    cannot belong to a compact feature, nor can what touches them; the other
    groups of touching shapes are merged by :func:`build_features`.  The plain
    twin is :func:`compact_features_plain` (everything merged).
    """
    tol = tol_grid * grid_nm
    n = len(ps)
    feature_of = np.full(n, -1, dtype=np.int64)
    reason = np.full(n, LARGE, dtype=np.int8)
    if n == 0:
        return CompactFeatures(FeatureColumns.empty(), feature_of, reason)
    boxes = ps.bounding_boxes()
    eps = 0.25 * grid_nm  # as build_features: boxes this close touch
    lo, hi = boxes[:, :2] - eps, boxes[:, 2:] + eps
    extent = np.max(boxes[:, 2:] - boxes[:, :2], axis=1)
    large = extent >= _SQRT2 * max_extent_nm
    small = np.flatnonzero(~large)
    large_idx = np.flatnonzero(large)
    # Cells of the typical size, but never under an eighth of the largest small box
    # (which is filed in every cell it covers).
    ext = extent[small]
    cell = max(float(np.median(ext)) if len(ext) else 1.0, ext.max(initial=0) / 8, 4 * grid_nm)
    pa, pb = _overlapping_pairs(lo[small], hi[small], cell)
    n_comp, label = components(len(small), pa, pb)
    bad = np.zeros(n_comp, dtype=bool)
    bad[label[_touching_large(lo, hi, small, large_idx, 64.0 * cell)]] = True
    comp_size = np.bincount(label, minlength=n_comp)
    nverts = np.diff(ps.starts)[small]
    quad = (comp_size[label] == 1) & (nverts == 4) & ~bad[label]
    rest = ~quad & ~bad[label]

    parts, manh, holes = [], [], []
    q_idx, r_idx = small[quad], small[rest]
    if len(q_idx):
        cols, man = _quad_properties(ps.take(q_idx), tol)
        parts.append(cols)
        manh.append(man)
        holes.append(np.zeros(len(q_idx), dtype=bool))
    if len(r_idx):
        edges = build_features(ps.take(r_idx), grid_nm)
        order = np.argsort(edges.feature, kind="stable")
        a, b, f = edges.a[order], edges.b[order], edges.feature[order]
        present = np.unique(f)
        starts = np.r_[np.searchsorted(f, present), len(f)]
        cols, man = _ring_properties(a, b, starts, tol)
        rings = _ring_counts(a, b, np.searchsorted(present, f), len(present), grid_nm)
        parts.append(cols)
        manh.append(man)
        holes.append(rings > 1)
    cols = FeatureColumns.joined(parts)
    man = np.concatenate(manh) if manh else np.zeros(0, bool)
    hole = np.concatenate(holes) if holes else np.zeros(0, bool)
    why = np.full(len(cols), COMPACT, dtype=np.int8)
    why[np.any(cols.size >= max_extent_nm, axis=1)] = LARGE
    why[(why == COMPACT) & ~man] = NOT_MANHATTAN
    why[(why == COMPACT) & hole] = HOLE
    why[(why == COMPACT) & ~(cols.area > 0)] = DEGENERATE
    keep = why == COMPACT
    new_index = np.cumsum(keep) - 1
    # Polygons to features: a lone shape is its feature (the first rows); a merged
    # shape belongs to the smallest merged feature whose box holds its box.
    nq = len(q_idx)
    held = _holding_box(boxes[r_idx], cols.bbox[nq:], eps)
    fid = np.r_[np.arange(nq), np.where(held >= 0, nq + held, -1)]
    idx = np.r_[q_idx, r_idx]
    found = fid >= 0
    reason[idx[~found]] = DEGENERATE
    idx, fid = idx[found], fid[found]
    reason[idx] = why[fid]
    feature_of[idx] = np.where(keep[fid], new_index[fid], -1)
    return CompactFeatures(cols.take(np.flatnonzero(keep)), feature_of, reason)


def _holding_box(inner: np.ndarray, outer: np.ndarray, eps: float) -> np.ndarray:
    """For each box of ``inner``, the smallest box of ``outer`` holding it (within
    ``eps``), -1 where none does."""
    if not len(inner):
        return np.zeros(0, dtype=np.int64)
    if not len(outer):
        return np.full(len(inner), -1, dtype=np.int64)
    tree = build_rtree(outer[:, :2] - eps, outer[:, 2:] + eps)
    q, h = query_pairs(tree, inner[:, :2], inner[:, 2:])
    inside = np.all(outer[h, :2] - eps <= inner[q, :2], axis=1)
    inside &= np.all(outer[h, 2:] + eps >= inner[q, 2:], axis=1)
    q, h = q[inside], h[inside]
    area = (outer[h, 2] - outer[h, 0]) * (outer[h, 3] - outer[h, 1])
    o = np.lexsort((h, area, q))
    q, h = q[o], h[o]
    best = _first_per_group(q, len(inner))
    return np.where(best >= 0, h[np.maximum(best, 0)], -1)


def compact_features_plain(
    ps: PolygonSet, grid_nm: float, max_extent_nm: float, tol_grid: float = TOL_GRID
) -> FeatureColumns:
    """Plain twin of :func:`compact_features`: every shape through
    :func:`build_features`, then the same tests (features only, no polygon map)."""
    tol = tol_grid * grid_nm
    if len(ps) == 0:
        return FeatureColumns.empty()
    edges = build_features(ps, grid_nm)
    order = np.argsort(edges.feature, kind="stable")
    a, b, f = edges.a[order], edges.b[order], edges.feature[order]
    present = np.unique(f)
    starts = np.r_[np.searchsorted(f, present), len(f)]
    cols, man = _ring_properties(a, b, starts, tol)
    rings = _ring_counts(a, b, np.searchsorted(present, f), len(present), grid_nm)
    keep = np.all(cols.size < max_extent_nm, axis=1) & man & (rings == 1) & (cols.area > 0)
    return cols.take(np.flatnonzero(keep))


# ---------------------------------------------------------------------------
# Local lattices


def same_shape(f: FeatureColumns, i: np.ndarray, j: np.ndarray, tol: float) -> np.ndarray:
    """Features ``i`` and ``j`` have the same size and shape, the same way round:
    extents within ``tol``, frames turned by less than ``tol`` at the corners,
    areas within ``tol`` times half the perimeter."""
    wi, hi = f.size[i, 0], f.size[i, 1]
    dphi = f.angle_deg[j] - f.angle_deg[i]  # (-90, 90): both in (-22.5, 67.5]
    swap = np.abs(dphi) > 45.0
    wj = np.where(swap, f.size[j, 1], f.size[j, 0])
    hj = np.where(swap, f.size[j, 0], f.size[j, 1])
    turn = np.radians(np.where(swap, 90.0 - np.abs(dphi), np.abs(dphi)))
    half_diag = 0.5 * np.hypot(np.maximum(wi, wj), np.maximum(hi, hj))
    ok = (np.abs(wi - wj) <= tol) & (np.abs(hi - hj) <= tol) & (turn * half_diag <= tol)
    return ok & (np.abs(f.area[i] - f.area[j]) <= tol * 0.5 * (wi + hi + wj + hj))


def _direction_key(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Direction of the line of ``v`` in [-eps, 180 - eps) degrees, and whether ``v``
    itself points that way (else ``-v`` does)."""
    ang = np.degrees(np.arctan2(v[..., 1], v[..., 0]))  # (-180, 180]
    eps = BASIS_ANGLE_EPS_DEG
    fwd = (ang >= -eps) & (ang < 180.0 - eps)
    return np.where(fwd, ang, np.where(ang < -eps, ang + 180.0, ang - 180.0)), fwd


def _pair_order(group: np.ndarray, v: np.ndarray, d2: np.ndarray) -> np.ndarray:
    """Pairs by group, then length, then direction (exact ties on the grid must not
    be decided by input order)."""
    return np.lexsort((np.arctan2(v[:, 1], v[:, 0]), d2, group))


def _select_basis(loc, v, d2, m: int, tol: float):
    """Per point (local index ``loc`` of each pair, ``m`` points): the shortest vector
    (a1) and the shortest one further than ``tol`` from a1's line (a2), NaN where
    missing.  Returns a1, a2 and the pair order used."""
    order = _pair_order(loc, v, d2)
    loc, v = loc[order], v[order]
    a1 = np.full((m, 2), np.nan)
    a2 = np.full((m, 2), np.nan)
    f1 = _first_per_group(loc, m)
    has = f1 >= 0
    a1[has] = v[f1[has]]
    w = a1[loc]
    indep = np.abs(_cross(w, v)) > tol * _norm(w)
    sel = np.flatnonzero(indep)
    f2 = _first_per_group(loc[sel], m)
    has2 = f2 >= 0
    a2[has2] = v[sel[f2[has2]]]
    return a1, a2, order


def _level_radii(range_nm: float, base_nm: float) -> np.ndarray:
    radii = []
    r = base_nm
    while r < range_nm:
        radii.append(r)
        r *= 2.0
    radii.append(range_nm)
    return np.array(radii)


_CELL_STEPS = np.array([(dx, dy) for dx in (-1, 0, 1) for dy in (-1, 0, 1)])


def neighbour_lattices(f: FeatureColumns, range_nm: float, grid_nm: float, tol: float):
    """Local lattice of every feature among features of its shape within ``range_nm``.

    Returns ``a1``, ``a2`` (n, 2) as found (the shortest neighbour vector and
    the shortest one further than ``tol`` from its line; NaN where missing;
    exact ties go by direction), ``reach`` (n,): ``|a2| + tol`` capped at
    ``range_nm`` (``range_nm`` without ``a2``), and the pairs ``(i, j)`` of
    same-shape features with ``|c_j - c_i| <= reach_i``, in no set order.

    Searched on numpy grids of growing cell size (radii ``LEVEL_BASE_GRID``
    grid steps times powers of two, then ``range_nm``; a grid of cell ``r``
    holds every neighbour within ``r`` in the 3 x 3 cells around a point): a
    feature is finished at the first radius that holds ``|a2| + tol``.  One
    R-tree query per feature costs more than the whole search (13 s for 10^6
    features, measured); the plain twin, :func:`neighbour_lattices_plain`,
    does exactly that.
    """
    n = len(f)
    c = f.centroid
    a1 = np.full((n, 2), np.nan)
    a2 = np.full((n, 2), np.nan)
    reach = np.zeros(n)
    done = np.zeros(n, dtype=bool)
    out_i, out_j = [], []
    if n == 0:
        z = np.zeros(0, dtype=np.int64)
        return a1, a2, reach, z, z
    radii = _level_radii(range_nm, LEVEL_BASE_GRID * grid_nm)
    start = 2.0 * np.min(f.size, axis=1)  # same-shape neighbours sit at least ~one size apart
    level0 = np.minimum(np.searchsorted(radii, start), len(radii) - 1)
    for lvl, r in enumerate(radii):
        act = np.flatnonzero(~done & (level0 <= lvl))
        if not len(act):
            continue
        k = np.floor(c / r).astype(np.int64)
        key, stride = _cell_keys(k[:, 0], k[:, 1])
        order = np.argsort(key, kind="stable")
        sk = key[order]
        new = np.r_[True, sk[1:] != sk[:-1]]
        ukey, ustart = sk[new], np.flatnonzero(new)
        ucount = np.diff(np.r_[ustart, n])
        offs = _CELL_STEPS[:, 0] * stride + _CELL_STEPS[:, 1]
        last = r >= range_nm
        for lo in range(0, len(act), PAIR_CHUNK):
            chunk = act[lo : lo + PAIR_CHUNK]
            m = len(chunk)
            q = (key[chunk][:, None] + offs[None, :]).ravel()
            pos = np.minimum(np.searchsorted(ukey, q), len(ukey) - 1)
            cnt = np.where(ukey[pos] == q, ucount[pos], 0)
            run, p = _expand(ustart[pos], cnt)
            loc = run // len(offs)
            i, j = chunk[loc], order[p]
            v = c[j] - c[i]
            d2 = _dot(v, v)
            keep = (j != i) & (d2 <= r * r)
            loc, i, j, v, d2 = loc[keep], i[keep], j[keep], v[keep], d2[keep]
            keep = same_shape(f, i, j, tol)
            loc, i, j, v, d2 = loc[keep], i[keep], j[keep], v[keep], d2[keep]
            s1, s2, _ = _select_basis(loc, v, d2, m, tol)
            l2 = _norm(s2)
            has2 = ~np.isnan(l2)
            fin = (has2 & (l2 + tol <= r)) | last
            rch = np.where(has2, np.minimum(range_nm, l2 + tol), range_nm)
            idx = chunk[fin]
            a1[idx], a2[idx], reach[idx] = s1[fin], s2[fin], rch[fin]
            done[idx] = True
            take = fin[loc] & (d2 <= rch[loc] ** 2)
            out_i.append(i[take])
            out_j.append(j[take])
    return a1, a2, reach, np.concatenate(out_i), np.concatenate(out_j)


def neighbour_lattices_plain(f: FeatureColumns, range_nm: float, grid_nm: float, tol: float):
    """Plain twin of :func:`neighbour_lattices`: one R-tree query per feature for
    every feature within ``range_nm``, then a loop per feature."""
    n = len(f)
    c = f.centroid
    a1 = np.full((n, 2), np.nan)
    a2 = np.full((n, 2), np.nan)
    reach = np.zeros(n)
    out_i, out_j = [np.zeros(0, np.int64)], [np.zeros(0, np.int64)]
    tree = build_rtree(c, c) if n else None
    for i in range(n):
        found = np.array(
            sorted(tree.intersection((*(c[i] - range_nm), *(c[i] + range_nm)))), dtype=np.int64
        )
        found = found[found != i]
        v = c[found] - c[i]
        d2 = _dot(v, v)
        ok = (d2 <= range_nm * range_nm) & same_shape(f, np.full(len(found), i), found, tol)
        found, v, d2 = found[ok], v[ok], d2[ok]
        o = _pair_order(np.zeros(len(found)), v, d2)
        found, v, d2 = found[o], v[o], d2[o]
        rch = range_nm
        if len(found):
            a1[i] = v[0]
            for k in range(1, len(found)):
                if abs(_cross(v[0], v[k])) > tol * _norm(v[0]):
                    a2[i] = v[k]
                    rch = min(range_nm, _norm(v[k]) + tol)
                    break
        reach[i] = rch
        near = d2 <= rch * rch
        out_i.append(np.full(int(near.sum()), i, dtype=np.int64))
        out_j.append(found[near])
    return a1, a2, reach, np.concatenate(out_i), np.concatenate(out_j)


_STEPS = np.array([(1, 0), (0, 1), (1, 1), (1, -1), (-1, 0), (0, -1), (-1, -1), (-1, 1)])


def reduced_basis(b1: np.ndarray, b2: np.ndarray, tol: float):
    """Canonical reduced basis of the lattices spanned by rows ``b1``, ``b2``.

    Lagrange-Gauss reduction (swap so that ``|b1| <= |b2|``, subtract the
    nearest integer multiple of ``b1`` from ``b2``, until that multiple is 0),
    then the canonical choice of the module notes among the lattice's shortest
    vectors, which for a reduced basis are among ``±b1, ±b2, ±(b1 + b2),
    ±(b1 - b2)``.  Rows with ``b2`` NaN are lines: ``a1 = ±b1``.  Rows with
    ``b1`` NaN stay NaN.  Returns ``a1``, ``a2`` and integer ``T`` (n, 2, 2)
    with ``[a1 a2] = [b1 b2] T`` (vectors as columns).
    """
    n = len(b1)
    a1 = np.array(b1, dtype=np.float64).reshape(n, 2)
    a2 = np.array(b2, dtype=np.float64).reshape(n, 2)
    T = np.zeros((n, 2, 2), dtype=np.int64)
    T[:, 0, 0] = T[:, 1, 1] = 1
    line = ~np.isnan(a1[:, 0]) & np.isnan(a2[:, 0])
    if line.any():
        _, fwd = _direction_key(a1[line])
        s = np.where(fwd, 1, -1)
        a1[line] *= s[:, None]
        T[line, 0, 0] = s
    two = np.flatnonzero(~np.isnan(a1[:, 0]) & ~np.isnan(a2[:, 0]))
    if not len(two):
        return a1, a2, T
    x, y, t = a1[two], a2[two], T[two]
    todo = np.arange(len(two))
    while len(todo):
        xs, ys, ts = x[todo], y[todo], t[todo]
        sw = _dot(ys, ys) < _dot(xs, xs)
        xs[sw], ys[sw] = ys[sw].copy(), xs[sw].copy()
        ts[sw] = ts[sw][:, :, ::-1]
        ratio = _dot(xs, ys) / _dot(xs, xs)
        # A ratio of +-1/2 is reduced already: rounding it by float noise cycles.
        mu = np.where(np.abs(ratio) <= 0.5 + 1e-9, 0.0, np.rint(ratio))
        ys -= mu[:, None] * xs
        ts[:, :, 1] -= mu.astype(np.int64)[:, None] * ts[:, :, 0]
        x[todo], y[todo], t[todo] = xs, ys, ts
        todo = todo[mu != 0]
    S0, S1 = _STEPS[None, :, 0, None], _STEPS[None, :, 1, None]
    V = x[:, None, :] * S0 + y[:, None, :] * S1
    C = t[:, None, :, 0] * S0 + t[:, None, :, 1] * S1  # coefficients in b1, b2
    length = _norm(V)
    key, fwd = _direction_key(V)
    lam1 = length.min(axis=1, keepdims=True)
    k1 = np.argmin(np.where(fwd & (length <= lam1 + tol), key, np.inf), axis=1)
    rows = np.arange(len(two))
    v1 = V[rows, k1]
    l1 = _norm(v1)[:, None]
    cr = _cross(v1[:, None, :], V)
    indep = np.abs(cr) > tol * l1
    lam2 = np.where(indep, length, np.inf).min(axis=1, keepdims=True)
    obtuse = _dot(V, v1[:, None, :]) < -tol * l1
    score2 = 1000.0 * obtuse + 400.0 * (cr <= 0) + (key + 1.0)
    k2 = np.argmin(np.where(indep & (length <= lam2 + tol), score2, np.inf), axis=1)
    t_out = np.stack([C[rows, k1], C[rows, k2]], axis=2)
    det = t_out[:, 0, 0] * t_out[:, 1, 1] - t_out[:, 0, 1] * t_out[:, 1, 0]
    ok = np.abs(det) == 1  # near-ties may pick two vectors that are no basis: keep the reduced one
    a1[two] = np.where(ok[:, None], v1, x)
    a2[two] = np.where(ok[:, None], V[rows, k2], y)
    T[two] = np.where(ok[:, None, None], t_out, t)
    return a1, a2, T


def reduced_basis_plain(b1: np.ndarray, b2: np.ndarray, tol: float, span: int = 12):
    """Plain twin of :func:`reduced_basis` for one lattice: every vector ``m b1 + n
    b2`` with ``|m|, |n| <= span``, then the convention of the module notes applied
    by a loop (enough when the given basis is not too skewed).  Returns a1, a2."""
    vecs = [
        m * b1 + n * b2 for m in range(-span, span + 1) for n in range(-span, span + 1) if m or n
    ]
    eps = BASIS_ANGLE_EPS_DEG

    def direction(v):
        ang = math.degrees(math.atan2(v[1], v[0]))
        return ang + 180.0 if ang < -eps else ang - 180.0 if ang >= 180.0 - eps else ang

    def forward(v):
        return -eps <= math.degrees(math.atan2(v[1], v[0])) < 180.0 - eps

    lam1 = min(math.hypot(*v) for v in vecs)
    first = min((v for v in vecs if math.hypot(*v) <= lam1 + tol and forward(v)), key=direction)
    l1 = math.hypot(*first)
    indep = [v for v in vecs if abs(first[0] * v[1] - first[1] * v[0]) > tol * l1]
    lam2 = min(math.hypot(*v) for v in indep)

    def rank(v):
        cross = first[0] * v[1] - first[1] * v[0]
        return (bool(v @ first < -tol * l1), bool(cross <= 0), direction(v))

    return first, min((v for v in indep if math.hypot(*v) <= lam2 + tol), key=rank)


def lattice_class(a1: np.ndarray, a2: np.ndarray, tol: float) -> np.ndarray:
    """Class of each canonical reduced basis (see the module notes)."""
    l1, l2 = _norm(a1), _norm(a2)
    with np.errstate(invalid="ignore", divide="ignore"):
        proj = np.abs(_dot(a1, a2)) / l1
    eq = l2 - l1 <= tol
    right = proj <= tol
    half = np.abs(proj - 0.5 * l1) <= tol
    cls = np.where(
        right,
        np.where(eq, SQUARE, RECTANGULAR),
        np.where(eq & half, HEXAGONAL, np.where(eq | half, CENTRED, OBLIQUE)),
    ).astype(np.int8)
    cls[np.isnan(a2[:, 0])] = ROW
    cls[np.isnan(a1[:, 0])] = NONE
    return cls


STEP_CHUNK = 1 << 20
"""Pairs whose lattice steps are worked out at once (bounds the temporaries)."""


def _step_table(a1: np.ndarray, a2: np.ndarray, line: np.ndarray) -> np.ndarray:
    """Per basis, the columns :func:`_step_code` reads: the rows of the inverse basis
    matrix, then a1 and a2.  A row (line) is the basis ``a1, 0`` with the
    projection on ``a1`` as its first coordinate."""
    with np.errstate(invalid="ignore", divide="ignore"):
        det = _cross(a1, a2)
        n1 = _dot(a1, a1)
        inv = np.stack([a2[:, 1] / det, -a2[:, 0] / det, -a1[:, 1] / det, a1[:, 0] / det])
        inv_line = np.stack([a1[:, 0] / n1, a1[:, 1] / n1, 0.0 * n1, 0.0 * n1])
    inv = np.where(line[None, :], inv_line, inv)
    second = np.where(line[:, None], 0.0, a2)
    return np.vstack([inv, a1.T, second.T])


def _step_code(table: np.ndarray, b: np.ndarray, v: np.ndarray, tol: float) -> np.ndarray:
    """Which lattice step ``v`` is in basis ``b`` (a column of ``table``, see
    :func:`_step_table`): 0 for ±a1, 1 for ±a2, 2 for ±(a1 + a2), 3 for ±(a1 - a2),
    -1 when ``v`` is not within ``tol`` of one."""
    out = np.empty(len(b), dtype=np.int8)
    for lo in range(0, len(b), STEP_CHUNK):
        bb, w = b[lo : lo + STEP_CHUNK], v[lo : lo + STEP_CHUNK]
        vx, vy = w[:, 0], w[:, 1]
        with np.errstate(invalid="ignore"):
            m = np.rint(table[0][bb] * vx + table[1][bb] * vy)
            k = np.rint(table[2][bb] * vx + table[3][bb] * vy)
            rx = vx - m * table[4][bb] - k * table[6][bb]
            ry = vy - m * table[5][bb] - k * table[7][bb]
            ok = (np.abs(m) <= 1) & (np.abs(k) <= 1) & ((m != 0) | (k != 0))
            ok &= rx * rx + ry * ry <= tol * tol
        flip = (m < 0) | ((m == 0) & (k < 0))
        m, k = np.where(flip, -m, m), np.where(flip, -k, k)
        code = np.select([k == 0, m == 0, k == m], [0, 1, 2], 3)
        out[lo : lo + STEP_CHUNK] = np.where(ok, code, -1)
    return out


def _same_lattice(a1i, a2i, line_i, a1j, a2j, line_j, tol):
    """The lattices ``i`` and ``j`` are one: each vector of ``j``'s basis within ``tol``
    of an integer combination of ``i``'s, with determinant ±1 (rows: parallel
    ``a1`` of one length)."""
    p1, q1 = (np.rint(t) for t in _coords(a1i, a2i, a1j))
    p2, q2 = (np.rint(t) for t in _coords(a1i, a2i, a2j))
    with np.errstate(invalid="ignore"):
        r1 = a1j - p1[:, None] * a1i - q1[:, None] * a2i
        r2 = a2j - p2[:, None] * a1i - q2[:, None] * a2i
        ok2 = (_norm(r1) <= tol) & (_norm(r2) <= tol) & (np.abs(p1 * q2 - p2 * q1) == 1)
        ok1 = np.minimum(_norm(a1j - a1i), _norm(a1j + a1i)) <= tol
    return np.where(line_i & line_j, ok1, np.where(~line_i & ~line_j, ok2, False))


def _same_lattice_of_pairs(a1, a2, line, bi, bj, tol) -> np.ndarray:
    """:func:`_same_lattice` for the basis pairs ``(bi, bj)``: from a table of all
    pairs of bases when there are few (arrays), else per distinct pair."""
    nb = len(a1)
    if nb * nb <= max(4 * len(bi), 1 << 16):
        ii, jj = np.divmod(np.arange(nb * nb), nb)
        table = _same_lattice(a1[ii], a2[ii], line[ii], a1[jj], a2[jj], line[jj], tol)
        return table[bi * nb + bj]
    upair, inv = np.unique(bi * nb + bj, return_inverse=True)
    ui, uj = np.divmod(upair, nb)
    return _same_lattice(a1[ui], a2[ui], line[ui], a1[uj], a2[uj], line[uj], tol)[inv.ravel()]


def _confirmed(n: int, i, code_i, j, code_j, line) -> np.ndarray:
    """Features whose lattice is confirmed by same-lattice neighbours along two
    independent steps (rows: along one); ``code_*``: the step's line (see
    :func:`_step_code`) seen from each end.  Two features alone always agree on
    the lattice their own vector spans (where two arrays meet, facing features
    do); a lattice seen along two directions is an array's."""
    seen = np.zeros((4, n), dtype=bool)
    for a, code in ((i, code_i), (j, code_j)):
        for q in range(4):
            seen[q] |= np.bincount(a[code == q], minlength=n) > 0
    directions = seen.sum(axis=0)
    return np.where(line, directions >= 1, directions >= 2)


def lattice_sites(
    ps: PolygonSet | None,
    grid_nm: float,
    max_extent_nm: float,
    interaction_range_nm: float,
    region: tuple[float, float, float, float] | None = None,
    tol_grid: float = TOL_GRID,
    compact: CompactFeatures | None = None,
    plain: bool = False,
) -> LatticeSites:
    """Local lattices of the compact features of ``ps`` and their links.

    A link joins feature ``i`` to a feature ``j`` of the same shape within
    ``i``'s reach when ``c_j - c_i`` is a lattice step (coordinates in {-1, 0, 1})
    and both local lattices are one lattice, each confirmed along two
    independent steps (core features, see :func:`_confirmed`).  A feature
    that is not core (the last columns of an array beside another array see
    the other's features among their nearest) keeps its same-shape
    neighbours for :func:`find_arrays`.

    With ``region`` only features whose centroid lies in it are kept (with
    their links); read shapes ``HALO_RANGES`` ranges plus ``2 sqrt(2)
    max_extent_nm`` around it.  ``compact``: features already selected from
    ``ps``.  ``plain``: the R-tree neighbour search (the plain twin, for tests).
    Identical raw bases (the common case in arrays) are reduced once.
    """
    tol = tol_grid * grid_nm
    cf = compact if compact is not None else compact_features(ps, grid_nm, max_extent_nm, tol_grid)
    f = cf.features
    c = f.centroid
    search = neighbour_lattices_plain if plain else neighbour_lattices
    r1, r2, _, pi, pj = search(f, interaction_range_nm, grid_nm, tol)
    rep, bid = _dedupe_rows(np.hstack([r1, r2]))
    ua1, ua2, _ = reduced_basis(r1[rep], r2[rep], tol)
    ucls = lattice_class(ua1, ua2, tol)
    uline = ucls == ROW
    a1, a2, cls = ua1[bid], ua2[bid], ucls[bid]
    v = c[pj] - c[pi]
    bi, bj = bid[pi], bid[pj]
    table = _step_table(ua1, ua2, uline)
    code_i = _step_code(table, bi, v, tol)
    cand = np.flatnonzero(code_i >= 0)
    cand = cand[_same_lattice_of_pairs(ua1, ua2, uline, bi[cand], bj[cand], tol)]
    code_j = _step_code(table, bj[cand], -v[cand], tol)
    cand, code_j = cand[code_j >= 0], code_j[code_j >= 0]
    core = _confirmed(len(f), pi[cand], code_i[cand], pj[cand], code_j, cls == ROW)
    core_pair = np.zeros(len(pi), dtype=bool)
    core_pair[cand] = core[pi[cand]] & core[pj[cand]]
    # Features that are not core keep their same-shape neighbours, from both ends: a
    # feature's own reach can be too short to see the array it ends (its nearest
    # neighbours belong to another array).
    loose_i, loose_j = ~core[pi], ~core[pj]
    near_from = np.concatenate([pi[loose_i], pj[loose_j]])
    near_to = np.concatenate([pj[loose_i], pi[loose_j]])
    keys = centroid_keys(c, grid_nm)
    link_from, link_to = pi[core_pair], pj[core_pair]
    if region is not None:
        own = in_region(c, region)
        new_index = np.cumsum(own) - 1
        keep = own[link_from]
        link_from, link_to = new_index[link_from[keep]], link_to[keep]
        keep = own[near_from]
        near_from, near_to = new_index[near_from[keep]], near_to[keep]
        idx = np.flatnonzero(own)
        f, a1, a2, cls, core = f.take(idx), a1[idx], a2[idx], cls[idx], core[idx]
    return LatticeSites(
        f,
        a1,
        a2,
        cls,
        core,
        link_from,
        keys[link_to],
        near_from,
        keys[near_to],
        grid_nm,
        tol,
        interaction_range_nm,
    )


# ---------------------------------------------------------------------------
# Arrays

FIT_DECIMALS = 6
"""Fitted bases and origins are rounded to 1e-6 nm: float noise of the sums must
not differ between a tiled and a whole run."""


def _reduce_groups(ufunc, values: np.ndarray, starts: np.ndarray, k: int, fill) -> np.ndarray:
    """``ufunc.reduceat`` over runs starting at ``starts`` (k runs, all non-empty)."""
    if k == 0:
        return np.full((0,) + values.shape[1:], fill)
    return ufunc.reduceat(values, starts, axis=0)


def grow_arrays(seed_of, near_from, near_to, centroid, keys, steps, pitch, tol) -> np.ndarray:
    """Arrays grown round by round: a feature in none (``seed_of`` -1) joins the
    array of a neighbour in one (pairs ``near_from`` -> ``near_to``) when it sits
    one lattice step from that neighbour on the array's lattice (``steps``, see
    :func:`_step_table`); of several, the nearest neighbour, then the array of
    shorter pitches (``pitch`` (k, 2)), then the neighbour of least key.  Every
    feature that can join in a round joins in it.  Returns the new ``seed_of``;
    the plain twin is :func:`grow_arrays_plain`."""
    seed_of = seed_of.copy()
    n = len(seed_of)
    while True:
        go = (seed_of[near_from] < 0) & (seed_of[near_to] >= 0)
        i, j = near_from[go], near_to[go]
        a = seed_of[j]
        fit = _step_code(steps, a, centroid[i] - centroid[j], tol) >= 0
        if not fit.any():
            return seed_of
        i, j, a = i[fit], j[fit], a[fit]
        dv = centroid[i] - centroid[j]
        order = np.lexsort((keys[j], pitch[a, 1], pitch[a, 0], _dot(dv, dv), i))
        i, a = i[order], a[order]
        best = _first_per_group(i, n)
        chosen = best[best >= 0]
        seed_of[i[chosen]] = a[chosen]


def grow_arrays_plain(seed_of, near_from, near_to, centroid, keys, steps, pitch, tol):
    """Plain twin of :func:`grow_arrays`: breadth first, one feature at a time."""
    seed_of = seed_of.copy()
    partners: dict[int, list[int]] = {}
    for i, j in zip(near_from.tolist(), near_to.tolist(), strict=True):
        partners.setdefault(i, []).append(j)
    while True:
        joined = {}
        for i, js in partners.items():
            if seed_of[i] >= 0:
                continue
            best = None
            for j in js:
                a = int(seed_of[j])
                if a < 0:
                    continue
                dv = centroid[i] - centroid[j]
                code = _step_code(steps, np.array([a]), dv[None, :], tol)[0]
                if code < 0:
                    continue
                rank = (float(_dot(dv, dv)), pitch[a, 0], pitch[a, 1], int(keys[j]))
                if best is None or rank < best[0]:
                    best = (rank, a)
            if best is not None:
                joined[i] = best[1]
        if not joined:
            return seed_of
        for i, a in joined.items():
            seed_of[i] = a


def find_arrays(
    sites: LatticeSites,
    min_members: int = MIN_MEMBERS,
    min_members_row: int = MIN_MEMBERS_ROW,
    plain: bool = False,
) -> LatticeArrays:
    """Arrays: core features joined by links, grown by the features that sit on
    their lattice next to them, with at least ``min_members`` members (rows:
    ``min_members_row``).

    Growth goes in rounds (:func:`grow_arrays`): a feature that is not core
    joins the array of a same-shape neighbour already in one when it sits one
    lattice step (coordinates in {-1, 0, 1}, within ``tol``) from it on that
    array's lattice (its reference member's); of several, the nearest
    neighbour, then the array with the shorter pitches, then the neighbour
    with the least key.  Of the features left, neighbours that are each
    other's shortest vector (``a1`` up to sign) form rows (a row running
    beside an array, within range, has the array in its second vector).
    Each array's basis is then fitted to all its members by least squares
    (lattice coordinates from the links' steps in its reference member's
    basis, so exact for arrays on the grid) and made canonical; its class,
    rows and columns, feature size, bounding box and each member's role
    follow.  The reference member is the core member with the least centroid
    key (least x, then least y); arrays are numbered in the order of their
    reference members, so nothing depends on the order of the input or on a
    tiling.  ``plain``: grow with :func:`grow_arrays_plain` (for tests).
    """
    f = sites.features
    n = len(f)
    tol, R = sites.tol_nm, sites.range_nm
    c = f.centroid
    keys = centroid_keys(c, sites.grid_nm)
    korder = np.argsort(keys, kind="stable")
    sk = keys[korder]

    def resolve(frm, to):
        if not n:
            return frm[:0], frm[:0]
        pos = np.minimum(np.searchsorted(sk, to), n - 1)
        found = sk[pos] == to
        return frm[found], korder[pos[found]]

    lf, lt = resolve(sites.link_from, sites.link_to)
    nf, nt = resolve(sites.near_from, sites.near_to)
    n_comp, comp = components(n, lf, lt)
    # Seeds: components of core features; their reference member and its lattice.
    seed_of = np.where(sites.core, comp, -1)
    ref_order = np.lexsort((keys, ~sites.core, comp))
    first = _first_per_group(comp[ref_order], n_comp)
    ref = ref_order[np.maximum(first, 0)]
    is_seed = sites.core[ref] if n else np.zeros(0, bool)
    line = sites.lattice[ref] == ROW
    s1, s2 = sites.a1[ref], np.where(line[:, None], np.nan, sites.a2[ref])
    pitch = np.stack([_norm(s1), np.nan_to_num(_norm(s2), nan=np.inf)], axis=1)
    grow = grow_arrays_plain if plain else grow_arrays
    seed_of = grow(seed_of, nf, nt, c, keys, _step_table(s1, s2, line), pitch, tol)
    # Rows among the features left over: neighbours that are each other's shortest
    # vector (a row beside an array sees the array in its second vector).
    free = (seed_of < 0)[nf] & (seed_of < 0)[nt]
    rf, rt = nf[free], nt[free]
    v = c[rt] - c[rf]
    along = np.ones(len(rf), dtype=bool)
    for end in (rf, rt):
        w = sites.a1[end]
        along &= np.minimum(_norm(v - w), _norm(v + w)) <= tol
    rf, rt = rf[along], rt[along]
    n_row, row_comp = components(n, rf, rt)
    row_size = np.bincount(row_comp, minlength=n_row)
    in_row = np.flatnonzero(row_size[row_comp] >= min_members_row)
    if len(in_row):
        rows_found, row_id = np.unique(row_comp[in_row], return_inverse=True)
        seed_of[in_row] = n_comp + row_id.ravel()
        order = np.lexsort((keys[in_row], row_id.ravel()))
        row_ref = in_row[order][_first_per_group(row_id.ravel()[order], len(rows_found))]
        ref = np.r_[ref, row_ref]
        is_seed = np.r_[is_seed, np.ones(len(rows_found), dtype=bool)]
        line = np.r_[line, np.ones(len(rows_found), dtype=bool)]
        n_comp += len(rows_found)
        lf, lt = np.r_[lf, rf], np.r_[lt, rt]
    size = np.bincount(seed_of[seed_of >= 0], minlength=n_comp)
    is_array = is_seed & (size >= np.where(line, min_members_row, min_members))
    arr_comp = np.flatnonzero(is_array)
    numbering = np.argsort(keys[ref[arr_comp]], kind="stable")
    arr_comp = arr_comp[numbering]
    ref, line = ref[arr_comp], line[arr_comp]
    k = len(arr_comp)
    label_of_comp = np.full(n_comp, -1, dtype=np.int64)
    label_of_comp[arr_comp] = np.arange(k)
    array = np.where(seed_of >= 0, label_of_comp[np.maximum(seed_of, 0)], -1)

    # Members by array.
    mem = np.flatnonzero(array >= 0)
    mem = mem[np.argsort(array[mem], kind="stable")]
    lab = array[mem]
    starts = np.searchsorted(lab, np.arange(k))
    count = np.bincount(lab, minlength=k)
    ml = line[lab]

    def sums(w):
        return np.bincount(lab, weights=w, minlength=k)

    # Basis from the links: their vectors and integer steps in the reference basis.
    b1 = sites.a1[ref]
    b2 = np.where(line[:, None], np.nan, sites.a2[ref])
    inl = (array[lf] >= 0) & (array[lf] == array[lt]) & (keys[lf] < keys[lt])  # each link once
    el = array[lf[inl]]
    ev = c[lt[inl]] - c[lf[inl]]
    t1, t2 = _coords(b1[el], b2[el], ev)
    with np.errstate(invalid="ignore", divide="ignore"):
        s1 = np.rint(_dot(ev, b1[el]) / _dot(b1[el], b1[el]))
    sm = np.where(line[el], s1, np.rint(t1))
    sn = np.where(line[el], 0.0, np.rint(t2))

    def esums(w):
        return np.bincount(el, weights=w, minlength=k)

    g00, g01, g11 = esums(sm * sm), esums(sm * sn), esums(sn * sn)
    h0 = np.stack([esums(sm * ev[:, 0]), esums(sm * ev[:, 1])], axis=1)
    h1 = np.stack([esums(sn * ev[:, 0]), esums(sn * ev[:, 1])], axis=1)
    det = g00 * g11 - g01 * g01
    g1, g2 = b1.copy(), b2.copy()
    fit2 = ~line & (det > 0.5)
    with np.errstate(invalid="ignore", divide="ignore"):
        g1[fit2] = ((g11[:, None] * h0 - g01[:, None] * h1) / det[:, None])[fit2]
        g2[fit2] = ((g00[:, None] * h1 - g01[:, None] * h0) / det[:, None])[fit2]
        fit1 = line & (g00 > 0.5)
        g1[fit1] = (h0 / g00[:, None])[fit1]
    # Lattice coordinates of every member, from the reference member.
    rel = c[mem] - c[ref[lab]]
    t1, t2 = _coords(g1[lab], g2[lab], rel)
    with np.errstate(invalid="ignore", divide="ignore"):
        u1 = np.rint(_dot(rel, g1[lab]) / _dot(g1[lab], g1[lab]))
    u = np.where(ml, u1, np.rint(t1))
    v = np.where(ml, 0.0, np.rint(t2))
    # Least squares over the members: rel = o + u f1 + v f2.
    S = [sums(w) for w in (np.ones(len(mem)), u, v, u * u, u * v, v * v)]
    Y = [np.stack([sums(w * rel[:, 0]), sums(w * rel[:, 1])], axis=1) for w in (1.0, u, v)]
    N3 = np.stack(
        [
            np.stack([S[0], S[1], S[2]], 1),
            np.stack([S[1], S[3], S[4]], 1),
            np.stack([S[2], S[4], S[5]], 1),
        ],
        axis=1,
    )
    Y3 = np.stack(Y, axis=1)
    o = np.zeros((k, 2))
    f1, f2 = g1.copy(), g2.copy()
    d3 = np.linalg.det(N3) if k else np.zeros(0)
    ok3 = ~line & (d3 > 0.5)
    if ok3.any():
        sol = np.linalg.solve(N3[ok3], Y3[ok3])
        o[ok3], f1[ok3], f2[ok3] = sol[:, 0], sol[:, 1], sol[:, 2]
    d2 = S[0] * S[3] - S[1] * S[1]
    ok2 = line & (d2 > 0.5)
    if ok2.any():
        sol = np.linalg.solve(N3[ok2][:, :2, :2], Y3[ok2][:, :2])
        o[ok2], f1[ok2] = sol[:, 0], sol[:, 1]
    rest = ~ok3 & ~ok2  # too few distinct sites to fit both: the mean offset, the links' basis
    if rest.any():
        mean = (Y[0] - S[1][:, None] * g1 - S[2][:, None] * np.nan_to_num(g2)) / S[0][:, None]
        o[rest] = mean[rest]
    a1, a2, T = reduced_basis(f1, f2, tol)
    a1, a2 = np.round(a1, FIT_DECIMALS) + 0.0, np.round(a2, FIT_DECIMALS) + 0.0
    # Coordinates in the canonical basis: T^-1 (u, v), T unimodular.
    td = T[:, 0, 0] * T[:, 1, 1] - T[:, 0, 1] * T[:, 1, 0]
    T, td, ui, vi = T[lab], td[lab], u.astype(np.int64), v.astype(np.int64)
    uvi = np.stack(
        [(T[:, 1, 1] * ui - T[:, 0, 1] * vi) * td, (-T[:, 1, 0] * ui + T[:, 0, 0] * vi) * td], 1
    )
    umin = _reduce_groups(np.minimum, uvi, starts, k, 0)
    umax = _reduce_groups(np.maximum, uvi, starts, k, 0)
    uvi -= umin[lab]
    a2z = np.nan_to_num(a2)
    origin = c[ref] + o + umin[:, :1] * a1 + umin[:, 1:] * a2z
    origin = np.round(origin, FIT_DECIMALS) + 0.0
    site = origin[lab] + uvi[:, :1] * a1[lab] + uvi[:, 1:] * a2z[lab]
    resid = _reduce_groups(np.maximum, _norm(c[mem] - site), starts, k, 0.0)
    extent = umax - umin + 1
    lattice = np.where(line, ROW, lattice_class(a1, a2, tol)).astype(np.int8)

    # Roles: which of the eight neighbouring sites hold a member.
    if k and (extent.max() + 2 >= 1 << 21 or k >= 1 << 21):
        raise ValueError("array too large for site keys")
    skey = (lab << 42) + ((uvi[:, 0] + 1) << 21) + (uvi[:, 1] + 1)
    sorted_keys = np.sort(skey)
    bits = np.zeros(len(mem), dtype=np.uint8)
    present = np.zeros((len(mem), 8), dtype=bool)
    for bit, (du, dv) in enumerate(NEIGHBOUR_STEPS.tolist()):
        q = skey + (du << 21) + dv
        p = np.minimum(np.searchsorted(sorted_keys, q), max(len(sorted_keys) - 1, 0))
        present[:, bit] = sorted_keys[p] == q if len(mem) else False
        bits |= present[:, bit].astype(np.uint8) << bit
    step = (
        NEIGHBOUR_STEPS[None, :, :1] * a1[:, None, :]
        + NEIGHBOUR_STEPS[None, :, 1:] * a2z[:, None, :]
    )
    within = _norm(step) <= R + tol
    within[line] = NEIGHBOUR_STEPS[:, 1] == 0  # a row has neighbours along a1 only
    missing = within[lab] & ~present
    miss1 = missing[:, [0, 4]].any(axis=1)
    miss2 = missing[:, [2, 6]].any(axis=1)
    diag = missing[:, [1, 3, 5, 7]].any(axis=1)
    role_m = np.select(
        [miss1 & miss2, miss1, miss2, diag], [CORNER, END_A1, END_A2, NOTCH], INTERIOR
    ).astype(np.int8)
    kind = np.select([role_m == INTERIOR, role_m == CORNER], [0, 2], 1)
    role_counts = np.stack([sums(kind == q) for q in range(3)], axis=1).astype(np.int64)

    # Bounding boxes and feature size (in the reference member's frame).
    lo = _reduce_groups(np.minimum, f.bbox[mem, :2], starts, k, 0.0)
    hi = _reduce_groups(np.maximum, f.bbox[mem, 2:], starts, k, 0.0)
    fang = f.angle_deg[ref]
    swap = np.abs(f.angle_deg[mem] - fang[lab]) > 45.0
    wh = np.where(swap[:, None], f.size[mem][:, ::-1], f.size[mem])
    feature = np.stack([sums(wh[:, 0]), sums(wh[:, 1])], axis=1) / np.maximum(count, 1)[:, None]

    out_uv = np.full((n, 2), -1, dtype=np.int64)
    out_uv[mem] = uvi
    out_role = np.full(n, -1, dtype=np.int8)
    out_role[mem] = role_m
    out_bits = np.zeros(n, dtype=np.uint8)
    out_bits[mem] = bits
    return LatticeArrays(
        sites=sites,
        array=array,
        uv=out_uv,
        role=out_role,
        neighbours=out_bits,
        lattice=lattice,
        a1=a1,
        a2=a2,
        origin=origin,
        count=count,
        extent=extent.astype(np.int64),
        bbox=np.hstack([lo, hi]),
        feature=feature,
        feature_angle_deg=fang,
        role_counts=role_counts,
        residual=resid,
    )


def extract_lattices(
    ps: PolygonSet,
    grid_nm: float,
    max_extent_nm: float,
    interaction_range_nm: float,
    tol_grid: float = TOL_GRID,
) -> LatticeArrays:
    """Arrays of compact features on one layer (nm as drawn): :func:`lattice_sites`
    then :func:`find_arrays`."""
    return find_arrays(
        lattice_sites(ps, grid_nm, max_extent_nm, interaction_range_nm, tol_grid=tol_grid)
    )


def member_roles_plain(arrays: LatticeArrays) -> tuple[np.ndarray, np.ndarray]:
    """Plain twin of the roles and neighbour bits of :func:`find_arrays`: the
    occupied sites in a set, one loop per member and neighbour."""
    n = len(arrays.array)
    R, tol = arrays.sites.range_nm, arrays.sites.tol_nm
    occupied = {
        (int(a), int(u), int(v))
        for a, (u, v) in zip(arrays.array, arrays.uv, strict=True)
        if a >= 0
    }
    role = np.full(n, -1, dtype=np.int8)
    bits = np.zeros(n, dtype=np.uint8)
    for i in range(n):
        a = int(arrays.array[i])
        if a < 0:
            continue
        u, v = (int(x) for x in arrays.uv[i])
        missing = []
        for bit, (du, dv) in enumerate(NEIGHBOUR_STEPS.tolist()):
            here = (a, u + du, v + dv) in occupied
            bits[i] |= int(here) << bit
            if arrays.lattice[a] == ROW:
                considered = dv == 0
            else:
                step = du * arrays.a1[a] + dv * arrays.a2[a]
                considered = math.hypot(*step) <= R + tol
            if considered and not here:
                missing.append((du, dv))
        m1 = (1, 0) in missing or (-1, 0) in missing
        m2 = (0, 1) in missing or (0, -1) in missing
        if m1 and m2:
            role[i] = CORNER
        elif m1:
            role[i] = END_A1
        elif m2:
            role[i] = END_A2
        elif missing:
            role[i] = NOTCH
        else:
            role[i] = INTERIOR
    return role, bits
