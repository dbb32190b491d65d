"""Region queries straight from the layout hierarchy, without flattening the chip.

:class:`HierarchyQuery` walks the cell tree once per query window, carrying
the affine transform of each reference (rotation, x-reflection,
magnification, translation), pruning references whose transformed bounding
box misses the window, and clipping array index ranges to the window, so a
small window of a huge arrayed layout costs little.  It returns the same
polygons a full flatten would give that intersect the window (by bounding
box), in nm.

This is the reading side of tiled scans: a tile worker opens the file once,
then answers one query per tile.  :meth:`HierarchyQuery.content_key` tells,
from the hierarchy alone, which tiles hold the same polygons (up to a
shift), so a scan works out each distinct tile once.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass

import numpy as np

from pitchguard.layout import PolygonSet

Box = tuple[float, float, float, float]

PLACEMENT_MEMO_ENTRIES = 100_000
"""Memoised placement lists kept per query object (cleared when full)."""


@dataclass(frozen=True)
class _Affine:
    """p' = m @ p + t (2x2 matrix, translation)."""

    m: np.ndarray
    t: np.ndarray

    @classmethod
    def identity(cls) -> _Affine:
        return cls(np.eye(2), np.zeros(2))

    def then(self, inner: _Affine) -> _Affine:
        """The transform of ``inner`` followed by this one."""
        return _Affine(self.m @ inner.m, self.m @ inner.t + self.t)

    def apply(self, pts: np.ndarray) -> np.ndarray:
        return pts @ self.m.T + self.t

    def box(self, b: Box) -> Box:
        """Bounding box of the transformed box ``b`` (plain floats: called per tile)."""
        x0, y0, x1, y1 = (float(v) for v in b)
        (a, b_), (c, d) = self.m.tolist()
        tx, ty = self.t.tolist()
        xs = (a * x0 + b_ * y0, a * x1 + b_ * y0, a * x1 + b_ * y1, a * x0 + b_ * y1)
        ys = (c * x0 + d * y0, c * x1 + d * y0, c * x1 + d * y1, c * x0 + d * y1)
        return (min(xs) + tx, min(ys) + ty, max(xs) + tx, max(ys) + ty)


def _ref_affine(ref, scale: float) -> _Affine:
    """Reference placement (without repetition) in nm."""
    mag = ref.magnification or 1.0
    c, s = math.cos(ref.rotation), math.sin(ref.rotation)
    m = np.array([[c, -s], [s, c]]) * mag
    if ref.x_reflection:
        m = m @ np.array([[1.0, 0.0], [0.0, -1.0]])
    return _Affine(m, np.asarray(ref.origin, dtype=np.float64) * scale)


def _hits(b: Box, w: Box) -> bool:
    return b[0] <= w[2] and b[2] >= w[0] and b[1] <= w[3] and b[3] >= w[1]


def _moved_box_hits(box, offsets: np.ndarray, w: Box) -> np.ndarray:
    """Which copies of ``box`` moved by ``offsets`` (n, 2) meet ``w``."""
    return (box[0] + offsets[:, 0] <= w[2]) & (box[2] + offsets[:, 0] >= w[0]) & \
        (box[1] + offsets[:, 1] <= w[3]) & (box[3] + offsets[:, 1] >= w[1])  # fmt: skip


@dataclass
class _CellData:
    polys: dict  # (layer, datatype) -> (PolygonSet, bboxes (n, 4))
    refs: list  # (child name, _Affine, offsets kind, data)
    bbox: Box | None = None
    own_bbox: Box | None = None  # of the cell's own polygons (asked-for layers)
    index: int = 0  # the cell's number in content keys


