"""Polygons as rectangles in a turned frame: what a 2-D clip image is built from."""

from __future__ import annotations

import math

import numpy as np


def turned_points(points: np.ndarray, centre, angle_deg: float) -> np.ndarray:
    """``points`` (n, 2) in the frame centred on ``centre`` whose x axis runs at
    ``angle_deg`` in the layout."""
    t = math.radians(angle_deg)
    c, s = math.cos(t), math.sin(t)
    d = np.asarray(points, dtype=np.float64) - np.asarray(centre, dtype=np.float64)
    return np.stack([c * d[:, 0] + s * d[:, 1], -s * d[:, 0] + c * d[:, 1]], axis=1)


def rectangles(points: np.ndarray, tol: float) -> np.ndarray | None:
    """A Manhattan polygon (vertices (n, 2), edges along x or y within ``tol``) as
    rectangles ``(k, 4)`` x0, y0, x1, y1 that tile it: one per band between
    consecutive vertex heights, per run inside it (even-odd).  None when an
    edge is neither along x nor along y."""
    p = np.asarray(points, dtype=np.float64)
    q = np.roll(p, -1, axis=0)
    dx, dy = np.abs(q[:, 0] - p[:, 0]), np.abs(q[:, 1] - p[:, 1])
    if np.any((dx > tol) & (dy > tol)):
        return None
    # Heights within tol are one (snapping noise of turned shapes).
    ys = np.sort(p[:, 1])
    levels = ys[np.r_[True, np.diff(ys) > tol]]
    vertical = dy > tol
    vx = 0.5 * (p[vertical, 0] + q[vertical, 0])
    vlo = np.minimum(p[vertical, 1], q[vertical, 1])
    vhi = np.maximum(p[vertical, 1], q[vertical, 1])
    out = []
    for y0, y1 in zip(levels[:-1], levels[1:], strict=True):
        mid = 0.5 * (y0 + y1)
        xs = np.sort(vx[(vlo < mid) & (vhi > mid)])
        for a, b in zip(xs[0::2], xs[1::2], strict=False):
            if b - a > tol:
                out.append((a, y0, b, y1))
    return np.array(out, dtype=np.float64).reshape(-1, 4)


def rectangles_plain(points: np.ndarray, tol: float, step: float) -> set:
    """Plain twin of :func:`rectangles` for tests: the cells of a ``step`` grid
    whose centres lie inside the polygon (even-odd ray casting), as a set of
    (i, j) indices."""
    p = np.asarray(points, dtype=np.float64)
    lo, hi = p.min(axis=0), p.max(axis=0)
    inside = set()
    for i in range(int(math.floor(lo[0] / step)), int(math.ceil(hi[0] / step))):
        for j in range(int(math.floor(lo[1] / step)), int(math.ceil(hi[1] / step))):
            x, y = (i + 0.5) * step, (j + 0.5) * step
            crossings = 0
            for k in range(len(p)):
                (x0, y0), (x1, y1) = p[k], p[(k + 1) % len(p)]
                if (y0 > y) != (y1 > y) and x < x0 + (y - y0) * (x1 - x0) / (y1 - y0):
                    crossings += 1
            if crossings % 2:
                inside.add((i, j))
    return inside


def canonical_rectangles(rects: np.ndarray, window, tol: float) -> np.ndarray:
    """The union of ``rects`` (k, 4) inside ``window`` (x0, y0, x1, y1) as its
    coarsest horizontal strips: one rectangle per run of each band between
    consecutive heights, bands with the same runs joined.  It depends only on
    the union, not on how it was cut into rectangles, so equal clips get equal
    keys; overlaps are gone (each point is covered once)."""
    r = np.asarray(rects, dtype=np.float64).reshape(-1, 4)
    wx0, wy0, wx1, wy1 = window
    r = np.stack(
        [
            np.maximum(r[:, 0], wx0),
            np.maximum(r[:, 1], wy0),
            np.minimum(r[:, 2], wx1),
            np.minimum(r[:, 3], wy1),
        ],
        axis=1,
    )
    r = r[(r[:, 2] - r[:, 0] > tol) & (r[:, 3] - r[:, 1] > tol)]
    if not len(r):
        return np.zeros((0, 4))
    ys = np.unique(np.concatenate([r[:, 1], r[:, 3]]))
    ys = ys[np.r_[True, np.diff(ys) > tol]]
    out: list[list[float]] = []
    open_runs: dict[tuple[float, float], int] = {}  # run -> index in out (still growing)
    for y0, y1 in zip(ys[:-1], ys[1:], strict=True):
        mid = 0.5 * (y0 + y1)
        cover = r[(r[:, 1] < mid) & (r[:, 3] > mid)]
        runs: list[tuple[float, float]] = []
        for a, b in sorted(zip(cover[:, 0].tolist(), cover[:, 2].tolist(), strict=True)):
            if runs and a <= runs[-1][1] + tol:
                runs[-1] = (runs[-1][0], max(runs[-1][1], b))
            else:
                runs.append((a, b))
        grown: dict[tuple[float, float], int] = {}
        for run in runs:
            k = open_runs.get(run)
            if k is not None and abs(out[k][3] - y0) <= tol:
                out[k][3] = y1
            else:
                k = len(out)
                out.append([run[0], y0, run[1], y1])
            grown[run] = k
        open_runs = grown
    return np.array(out, dtype=np.float64).reshape(-1, 4)


