"""Placements in a cell hierarchy: affine transforms, the instances of a reference
whose boxes meet a window, and the polygon boxes of a placed cell meeting one."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pitchguard.layout.box_grid import BoxGrid

Box = tuple[float, float, float, float]


COUNT_EXACT_ABOVE = 4096
"""Cells with more own polygons are counted per window by their polygons' boxes
(:meth:`HierarchyQuery.count`); smaller ones whole (an upper bound, cheaper)."""

FEW_INSTANCES = 64
"""Array instances a window may meet below which they are found in plain floats."""


@dataclass(frozen=True)
class Affine:
    """p' = m @ p + t (2x2 matrix, translation)."""

    m: np.ndarray
    t: np.ndarray

    @classmethod
    def identity(cls) -> Affine:
        return cls(np.eye(2), np.zeros(2))

    def then(self, inner: Affine) -> Affine:
        """The transform of ``inner`` followed by this one."""
        return Affine(self.m @ inner.m, self.m @ inner.t + self.t)

    def box(self, b: Box) -> Box:
        """Bounding box of the transformed box ``b`` (plain floats: called per tile)."""
        x0, y0, x1, y1 = (float(v) for v in b)
        (a, b_), (c, d) = self.m.tolist()
        tx, ty = self.t.tolist()
        xs = (a * x0 + b_ * y0, a * x1 + b_ * y0, a * x1 + b_ * y1, a * x0 + b_ * y1)
        ys = (c * x0 + d * y0, c * x1 + d * y0, c * x1 + d * y1, c * x0 + d * y1)
        return (min(xs) + tx, min(ys) + ty, max(xs) + tx, max(ys) + ty)


def _matrix(rotation: float, magnification: float, x_reflection: bool) -> np.ndarray:
    """A reference's 2x2 placement matrix."""
    mag = magnification or 1.0
    c, s = math.cos(rotation), math.sin(rotation)
    m = np.array([[c, -s], [s, c]]) * mag
    if x_reflection:
        m = m @ np.array([[1.0, 0.0], [0.0, -1.0]])
    return m


def _ref_affine(ref, scale: float) -> Affine:
    """Reference placement (without repetition) in nm."""
    m = _matrix(ref.rotation, ref.magnification, ref.x_reflection)
    return Affine(m, np.asarray(ref.origin, dtype=np.float64) * scale)


def boxes_meet(b: Box, w: Box) -> bool:
    """Whether two boxes meet (touching counts)."""
    return b[0] <= w[2] and b[2] >= w[0] and b[1] <= w[3] and b[3] >= w[1]


def _moved_box_hits(box, offsets: np.ndarray, w: Box) -> np.ndarray:
    """Which copies of ``box`` moved by ``offsets`` (n, 2) meet ``w``."""
    return (
        (box[0] + offsets[:, 0] <= w[2])
        & (box[2] + offsets[:, 0] >= w[0])
        & (box[1] + offsets[:, 1] <= w[3])
        & (box[3] + offsets[:, 1] >= w[1])
    )


class _OffsetList:
    """Explicit instance offsets (n, 2) of one reference, sorted by x so that a
    window meets a slice of them: a cell placed one by one many thousand times
    (vias, fill) costs a search per window, not a loop."""

    def __init__(self, xy: np.ndarray):
        xy = np.asarray(xy, dtype=np.float64).reshape(-1, 2)
        self.xy = xy[np.argsort(xy[:, 0], kind="stable")]
        self.x = np.ascontiguousarray(self.xy[:, 0])

    def __len__(self) -> int:
        return len(self.xy)

    def extremes(self) -> list[np.ndarray]:
        """The lower-left and upper-right corners of the offsets' box."""
        if not len(self.xy):
            return [np.zeros(2)]
        return [self.xy.min(axis=0), self.xy.max(axis=0)]

    def within(self, x0: float, y0: float, x1: float, y1: float) -> np.ndarray:
        """The offsets inside the box (x0, y0, x1, y1), in x order."""
        a = int(np.searchsorted(self.x, x0, side="left"))
        b = int(np.searchsorted(self.x, x1, side="right"))
        o = self.xy[a:b]
        return o[(o[:, 1] >= y0) & (o[:, 1] <= y1)]


