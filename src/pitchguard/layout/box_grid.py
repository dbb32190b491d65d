"""A bucket grid over a cell's own polygon boxes: which polygons may meet a window.

A flat layout's top cell holds every shape; checking all their boxes for each
tile makes a tiled scan quadratic in the shapes.  The grid lists, per bucket,
the polygons whose box centre falls in it; a window, grown by the largest
half extent of any box, meets only the buckets it overlaps.  What it returns
is a superset, in polygon order, that the caller filters exactly as it would
filter all of them (the tests hold the two to each other).
"""

from __future__ import annotations

import math

import numpy as np

PER_BUCKET = 64
"""Polygons per bucket aimed at."""


class BoxGrid:
    """Buckets over boxes ``(n, 4)`` (x0, y0, x1, y1) in the cell's frame."""

    def __init__(self, boxes: np.ndarray):
        b = np.asarray(boxes, dtype=np.float64)
        self.n = len(b)
        self.lo = b[:, :2].min(axis=0)
        span = np.maximum(b[:, 2:].max(axis=0) - self.lo, 1e-9)
        g = max(1, int(math.sqrt(self.n / PER_BUCKET)))
        self.g = g
        self.step = span / g
        centre = 0.5 * (b[:, :2] + b[:, 2:])
        cell = np.clip(((centre - self.lo) / self.step).astype(np.int64), 0, g - 1)
        key = cell[:, 1] * g + cell[:, 0]
        self.order = np.argsort(key, kind="stable")
        self.starts = np.searchsorted(key[self.order], np.arange(g * g + 1))
        self.reach = 0.5 * (b[:, 2:] - b[:, :2]).max(axis=0)  # largest half extents

    def near(self, box) -> np.ndarray:
        """Polygons (ascending indices) whose box centre may lie in ``box`` (x0, y0,
        x1, y1): those of every bucket it overlaps."""
        lo = np.array(box[:2], dtype=np.float64)
        hi = np.array(box[2:], dtype=np.float64)
        top = self.lo + self.step * self.g
        if (hi < self.lo).any() or (lo > top).any():
            return np.empty(0, dtype=np.int64)
        a = np.clip(np.floor((lo - self.lo) / self.step).astype(np.int64), 0, self.g - 1)
        b = np.clip(np.floor((hi - self.lo) / self.step).astype(np.int64), 0, self.g - 1)
        rows = np.arange(a[1], b[1] + 1) * self.g
        first, last = self.starts[rows + a[0]], self.starts[rows + b[0] + 1]
        idx = np.concatenate([self.order[s:e] for s, e in zip(first, last, strict=True)])
        return np.sort(idx)

    def candidates(self, m: np.ndarray, shift: np.ndarray, window) -> np.ndarray:
        """Polygons (ascending) whose box, placed by ``p @ m.T + shift``, may have its
        bounding box meet ``window`` (layout frame): every one that does among them.

        The placed box of a polygon is its centre placed, plus ``|m|`` times its
        half extents; so its centre lies in the window grown by ``|m| reach``,
        taken back into the cell's frame (and boxed: turns by other than right
        angles widen it)."""
        grow = np.abs(m) @ self.reach
        x0, y0, x1, y1 = (float(v) for v in window)
        eps = 1e-9 * max(1.0, abs(x0), abs(y0), abs(x1), abs(y1)) + 1e-6
        gx, gy = grow[0] + eps, grow[1] + eps
        corners = np.array(
            [[x0 - gx, y0 - gy], [x1 + gx, y0 - gy], [x1 + gx, y1 + gy], [x0 - gx, y1 + gy]]
        )
        local = (corners - shift) @ np.linalg.inv(m).T
        lo, hi = local.min(axis=0), local.max(axis=0)
        pad = 1e-9 * np.maximum(1.0, np.abs(local).max(axis=0)) + 1e-6
        return self.near((*(lo - pad), *(hi + pad)))
