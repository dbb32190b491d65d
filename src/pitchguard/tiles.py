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
        x0, y0, x1, y1 = b
        c = self.apply(np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]]))
        return (c[:, 0].min(), c[:, 1].min(), c[:, 0].max(), c[:, 1].max())


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
        by_name = {c.name: c for c in lib.cells if hasattr(c, "references")}
        for name in self.tops:
            self._load(by_name[name], by_name)
        for name in self.tops:
            self._bbox(name)

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
                self._placements(child, _Affine(placed.m, placed.t + off), window, rows)

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
        # instance box: only that index range can hit.
        basis = np.column_stack([a1, a2])
        try:
            inv = np.linalg.inv(basis)
        except np.linalg.LinAlgError:  # degenerate lattice: test every instance
            inv = None
        if inv is None:
            i_rng, j_rng = range(cols), range(rows)
        else:
            wx0, wy0, wx1, wy1 = window
            bx0, by0, bx1, by1 = base
            pts = np.array([[wx0 - bx1, wy0 - by1], [wx1 - bx0, wy0 - by1],
                            [wx1 - bx0, wy1 - by0], [wx0 - bx1, wy1 - by0]])  # fmt: skip
            ij = pts @ inv.T
            i0 = max(0, int(math.floor(ij[:, 0].min())))
            i1 = min(cols - 1, int(math.ceil(ij[:, 0].max())))
            j0 = max(0, int(math.floor(ij[:, 1].min())))
            j1 = min(rows - 1, int(math.ceil(ij[:, 1].max())))
            i_rng, j_rng = range(i0, i1 + 1), range(j0, j1 + 1)
        ii, jj = np.meshgrid(np.asarray(i_rng, dtype=np.float64),
                             np.asarray(j_rng, dtype=np.float64), indexing="ij")  # fmt: skip
        o = ii.reshape(-1, 1) * a1 + jj.reshape(-1, 1) * a2
        return o[_moved_box_hits(base, o, window)]