def offsets_in(offs, aff: Affine, base: np.ndarray, window: Box):
    """Instance offsets (in the query frame) whose box intersects the window."""
    kind, data = offs
    if kind == "one":
        return np.zeros((1, 2)) if boxes_meet(tuple(base), window) else np.zeros((0, 2))
    if kind == "list":
        # Copies of ``base`` moved by m @ o meet the window only for m @ o in
        # the box below; its preimage's box (a little wider) bounds o.
        wx0, wy0, wx1, wy1 = window
        bx0, by0, bx1, by1 = (float(v) for v in base)
        lo, hi = np.array([wx0 - bx1, wy0 - by1]), np.array([wx1 - bx0, wy1 - by0])
        if (lo > hi).any():
            return np.zeros((0, 2))
        if not np.array_equal(aff.m, np.eye(2)):
            c = np.array([lo, [hi[0], lo[1]], hi, [lo[0], hi[1]]]) @ np.linalg.inv(aff.m).T
            lo, hi = c.min(axis=0), c.max(axis=0)
        slack = 1e-6 * (1.0 + np.abs(lo).max() + np.abs(hi).max())
        o = data.within(lo[0] - slack, lo[1] - slack, hi[0] + slack, hi[1] + slack) @ aff.m.T
        return o[_moved_box_hits(base, o, window)]
    cols, rows, v1, v2 = data
    a1, a2 = aff.m @ v1, aff.m @ v2
    # Lattice coordinates (i, j) of the window's corners, widened by the
    # instance box: only that index range can hit.  (Plain floats: this
    # runs for every tile.)
    (p, q), (r, s) = a1.tolist(), a2.tolist()
    det = p * s - r * q
    if abs(det) <= 1e-12 * (abs(p * s) + abs(r * q) + 1e-300):
        # Degenerate lattice (collinear or zero vectors): test every instance,
        # once the whole array's box is known to meet the window.
        ext = np.array([i * a1 + j * a2 for i in (0, cols - 1) for j in (0, rows - 1)])
        if not _moved_box_hits(base, ext, window).any() and not boxes_meet(
            (
                base[0] + ext[:, 0].min(),
                base[1] + ext[:, 1].min(),
                base[2] + ext[:, 0].max(),
                base[3] + ext[:, 1].max(),
            ),
            window,
        ):
            return np.zeros((0, 2))
        i0, i1, j0, j1 = 0, cols - 1, 0, rows - 1
    else:
        wx0, wy0, wx1, wy1 = window
        bx0, by0, bx1, by1 = (float(v) for v in base)
        corners = (
            (wx0 - bx1, wy0 - by1),
            (wx1 - bx0, wy0 - by1),
            (wx1 - bx0, wy1 - by0),
            (wx0 - bx1, wy1 - by0),
        )
        ii = [(s * x - r * y) / det for x, y in corners]
        jj = [(p * y - q * x) / det for x, y in corners]
        i0, i1 = max(0, math.floor(min(ii))), min(cols - 1, math.ceil(max(ii)))
        j0, j1 = max(0, math.floor(min(jj))), min(rows - 1, math.ceil(max(jj)))
    if i1 < i0 or j1 < j0:
        return np.zeros((0, 2))
    if (i1 - i0 + 1) * (j1 - j0 + 1) <= FEW_INSTANCES:
        # The same sums and tests as below, in plain floats (a tile meets a
        # few instances of a large array: numpy's per-call cost dominates).
        bx0, by0, bx1, by1 = (float(v) for v in base)
        wx0, wy0, wx1, wy1 = window
        found = []
        for ii in range(i0, i1 + 1):
            for jj in range(j0, j1 + 1):
                ox, oy = ii * p + jj * r, ii * q + jj * s
                if bx0 + ox <= wx1 and bx1 + ox >= wx0 and by0 + oy <= wy1 and by1 + oy >= wy0:
                    found.append((ox, oy))
        return np.array(found, dtype=np.float64).reshape(-1, 2)
    i = np.arange(i0, i1 + 1, dtype=np.float64)
    j = np.arange(j0, j1 + 1, dtype=np.float64)
    o = (i[:, None, None] * a1 + j[None, :, None] * a2).reshape(-1, 2)
    return o[_moved_box_hits(base, o, window)]


GRID_INSTANCES = 8
"""A cell's bucket grid serves placements of at most this many instances at once
(more: every box is checked, as for small cells)."""


def _selected(cd, ld, bb: np.ndarray, m: np.ndarray, shifts: np.ndarray, window):
    """``(instance, polygon)`` indices, instance-major and in polygon order, of the
    boxes ``bb`` of layer ``ld`` of ``cd`` whose box placed by ``m`` and each of
    ``shifts`` meets ``window``.  A cell with many polygons checks only those its
    bucket grid (:class:`BoxGrid`) puts near the window: the same selection."""
    if (
        len(bb) <= COUNT_EXACT_ABOVE
        or len(shifts) > GRID_INSTANCES
        or abs(float(np.linalg.det(m))) < 1e-12  # a degenerate placement: no inverse
    ):
        return _boxes_meeting(bb, m, shifts, window)
    grid = cd.grids.get(ld)
    if grid is None:
        grid = cd.grids[ld] = BoxGrid(bb)
    insts, ks = [], []
    for i, shift in enumerate(shifts):
        cand = grid.candidates(m, shift, window)
        _, k = _boxes_meeting(bb[cand], m, shift[None, :], window)
        insts.append(np.full(len(k), i, dtype=np.int64))
        ks.append(cand[k])
    return np.concatenate(insts), np.concatenate(ks)


def _boxes_meeting(bb: np.ndarray, m: np.ndarray, shifts: np.ndarray, window):
    """``np.nonzero`` of the boxes ``bb`` placed by ``m`` and each of ``shifts`` (the
    box of the placed corners) that meet ``window``: ``(instance, box)``."""
    corners = np.stack([bb[:, [0, 1]], bb[:, [2, 1]], bb[:, [2, 3]], bb[:, [0, 3]]], axis=1)
    tc = corners @ m.T
    lo = tc.min(axis=1)[None, :, :] + shifts[:, None, :]  # (n, polygons, 2)
    hi = tc.max(axis=1)[None, :, :] + shifts[:, None, :]
    keep = (
        (lo[..., 0] <= window[2])
        & (hi[..., 0] >= window[0])
        & (lo[..., 1] <= window[3])
        & (hi[..., 1] >= window[1])
    )
    return np.nonzero(keep)