def clip_rectangles(polys: list[np.ndarray], window, tol: float, cache: dict, decimals: int = 2):
    """The canonical rectangles (:func:`canonical_rectangles`) of polygons already in the
    clip's frame, inside ``window``; None when one is not Manhattan there.

    Each polygon's vertices are first clamped to the window.  For a Manhattan
    polygon that keeps its part inside the window exactly (a ray from a point
    inside crosses an edge before clamping iff it does after: clamping is
    monotone per axis), so clamped vertex lists are a key that repeats wherever
    the window's content repeats; results are kept in ``cache`` under it.
    """
    x0, y0, x1, y1 = window
    lo, hi = np.array([x0, y0]), np.array([x1, y1])
    clamped = [np.clip(p, lo, hi) for p in polys]
    key = ("clip", b"|".join(sorted(np.round(p, decimals).tobytes() for p in clamped)))
    if key in cache:
        return cache[key]
    parts = [rectangles(p, tol) for p in clamped]
    rects = (
        None
        if any(r is None for r in parts)
        else canonical_rectangles(
            np.concatenate(parts) if parts else np.zeros((0, 4)), window, 0.5 * tol
        )
    )
    cache[key] = rects
    return rects


_GOLDEN = np.uint64(0x9E3779B97F4A7C15)


def _mix(v: np.ndarray) -> np.ndarray:
    """A 64-bit mixing function (splitmix64's finaliser) on uint64 arrays (wrapping)."""
    with np.errstate(over="ignore"):
        z = v + _GOLDEN
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        return z ^ (z >> np.uint64(31))


def _ticks(x: np.ndarray, step: float) -> np.ndarray:
    return np.round(np.asarray(x) / step).astype(np.int64).view(np.uint64)


def shape_hashes(ps, step: float) -> np.ndarray:
    """Per polygon of ``ps``: a 64-bit hash of its vertices relative to its box's
    lower-left corner (in ``step`` units), in order."""
    n = len(ps)
    if n == 0:
        return np.zeros(0, dtype=np.uint64)
    bb = ps.bounding_boxes()
    sizes = np.diff(ps.starts)
    owner = np.repeat(np.arange(n), sizes)
    rel = ps.points - bb[owner, :2]
    pos = (np.arange(len(owner)) - ps.starts[owner]).astype(np.uint64)
    h = _mix(_mix(_mix(_ticks(rel[:, 0], step)) ^ _ticks(rel[:, 1], step)) ^ pos)
    return _sums(h, owner, n)


def _sums(h: np.ndarray, owner: np.ndarray, n: int) -> np.ndarray:
    """Wrapping uint64 sums of ``h`` per ``owner`` (sorted) in ``0..n-1``."""
    out = np.zeros(n, dtype=np.uint64)
    if not len(h):
        return out
    starts = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]])
    with np.errstate(over="ignore"):
        out[owner[starts]] = np.add.reduceat(h, starts)
    return out


def neighbourhood_hashes(
    q: np.ndarray, hit: np.ndarray, n: int, origins: np.ndarray, ps, shapes, step: float
) -> np.ndarray:
    """Per query ``0..n-1``: an order-free 64-bit hash of the polygons ``hit`` found for
    it (``q``), each by its shape hash and its box's lower-left corner relative to
    the query's ``origins`` row (``step`` units).  Equal neighbourhoods up to a
    shift get equal hashes; a different neighbourhood the same hash with
    probability about 2^-64 per pair."""
    bb = ps.bounding_boxes()
    rel = bb[hit, :2] - origins[q]
    h = _mix(_mix(_mix(shapes[hit]) ^ _ticks(rel[:, 0], step)) ^ _ticks(rel[:, 1], step))
    order = np.argsort(q, kind="stable")
    return _sums(h[order], q[order], n)