class HierarchyQuery:
    """Answer window queries on a gdstk library for some layers, in nm."""

    def __init__(self, lib, tops, layers, scale: float):
        self.scale = scale
        self.layers = sorted(set(layers))
        self.cells: dict[str, _CellData] = {}
        self.tops = [c.name for c in tops]
        self._memo: dict = {}  # content-key placements per (cell, frame, relative window)
        by_name = {c.name: c for c in lib.cells if hasattr(c, "references")}
        for name in self.tops:
            self._load(by_name[name], by_name)
        for name in self.tops:
            self._bbox(name)
        # Own polygons per cell (asked-for layers), by the cell's number.
        self.own_counts = np.array([sum(len(ps) for ps, _ in cd.polys.values())
                                    for cd in self.cells.values()], dtype=np.int64)  # fmt: skip

    # -- preparation ---------------------------------------------------------
    def _load(self, cell, by_name) -> None:
        if cell.name in self.cells:
            return
        polys = {}
        for ld in self.layers:
            own = cell.get_polygons(apply_repetitions=True, include_paths=True, depth=0,
                                    layer=ld[0], datatype=ld[1])  # fmt: skip
            ps = PolygonSet.from_arrays((q.points for q in own), self.scale)
            polys[ld] = (ps, ps.bounding_boxes())
        refs = []
        for ref in cell.references:
            child = ref.cell if not isinstance(ref.cell, str) else by_name.get(ref.cell)
            if child is None or not hasattr(child, "references"):
                continue  # unresolved reference: nothing to place
            aff = _ref_affine(ref, self.scale)
            rep = ref.repetition
            if not rep.size:
                offs = ("one", None)
            elif rep.columns and rep.rows and rep.v1 is not None and rep.v2 is not None:
                offs = ("lattice", (rep.columns, rep.rows,
                                    np.asarray(rep.v1) * self.scale,
                                    np.asarray(rep.v2) * self.scale))  # fmt: skip
            elif rep.columns and rep.rows and rep.spacing is not None:
                sx, sy = rep.spacing
                offs = ("lattice", (rep.columns, rep.rows,
                                    np.array([sx, 0.0]) * self.scale,
                                    np.array([0.0, sy]) * self.scale))  # fmt: skip
            else:
                offs = ("list", np.asarray(rep.get_offsets()) * self.scale)
            refs.append((child.name, aff, offs))
            self._load(child, by_name)
        own = [bb for _, bb in polys.values() if len(bb)]
        own_bbox = None
        if own:
            a = np.concatenate(own)
            own_bbox = (a[:, 0].min(), a[:, 1].min(), a[:, 2].max(), a[:, 3].max())
        self.cells[cell.name] = _CellData(polys, refs, own_bbox=own_bbox, index=len(self.cells))

    def _bbox(self, name: str) -> Box | None:
        cd = self.cells[name]
        if cd.bbox is not None:
            return cd.bbox
        boxes = [np.hstack([bb[:, :2].min(axis=0), bb[:, 2:].max(axis=0)])
                 for _, bb in cd.polys.values() if len(bb)]  # fmt: skip
        for child, aff, offs in cd.refs:
            cb = self._bbox(child)
            if cb is None:
                continue
            tb = np.array(aff.box(cb))
            for o in self._offset_extremes(offs):
                boxes.append(tb + np.array([o[0], o[1], o[0], o[1]]))
        if boxes:
            arr = np.array(boxes)
            cd.bbox = (arr[:, 0].min(), arr[:, 1].min(), arr[:, 2].max(), arr[:, 3].max())
        else:
            cd.bbox = None
        return cd.bbox

    @staticmethod
    def _offset_extremes(offs) -> list[np.ndarray]:
        kind, data = offs
        if kind == "one":
            return [np.zeros(2)]
        if kind == "lattice":
            cols, rows, v1, v2 = data
            return [i * v1 + j * v2 for i in (0, cols - 1) for j in (0, rows - 1)]
        return list(data) if len(data) else [np.zeros(2)]

    # -- queries -------------------------------------------------------------
    def bounding_box(self) -> Box | None:
        boxes = [self.cells[n].bbox for n in self.tops if self.cells[n].bbox is not None]
        if not boxes:
            return None
        a = np.array(boxes)
        return (a[:, 0].min(), a[:, 1].min(), a[:, 2].max(), a[:, 3].max())

    def query(self, window: Box) -> dict[tuple[int, int], PolygonSet]:
        """Polygons (nm) whose bounding box intersects ``window`` (nm), per layer."""
        out: dict[tuple[int, int], list[np.ndarray]] = {ld: [] for ld in self.layers}
        for name in self.tops:
            self._visit(name, _Affine.identity(), window, out)
        return {ld: PolygonSet.from_arrays(v) for ld, v in out.items()}

    def count(self, window: Box) -> int:
        """An upper bound of the polygons :meth:`query` returns for ``window``: the own
        polygons of every placed cell whose own polygons may meet it (cheap: no
        polygon is touched)."""
        rows: list[np.ndarray] = []
        for name in self.tops:
            self._placements(name, _Affine.identity(), window, rows)
        if not rows:
            return 0
        cells = np.concatenate(rows)[:, 0].astype(np.int64)
        return int(self.own_counts[cells].sum())

    def content_key(self, window: Box, origin: tuple[float, float]) -> bytes:
        """A digest of what :meth:`query` would return for ``window``, relative to ``origin``.

        Built from the hierarchy alone, without touching a polygon: the
        placements (cell, orientation, position relative to ``origin``) of
        every cell whose own polygons may meet the window.  Two windows of
        one size with equal keys hold the same polygons, shifted by the
        difference of their origins; so a tile's findings can be reused,
        shifted, for every tile with its key.  (Equal content can still get
        different keys, e.g. the same polygons drawn in different cells:
        that only costs a missed reuse.)
        """
        rows: list[np.ndarray] = []
        for name in self.tops:
            self._placements(name, _Affine.identity(), window, rows)
        size = np.array([window[2] - window[0], window[3] - window[1]])
        h = hashlib.blake2b(np.round(size, 3).tobytes(), digest_size=20)
        if rows:
            a = np.concatenate(rows)
            a[:, 5] -= origin[0]
            a[:, 6] -= origin[1]
            a[:, 1:5] = np.round(a[:, 1:5], 9)
            a[:, 5:] = np.round(a[:, 5:], 3)
            a += 0.0  # no negative zeros
            a = a[np.lexsort(a.T[::-1])]
            h.update(a.tobytes())
        return h.digest()

    def _placements(self, name: str, aff: _Affine, window: Box, rows) -> None:
        """Rows (cell, m00, m01, m10, m11, x, y): placements whose polygons may meet ``window``."""
        cd = self.cells[name]
        if cd.bbox is None or not _hits(aff.box(cd.bbox), window):
            return
        if cd.own_bbox is not None and _hits(aff.box(cd.own_bbox), window):
            rows.append(np.array([[cd.index, *aff.m.ravel(), *aff.t]]))
        for child, ref_aff, offs in cd.refs:
            ccd = self.cells[child]
            if ccd.bbox is None:
                continue
            placed = aff.then(ref_aff)
            o = self._offsets_in(offs, aff, np.array(placed.box(ccd.bbox)), window)
            if not len(o):
                continue
            if not ccd.refs:  # a leaf: its placements at once
                if ccd.own_bbox is None:
                    continue
                ob = np.array(placed.box(ccd.own_bbox))
                o = o[_moved_box_hits(ob, o, window)]
                if len(o):
                    r = np.empty((len(o), 7))
                    r[:, 0] = ccd.index
                    r[:, 1:5] = placed.m.ravel()
                    r[:, 5:] = placed.t + o
                    rows.append(r)
                continue
            for off in o:
                rows.append(self._placements_of(child, placed.m, placed.t + off, window))

    def _placements_of(self, name: str, m: np.ndarray, t: np.ndarray, window: Box) -> np.ndarray:
        """:meth:`_placements` of a placed cell, memoised by its frame and the window
        relative to it: arrays of blocks see the same relative windows over and over."""
        rel = np.round(np.asarray(window, dtype=np.float64) - np.tile(t, 2), 6) + 0.0
        key = (name, np.round(m, 12).tobytes(), rel.tobytes())
        local = self._memo.get(key)
        if local is None:
            if len(self._memo) >= PLACEMENT_MEMO_ENTRIES:
                self._memo.clear()
            found: list[np.ndarray] = []
            self._placements(name, _Affine(m, np.zeros(2)), tuple(rel.tolist()), found)
            local = np.concatenate(found) if found else np.empty((0, 7))
            self._memo[key] = local
        out = local.copy()
        out[:, 5:] += t
        return out

    def _visit(self, name: str, aff: _Affine, window: Box, out) -> None:
        cd = self.cells[name]
        if cd.bbox is None or not _hits(aff.box(cd.bbox), window):
            return
        for ld, (ps, bb) in cd.polys.items():
            if not len(ps):
                continue
            # Transformed boxes of all own polygons at once (corners of each box).
            corners = np.stack([bb[:, [0, 1]], bb[:, [2, 1]], bb[:, [2, 3]], bb[:, [0, 3]]], axis=1)
            tc = corners @ aff.m.T + aff.t
            lo, hi = tc.min(axis=1), tc.max(axis=1)
            keep = (lo[:, 0] <= window[2]) & (hi[:, 0] >= window[0]) & \
                (lo[:, 1] <= window[3]) & (hi[:, 1] >= window[1])  # fmt: skip
            for k in np.flatnonzero(keep):
                out[ld].append(aff.apply(ps.polygon(int(k))))
        for child, ref_aff, offs in cd.refs:
            cb = self.cells[child].bbox
            if cb is None:
                continue
            placed = aff.then(ref_aff)
            base = np.array(placed.box(cb))
            for o in self._offsets_in(offs, aff, base, window):
                self._visit(child, _Affine(placed.m, placed.t + o), window, out)

    @staticmethod
    def _offsets_in(offs, aff: _Affine, base: np.ndarray, window: Box):
        """Instance offsets (in the query frame) whose box intersects the window."""
        kind, data = offs
        if kind == "one":
            return np.zeros((1, 2)) if _hits(tuple(base), window) else np.zeros((0, 2))
        if kind == "list":
            o = np.asarray(data, dtype=np.float64).reshape(-1, 2) @ aff.m.T
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
            if not _moved_box_hits(base, ext, window).any() and not _hits(
                (base[0] + ext[:, 0].min(), base[1] + ext[:, 1].min(),
                 base[2] + ext[:, 0].max(), base[3] + ext[:, 1].max()), window):  # fmt: skip
                return np.zeros((0, 2))
            i0, i1, j0, j1 = 0, cols - 1, 0, rows - 1
        else:
            wx0, wy0, wx1, wy1 = window
            bx0, by0, bx1, by1 = (float(v) for v in base)
            corners = ((wx0 - bx1, wy0 - by1), (wx1 - bx0, wy0 - by1),
                       (wx1 - bx0, wy1 - by0), (wx0 - bx1, wy1 - by0))  # fmt: skip
            ii = [(s * x - r * y) / det for x, y in corners]
            jj = [(p * y - q * x) / det for x, y in corners]
            i0, i1 = max(0, math.floor(min(ii))), min(cols - 1, math.ceil(max(ii)))
            j0, j1 = max(0, math.floor(min(jj))), min(rows - 1, math.ceil(max(jj)))
        if i1 < i0 or j1 < j0:
            return np.zeros((0, 2))
        i = np.arange(i0, i1 + 1, dtype=np.float64)
        j = np.arange(j0, j1 + 1, dtype=np.float64)
        o = (i[:, None, None] * a1 + j[None, :, None] * a2).reshape(-1, 2)
        return o[_moved_box_hits(base, o, window)]
