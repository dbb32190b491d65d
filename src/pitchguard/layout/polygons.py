"""PolygonSet: many polygons in packed numpy arrays (nm, as drawn), and grid snapping."""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from dataclasses import dataclass

import numpy as np


def _starts(sizes: np.ndarray) -> np.ndarray:
    """Start offsets (and the end) of consecutive runs of ``sizes``."""
    starts = np.zeros(len(sizes) + 1, dtype=np.int64)
    np.cumsum(sizes, out=starts[1:])
    return starts


@dataclass(frozen=True)
class PolygonSet:
    """Polygons of one layer, packed.

    ``points[starts[k]:starts[k + 1]]`` are the vertices of polygon ``k`` in nm.
    """

    points: np.ndarray
    starts: np.ndarray

    def __len__(self) -> int:
        return len(self.starts) - 1

    @classmethod
    def empty(cls) -> PolygonSet:
        return cls(np.zeros((0, 2)), np.zeros(1, dtype=np.int64))

    @classmethod
    def from_arrays(cls, polygons: Iterable[np.ndarray], scale: float = 1.0) -> PolygonSet:
        """Pack polygons; degenerate ones (fewer than 3 vertices, or not (n, 2)) are dropped."""
        polys = [np.asarray(p, dtype=np.float64) for p in polygons]
        polys = [p for p in polys if p.ndim == 2 and p.shape[1] == 2 and len(p) >= 3]
        if not polys:
            return cls.empty()
        starts = _starts(np.fromiter((len(p) for p in polys), dtype=np.int64, count=len(polys)))
        points = np.concatenate(polys, axis=0)
        if scale != 1.0:
            points *= scale
        return cls(points, starts)

    def polygon(self, k: int) -> np.ndarray:
        return self.points[self.starts[k] : self.starts[k + 1]]

    def __iter__(self) -> Iterator[np.ndarray]:
        for k in range(len(self)):
            yield self.polygon(k)

    def bounding_boxes(self) -> np.ndarray:
        """``(n, 4)`` array of ``x0, y0, x1, y1`` per polygon."""
        if len(self) == 0:
            return np.zeros((0, 4))
        s = self.starts[:-1]
        mins = np.minimum.reduceat(self.points, s, axis=0)
        maxs = np.maximum.reduceat(self.points, s, axis=0)
        return np.hstack([mins, maxs])

    def select(self, keep: np.ndarray) -> PolygonSet:
        """The polygons whose index is in the boolean mask ``keep``."""
        idx = np.flatnonzero(keep)
        if len(idx) == len(self):
            return self
        return self.take(idx)

    def take(self, idx: np.ndarray) -> PolygonSet:
        """The polygons numbered ``idx`` (in that order, repeats allowed)."""
        rows, starts = self.rows_of(idx)
        return PolygonSet(self.points[rows], starts)

    def rows_of(self, idx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Point rows of the polygons numbered ``idx``, in order, and their starts."""
        idx = np.asarray(idx, dtype=np.int64)
        sizes = self.starts[idx + 1] - self.starts[idx]
        starts = _starts(sizes)
        # Row r of polygon j is its first row plus (r - where j starts in the output).
        rows = np.repeat(self.starts[idx] - starts[:-1], sizes) + np.arange(starts[-1])
        return rows, starts

    @classmethod
    def joined(cls, parts: list[PolygonSet]) -> PolygonSet:
        """The polygons of ``parts``, one after the other."""
        parts = [p for p in parts if len(p)]
        if not parts:
            return cls.empty()
        if len(parts) == 1:
            return parts[0]
        starts = _starts(np.concatenate([np.diff(p.starts) for p in parts]))
        return cls(np.concatenate([p.points for p in parts]), starts)


SNAP_TIE_TOL = 1e-6
"""Half-way points within this many grid steps of a tie round up.  Ties are real:
a GDSII array's lattice vectors are stored as whole database units over the
column or row count, so instances can sit on half (or finer) steps; the float
noise of different transform orders (a full flatten, a tile's hierarchy query)
must not decide which way such a vertex goes."""


def snap_to_grid(ps: PolygonSet, grid_nm: float) -> PolygonSet:
    """``ps`` back onto the database grid, in place: nm conversion and transforms
    leave float noise (199.9999999 for 200); the mask writer snaps anyway.
    Ties (to within ``SNAP_TIE_TOL``) round up, whatever the noise."""
    np.divide(ps.points, grid_nm, out=ps.points)
    np.add(ps.points, 0.5 + SNAP_TIE_TOL, out=ps.points)
    np.floor(ps.points, out=ps.points)
    np.multiply(ps.points, grid_nm, out=ps.points)
    return ps
