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
