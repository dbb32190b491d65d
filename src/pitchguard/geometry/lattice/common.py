"""Lattice extraction: constants and small vector helpers shared by its stages."""

from __future__ import annotations

import math

import numpy as np

TOL_GRID = 3.0
"""Default tolerance in database grid steps: a snapped, rotated shape's centroid moves
by up to half a step per axis, so a vector between two by one, and two such vectors
differ by up to two steps per axis (2.8 in length)."""

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
"""Upper end of the feature frame's angle range (-22.5, 67.5] (see the package notes)."""

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

SQRT2 = math.sqrt(2.0)


# ---------------------------------------------------------------------------
# Small helpers


def cross_2d(a, b):
    return a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]


def row_dot(a, b):
    return a[..., 0] * b[..., 0] + a[..., 1] * b[..., 1]


def row_norm(a):
    return np.hypot(a[..., 0], a[..., 1])


def lattice_coords(a1, a2, v):
    """Coordinates ``(t1, t2)`` of ``v`` in the basis ``a1, a2``: ``v = t1 a1 + t2 a2``."""
    with np.errstate(invalid="ignore", divide="ignore"):
        det = cross_2d(a1, a2)
        return cross_2d(v, a2) / det, cross_2d(a1, v) / det


_HASH_WEIGHTS = np.random.default_rng(20261205).standard_normal(16)


def dedupe_rows(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
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


def first_per_group(group: np.ndarray, n: int) -> np.ndarray:
    """Position of the first row of each group in ``group`` (sorted), -1 where empty."""
    first = np.full(n, -1, dtype=np.int64)
    if len(group):
        new = np.r_[True, group[1:] != group[:-1]]
        first[group[new]] = np.flatnonzero(new)
    return first


def expand_runs(starts: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For runs ``starts[k] .. starts[k] + counts[k] - 1``: (run k, position) per element."""
    counts = counts.astype(np.int64)
    total = int(counts.sum())
    run = np.repeat(np.arange(len(counts)), counts)
    offset = np.arange(total) - np.repeat(np.cumsum(counts) - counts, counts)
    return run, starts[run] + offset


def cell_keys(kx: np.ndarray, ky: np.ndarray) -> tuple[np.ndarray, int]:
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
