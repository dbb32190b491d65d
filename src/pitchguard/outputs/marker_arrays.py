"""Placement origins packed into rectangular arrays, for marker references.

A cell placed 10^5 times in a regular block is written as a few array
references (GDSII AREF, an OASIS rectangular repetition), not 10^5 single
ones.  Origins are integers on the marker file's grid; the packing is exact:
the arrays expand to the given origins, each once (test_marker_arrays).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

MAX_COUNT = 32_767
"""Columns or rows per array: GDSII stores them as signed 16-bit numbers."""


class Grid(NamedTuple):
    """``columns x rows`` origins from ``(x, y)``, steps ``dx`` and ``dy`` (grid units)."""

    x: int
    y: int
    dx: int
    dy: int
    columns: int
    rows: int

    def origins(self) -> np.ndarray:
        i, j = np.meshgrid(np.arange(self.columns), np.arange(self.rows), indexing="ij")
        return np.column_stack([self.x + self.dx * i.ravel(), self.y + self.dy * j.ravel()]).astype(
            np.int64
        )


def _runs(v: np.ndarray) -> list[tuple[int, int, int]]:
    """``(start, step, count)`` runs of equal steps in sorted distinct ``v``, greedy from
    the left; every value in exactly one run."""
    out = []
    n, i = len(v), 0
    d = np.diff(v)
    while i < n:
        if i == n - 1:
            out.append((int(v[i]), 0, 1))
            break
        step = int(d[i])
        # The run goes on while the steps stay equal (to MAX_COUNT values).
        stop = min(n - 1, i + MAX_COUNT - 1)
        change = np.flatnonzero(d[i:stop] != step)
        j = i + (int(change[0]) if len(change) else stop - i)
        out.append((int(v[i]), step, j - i + 1))
        i = j + 1
    return out


def pack(origins: np.ndarray) -> list[Grid]:
    """Distinct integer ``origins`` (n, 2) as rectangular arrays.

    Rows (equal y) are cut into runs of equal x steps; runs with the same x,
    step and count are stacked into arrays over runs of equal y steps.  A
    lattice of placements becomes one array; scattered ones stay single.
    """
    pts = np.unique(np.asarray(origins, dtype=np.int64).reshape(-1, 2), axis=0)
    if len(pts) == 0:
        return []
    order = np.lexsort((pts[:, 0], pts[:, 1]))
    pts = pts[order]
    cut = np.flatnonzero(np.diff(pts[:, 1])) + 1
    rows: dict[tuple[int, int, int], list[int]] = {}
    for seg in np.split(pts, cut):
        y = int(seg[0, 1])
        for x, dx, cx in _runs(seg[:, 0]):
            rows.setdefault((x, dx, cx), []).append(y)
    out = []
    for (x, dx, cx), ys in rows.items():
        for y, dy, cy in _runs(np.array(ys, dtype=np.int64)):
            out.append(Grid(x, y, dx, dy, cx, cy))
    return out