def clip_hits(ps, centres: np.ndarray, radius: float) -> tuple[np.ndarray, np.ndarray]:
    """The polygons of ``ps`` whose boxes meet the square of ``radius`` around each of
    ``centres``, as ``(hit, bounds)``: query ``j`` holds ``hit[bounds[j]:bounds[j + 1]]``."""
    from pitchguard.geometry.spatial import build_rtree, query_pairs_batched

    bb = ps.bounding_boxes()
    lo, hi = bb[:, :2], bb[:, 2:]
    q, hit = query_pairs_batched(build_rtree(lo, hi), lo, hi, centres - radius, centres + radius)
    order = np.argsort(q, kind="stable")
    q, hit = q[order], hit[order]
    return hit, np.searchsorted(q, np.arange(len(centres) + 1))


def clip_neighbourhoods(ps, centres: np.ndarray, radius: float, origins: np.ndarray, step: float):
    """:func:`clip_hits` and each query's :func:`neighbourhood_hashes` relative to
    ``origins``: ``(hit, bounds, hashes)``."""
    hit, bounds = clip_hits(ps, centres, radius)
    q = np.repeat(np.arange(len(centres)), np.diff(bounds))
    around = neighbourhood_hashes(q, hit, len(centres), origins, ps, shape_hashes(ps, step), step)
    return hit, bounds, around


def neighbourhood_groups(around: np.ndarray, bounds: np.ndarray, values, step: float):
    """Queries with equal neighbourhood hash, shape count and ``values`` (n, k) to
    ``step``: ``(first, group)``, each group's first query and each query's group."""
    ticks = np.round(np.asarray(values, dtype=np.float64) / step).astype(np.int64)
    rows = np.column_stack([around.view(np.int64), np.diff(bounds), ticks])
    _, first, group = np.unique(rows, axis=0, return_index=True, return_inverse=True)
    return first, group.reshape(-1)


def frame_rectangles(ps, near, centre, angle_deg: float, window, tol, cache, decimals=2):
    """:func:`clip_rectangles` of the polygons ``near`` of ``ps`` turned into the frame
    centred on ``centre`` at ``angle_deg``."""
    polys = [turned_points(ps.polygon(p), centre, angle_deg) for p in np.asarray(near).tolist()]
    return clip_rectangles(polys, window, tol, cache, decimals)


def lattice_rectangles(a1, a2, size, angle_deg: float, window) -> np.ndarray:
    """The rectangles ``size`` ``(w, h)`` on every point of the lattice ``a1``, ``a2``
    (layout frame) that meet ``window``, in the frame of the feature at the origin
    turned by ``angle_deg``, clamped to the window: an array's clip where the
    array continues on every side."""
    t = math.radians(angle_deg)
    c, s = math.cos(t), math.sin(t)
    turn = np.array([[c, s], [-s, c]])  # layout -> feature frame
    b = np.array([a1, a2], dtype=np.float64) @ turn.T
    x0, y0, x1, y1 = window
    w, h = size
    reach = math.hypot(max(abs(x0), abs(x1)) + w, max(abs(y0), abs(y1)) + h)
    height = abs(float(np.linalg.det(b))) / max(float(np.hypot(*b[0])), float(np.hypot(*b[1])))
    m = int(math.ceil(reach / height)) + 1
    i, j = np.meshgrid(np.arange(-m, m + 1), np.arange(-m, m + 1))
    p = i.reshape(-1, 1) * b[0] + j.reshape(-1, 1) * b[1]
    r = np.column_stack([p[:, 0] - w / 2, p[:, 1] - h / 2, p[:, 0] + w / 2, p[:, 1] + h / 2])
    r = r[(r[:, 0] < x1) & (r[:, 2] > x0) & (r[:, 1] < y1) & (r[:, 3] > y0)]
    return np.column_stack(
        [
            np.maximum(r[:, 0], x0),
            np.maximum(r[:, 1], y0),
            np.minimum(r[:, 2], x1),
            np.minimum(r[:, 3], y1),
        ]
    )


def same_rectangles(a: np.ndarray, b: np.ndarray, tol: float) -> bool:
    """Whether two sets of rectangles match one to one, every corner within ``tol``."""
    if len(a) != len(b):
        return False
    if not len(a):
        return True
    d = np.abs(a[:, None, :] - b[None, :, :]).max(axis=2)  # (A, B)
    near = d <= tol
    return bool(near.any(axis=1).all() and near.any(axis=0).all() and (near.sum(axis=1) == 1).all())
