"""Window queries straight from a layout's hierarchy, and content keys of windows.

A window's polygons are found by pruning references by their transformed boxes
and clipping array index ranges, never flattening the whole layout.  Two windows
whose content keys are equal hold the same polygons up to a shift.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field

import numpy as np

from pitchguard.layout.box_grid import BoxGrid
from pitchguard.layout.polygons import PolygonSet

Box = tuple[float, float, float, float]


COUNT_EXACT_ABOVE = 4096
"""Cells with more own polygons are counted per window by their polygons' boxes
(:meth:`HierarchyQuery.count`); smaller ones whole (an upper bound, cheaper)."""

FEW_INSTANCES = 64
"""Array instances a window may meet below which they are found in plain floats."""


PLACEMENT_MEMO_ENTRIES = 100_000
"""Memoised placement lists kept per query object (cleared when full)."""


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


def _canonical(a: np.ndarray) -> bytes:
    """Placement rows (see HierarchyQuery._placements), rounded and sorted, as bytes
    (``a`` is changed)."""
    a[:, 1:5] = np.round(a[:, 1:5], 9)
    a[:, 5:] = np.round(a[:, 5:], 3)
    a += 0.0  # no negative zeros
    return a[np.lexsort(a.T[::-1])].tobytes()


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


GROUP_SINGLE_REFS = 8
"""Single references of one cell with one orientation in one parent, at least
this many, are kept as one reference with a list of offsets."""


@dataclass
class _CellData:
    polys: dict  # (layer, datatype) -> (PolygonSet, bboxes (n, 4))
    refs: list  # (child name, Affine, offsets kind, data)
    bbox: Box | None = None
    own_bbox: Box | None = None  # of the cell's own polygons (asked-for layers)
    index: int = 0  # the cell's number in content keys
    grids: dict = field(default_factory=dict)  # layer -> BoxGrid, for many own polygons


class HierarchyQuery:
    """Answer window queries on a gdstk library for some layers, in nm."""

    def __init__(self, lib, tops, layers, scale: float):
        self.scale = scale
        self.layers = sorted(set(layers))
        self.cells: dict[str, _CellData] = {}
        self.tops = [c.name for c in tops]
        self._memo: dict = {}  # content-key placements per (cell, frame, relative window)
        self._keys: dict = {}  # content keys by the quick digest (see content_key)
        by_name = {c.name: c for c in lib.cells if hasattr(c, "references")}
        for name in self.tops:
            self._load(by_name[name], by_name)
        for name in self.tops:
            self._bbox(name)
        # Own polygons per cell (asked-for layers), by the cell's number.
        self.own_counts = np.array(
            [sum(len(ps) for ps, _ in cd.polys.values()) for cd in self.cells.values()],
            dtype=np.int64,
        )
        self._by_index = list(self.cells.values())

    # -- preparation ---------------------------------------------------------
    def _load(self, cell, by_name) -> None:
        if cell.name in self.cells:
            return
        polys = {}
        for ld in self.layers:
            own = cell.get_polygons(
                apply_repetitions=True, include_paths=True, depth=0, layer=ld[0], datatype=ld[1]
            )
            ps = PolygonSet.from_arrays((q.points for q in own), self.scale)
            polys[ld] = (ps, ps.bounding_boxes())
        refs = []
        singles: dict[tuple, list] = {}  # (child, orientation) -> [origins]
        for ref in cell.references:
            child = ref.cell if not isinstance(ref.cell, str) else by_name.get(ref.cell)
            if child is None or not hasattr(child, "references"):
                continue  # unresolved reference: nothing to place
            rep = ref.repetition
            if not rep.size:
                key = (child.name, ref.rotation, ref.magnification, ref.x_reflection)
                singles.setdefault(key, []).append(ref.origin)
                self._load(child, by_name)
                continue
            aff = _ref_affine(ref, self.scale)
            if rep.columns and rep.rows and rep.v1 is not None and rep.v2 is not None:
                offs = (
                    "lattice",
                    (
                        rep.columns,
                        rep.rows,
                        np.asarray(rep.v1) * self.scale,
                        np.asarray(rep.v2) * self.scale,
                    ),
                )
            elif rep.columns and rep.rows and rep.spacing is not None:
                sx, sy = rep.spacing
                offs = (
                    "lattice",
                    (
                        rep.columns,
                        rep.rows,
                        np.array([sx, 0.0]) * self.scale,
                        np.array([0.0, sy]) * self.scale,
                    ),
                )
            else:
                offs = ("list", _OffsetList(np.asarray(rep.get_offsets()) * self.scale))
            refs.append((child.name, aff, offs))
            self._load(child, by_name)
        for (child, *orientation), origins in singles.items():
            m = _matrix(*orientation)
            t = np.array(origins, dtype=np.float64).reshape(-1, 2) * self.scale
            if len(t) < GROUP_SINGLE_REFS:
                refs.extend((child, Affine(m, o), ("one", None)) for o in t)
            else:
                refs.append((child, Affine(m, np.zeros(2)), ("list", _OffsetList(t))))
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
        boxes = [
            np.hstack([bb[:, :2].min(axis=0), bb[:, 2:].max(axis=0)])
            for _, bb in cd.polys.values()
            if len(bb)
        ]
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
        return data.extremes()

    # -- queries -------------------------------------------------------------
    def bounding_box(self) -> Box | None:
        boxes = [self.cells[n].bbox for n in self.tops if self.cells[n].bbox is not None]
        if not boxes:
            return None
        a = np.array(boxes)
        return (a[:, 0].min(), a[:, 1].min(), a[:, 2].max(), a[:, 3].max())

    def query(self, window: Box) -> dict[tuple[int, int], PolygonSet]:
        """Polygons (nm) whose bounding box intersects ``window`` (nm), per layer."""
        out: dict[tuple[int, int], list[PolygonSet]] = {ld: [] for ld in self.layers}
        for name in self.tops:
            self._visit(name, Affine.identity(), window, out)
        return {ld: PolygonSet.joined(v) for ld, v in out.items()}

    def count(self, window: Box) -> int:
        """An upper bound of the polygons :meth:`query` returns for ``window``: the own
        polygons of every placed cell whose own polygons may meet it (cheap: no
        polygon is touched)."""
        rows: list[np.ndarray] = []
        for name in self.tops:
            self._placements(name, Affine.identity(), window, rows)
        if not rows:
            return 0
        placed = np.concatenate(rows)
        cells = placed[:, 0].astype(np.int64)
        counts = self.own_counts[cells]
        # A cell with many polygons of its own (a flat layout's top cell) is counted
        # by the polygons meeting the window, not whole: otherwise every tile of a
        # flat layout would count all of it.
        big = np.flatnonzero(counts > COUNT_EXACT_ABOVE)
        for k in big.tolist():
            cd = self._by_index[int(cells[k])]
            m = placed[k, 1:5].reshape(2, 2)
            counts[k] = self._count_in(cd, m, placed[k, 5:], window)
        return int(counts.sum())

    @staticmethod
    def _count_in(cd: _CellData, m: np.ndarray, t: np.ndarray, window: Box) -> int:
        """The own polygons of ``cd`` placed by ``m`` and ``t`` whose box meets
        ``window`` (as :meth:`_place` selects them)."""
        shifts = np.asarray(t, dtype=np.float64).reshape(1, 2)
        return sum(
            len(_selected(cd, ld, bb, m, shifts, window)[1])
            for ld, (ps, bb) in cd.polys.items()
            if len(ps)
        )

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

        Placed cells with children below the top enter by the digest of their
        own placements in the window and their position (see :meth:`_local`):
        a tile of an arrayed block costs a few digests, not a sort of every
        leaf placement in it.
        """
        rows: list[np.ndarray] = []
        tokens: list[tuple[bytes, np.ndarray, np.ndarray]] = []
        for name in self.tops:
            self._placements(name, Affine.identity(), window, rows, tokens)
        size = np.round(np.array([window[2] - window[0], window[3] - window[1]]), 3).tobytes()
        ox, oy = float(origin[0]), float(origin[1])
        mine = np.concatenate(rows) if rows else np.empty((0, 7))
        mine[:, 5] -= ox
        mine[:, 6] -= oy
        # First the placements as found (placed blocks by their digests): equal
        # ones mean equal placements, so the key, which needs every placement
        # sorted, is worked out once per such set.
        placed = sorted(
            (d, round(float(t[0]) - ox, 3) + 0.0, round(float(t[1]) - oy, 3) + 0.0)
            for d, t, _ in tokens
        )
        quick = (size, _canonical(mine.copy()) if len(mine) else b"", tuple(placed))
        known = self._keys.get(quick)
        if known is not None:
            return known
        parts = [mine]
        for _, t, rows_in in tokens:
            local = rows_in.copy()
            local[:, 5] += t[0] - ox
            local[:, 6] += t[1] - oy
            parts.append(local)
        h = hashlib.blake2b(size, digest_size=20)
        a = np.concatenate(parts)
        if len(a):
            h.update(_canonical(a))
        if len(self._keys) >= PLACEMENT_MEMO_ENTRIES:
            self._keys.clear()
        self._keys[quick] = key = h.digest()
        return key

    def _placements(self, name: str, aff: Affine, window: Box, rows, tokens=None) -> None:
        """Rows (cell, m00, m01, m10, m11, x, y): placements whose polygons may meet ``window``.

        With ``tokens``, a placed cell that has children enters it as ``(digest
        of its rows in its own frame, its position, those rows)`` instead of by
        its rows.
        """
        cd = self.cells[name]
        if cd.bbox is None or not boxes_meet(aff.box(cd.bbox), window):
            return
        if cd.own_bbox is not None and boxes_meet(aff.box(cd.own_bbox), window):
            rows.append(np.array([[cd.index, *aff.m.ravel(), *aff.t]]))
        for child, ccd, placed, o in self.children_in(cd, aff, window):
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
                t = placed.t + off
                local, digest = self._local(child, placed.m, t, window, tokens is not None)
                if not len(local):
                    continue
                if tokens is None:
                    out = local.copy()
                    out[:, 5:] += t
                    rows.append(out)
                else:
                    tokens.append((digest, t, local))

    def _local(self, name: str, m: np.ndarray, t: np.ndarray, window: Box, digest: bool):
        """:meth:`_placements` of a cell placed by ``m`` and ``t``, in a frame moved by
        ``-t``, and (if ``digest``) a digest of them; memoised by the frame and the
        window relative to it: arrays of blocks see the same relative windows
        over and over."""
        tx, ty = float(t[0]), float(t[1])
        rel = (
            round(window[0] - tx, 6) + 0.0,
            round(window[1] - ty, 6) + 0.0,
            round(window[2] - tx, 6) + 0.0,
            round(window[3] - ty, 6) + 0.0,
        )
        key = (name, m.tobytes(), rel)
        entry = self._memo.get(key)
        if entry is None:
            if len(self._memo) >= PLACEMENT_MEMO_ENTRIES:
                self._memo.clear()
            found: list[np.ndarray] = []
            self._placements(name, Affine(m, np.zeros(2)), rel, found)
            entry = [np.concatenate(found) if found else np.empty((0, 7)), None]
            self._memo[key] = entry
        if digest and entry[1] is None:
            entry[1] = hashlib.blake2b(_canonical(entry[0].copy()), digest_size=20).digest()
        return entry[0], entry[1]

    def children_in(self, cd: _CellData, aff: Affine, window: Box):
        """``(child name, its data, its placement, instance offsets)`` of each
        reference of ``cd`` (placed by ``aff``) with instances near ``window``."""
        for child, ref_aff, offs in cd.refs:
            ccd = self.cells[child]
            if ccd.bbox is None:
                continue
            placed = aff.then(ref_aff)
            o = self._offsets_in(offs, aff, np.array(placed.box(ccd.bbox)), window)
            if len(o):
                yield child, ccd, placed, o

    def meets(self, name: str, aff: Affine, window: Box, ld, own_only: bool = False) -> bool:
        """Whether a polygon box of layer ``ld`` of cell ``name`` placed by ``aff`` (its
        own only, or with everything below it) meets ``window``."""
        cd = self.cells[name]
        if own_only:
            bb = cd.polys[ld][1] if ld in cd.polys else np.zeros((0, 4))
            return bool(len(bb)) and bool(len(_selected(cd, ld, bb, aff.m, aff.t[None], window)[1]))
        out: dict = {k: [] for k in self.layers}
        self._visit(name, aff, window, out)
        return any(len(ps) for ps in out.get(ld, ()))

    def _visit(self, name: str, aff: Affine, window: Box, out) -> None:
        cd = self.cells[name]
        if cd.bbox is None or not boxes_meet(aff.box(cd.bbox), window):
            return
        self._place(cd, aff.m, aff.t, np.zeros((1, 2)), window, out)
        for child, ccd, placed, o in self.children_in(cd, aff, window):
            if not ccd.refs:  # a leaf: all its instances at once
                self._place(ccd, placed.m, placed.t, o, window, out)
                continue
            for off in o:
                self._visit(child, Affine(placed.m, placed.t + off), window, out)

    @staticmethod
    def _place(
        cd: _CellData, m: np.ndarray, t: np.ndarray, offsets: np.ndarray, window: Box, out
    ) -> None:
        """Add the own polygons of ``cd`` placed by ``m`` and ``t + offsets[i]`` for
        each instance ``i`` whose transformed polygon box meets ``window``, instance
        by instance, each in the cell's order.

        Same values as transforming each copy on its own: the corner minimum
        commutes with adding a shift (rounding is monotone), and each point
        is ``p @ m.T + (t + offset)``.
        """
        shifts = t + offsets  # (n, 2), one per instance
        for ld, (ps, bb) in cd.polys.items():
            if not len(ps):
                continue
            inst, k = _selected(cd, ld, bb, m, shifts, window)  # instance-major, in order
            if not len(k):
                continue
            rows, starts = ps.rows_of(k)
            pts = ps.points[rows] @ m.T
            pts += np.repeat(shifts[inst], np.diff(starts), axis=0)
            out[ld].append(PolygonSet(pts, starts))

    @staticmethod
    def _offsets_in(offs, aff: Affine, base: np.ndarray, window: Box):
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


def _selected(cd: _CellData, ld, bb: np.ndarray, m: np.ndarray, shifts: np.ndarray, window):
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
