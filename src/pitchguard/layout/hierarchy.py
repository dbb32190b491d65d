"""Window queries straight from a layout's hierarchy, and content keys of windows.

A window's polygons are found by pruning references by their transformed boxes
and clipping array index ranges, never flattening the whole layout.  Two windows
whose content keys are equal hold the same polygons up to a shift.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np

from pitchguard.layout.flat_counts import EDGE_PIECE_NM
from pitchguard.layout.placement import (  # noqa: F401  (the names tests and holders use)
    COUNT_EXACT_ABOVE,
    FEW_INSTANCES,
    GRID_INSTANCES,
    Affine,
    Box,
    _boxes_meeting,
    _matrix,
    _moved_box_hits,
    _OffsetList,
    _ref_affine,
    _selected,
    boxes_meet,
    offsets_in,
)
from pitchguard.layout.polygons import PolygonSet
from pitchguard.layout.walks import children_first, run_nested

PLACEMENT_MEMO_ENTRIES = 100_000
"""Memoised placement lists kept per query object (cleared when full)."""


def _canonical(a: np.ndarray) -> bytes:
    """Placement rows (see HierarchyQuery._placements), rounded and sorted, as bytes
    (``a`` is changed)."""
    a[:, 1:5] = np.round(a[:, 1:5], 9)
    a[:, 5:] = np.round(a[:, 5:], 3)
    a += 0.0  # no negative zeros
    return a[np.lexsort(a.T[::-1])].tobytes()


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
    # layer -> (vertices, perimeter nm) of each own polygon: a scan's work grows with both
    edges: dict = field(default_factory=dict)


def _edge_sizes(ps: PolygonSet) -> tuple[np.ndarray, np.ndarray]:
    """Vertices and perimeter (nm) of each polygon of ``ps``."""
    if not len(ps):
        return np.zeros(0, np.int64), np.zeros(0)
    nxt = np.arange(1, len(ps.points) + 1)
    nxt[ps.starts[1:] - 1] = ps.starts[:-1]  # each polygon's last vertex joins its first
    seg = np.hypot(*(ps.points[nxt] - ps.points).T)
    return np.diff(ps.starts), np.add.reduceat(seg, ps.starts[:-1])


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

        def child_of(ref):
            child = ref.cell if not isinstance(ref.cell, str) else by_name.get(ref.cell)
            return child if child is not None and hasattr(child, "references") else None

        # Children before parents, without recursion (chains may be thousands deep).
        for cell in children_first([by_name[name] for name in self.tops], child_of):
            self._load(cell, child_of)
        for cd in self.cells.values():
            cd.bbox = self._bbox(cd)
        # Own polygons per cell (asked-for layers), by the cell's number.
        self.own_counts = np.array(
            [sum(len(ps) for ps, _ in cd.polys.values()) for cd in self.cells.values()],
            dtype=np.int64,
        )
        self.own_vertices = np.array(
            [sum(int(v.sum()) for v, _ in cd.edges.values()) for cd in self.cells.values()],
            dtype=np.int64,
        )
        self.own_perimeters = np.array(
            [sum(float(e.sum()) for _, e in cd.edges.values()) for cd in self.cells.values()],
            dtype=np.float64,
        )
        self._by_index = list(self.cells.values())

    # -- preparation ---------------------------------------------------------
    def _load(self, cell, child_of) -> None:
        """The data of ``cell``, whose children are loaded already."""
        polys = {}
        for ld in self.layers:
            own = cell.get_polygons(
                apply_repetitions=True, include_paths=True, depth=0, layer=ld[0], datatype=ld[1]
            )
            ps = PolygonSet.from_arrays((q.points for q in own), self.scale)
            polys[ld] = (ps, ps.bounding_boxes())
        edges = {ld: _edge_sizes(ps) for ld, (ps, _) in polys.items()}
        refs = []
        singles: dict[tuple, list] = {}  # (child, orientation) -> [origins]
        for ref in cell.references:
            child = child_of(ref)
            if child is None:
                continue  # unresolved reference: nothing to place
            rep = ref.repetition
            if not rep.size:
                key = (child.name, ref.rotation, ref.magnification, ref.x_reflection)
                singles.setdefault(key, []).append(ref.origin)
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
        self.cells[cell.name] = _CellData(
            polys, refs, own_bbox=own_bbox, index=len(self.cells), edges=edges
        )

    def _bbox(self, cd: _CellData) -> Box | None:
        """The box of everything in ``cd`` (its children's boxes known already)."""
        boxes = [
            np.hstack([bb[:, :2].min(axis=0), bb[:, 2:].max(axis=0)])
            for _, bb in cd.polys.values()
            if len(bb)
        ]
        for child, aff, offs in cd.refs:
            cb = self.cells[child].bbox
            if cb is None:
                continue
            tb = np.array(aff.box(cb))
            for o in self._offset_extremes(offs):
                boxes.append(tb + np.array([o[0], o[1], o[0], o[1]]))
        if not boxes:
            return None
        arr = np.array(boxes)
        return (arr[:, 0].min(), arr[:, 1].min(), arr[:, 2].max(), arr[:, 3].max())

    @staticmethod
    def _offset_extremes(offs) -> list[np.ndarray]:
        kind, data = offs
        if kind == "one":
            return [np.zeros(2)]
        if kind == "lattice":
            cols, rows, v1, v2 = data
            return [i * v1 + j * v2 for i in (0, cols - 1) for j in (0, rows - 1)]
        return data.extremes()

    _offsets_in = staticmethod(offsets_in)  # as layout.holders_batch calls it

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
            run_nested(self._visit(name, Affine.identity(), window, out))
        return {ld: PolygonSet.joined(v) for ld, v in out.items()}

    def count(self, window: Box) -> int:
        """An upper bound of the polygons :meth:`query` returns for ``window``: the own
        polygons of every placed cell whose own polygons may meet it (cheap: no
        polygon is touched)."""
        return self.work(window)[0]

    def work(self, window: Box) -> tuple[int, float]:
        """Upper bounds of what :meth:`query` returns for ``window``: polygons (see
        :meth:`count`), and the site pieces of their edges (vertices plus
        perimeter over ``EDGE_PIECE_NM``; a magnified placement's edges are
        longer), which a scan's work and memory grow with."""
        rows: list[np.ndarray] = []
        for name in self.tops:
            self._placements(name, Affine.identity(), window, rows)
        if not rows:
            return 0, 0.0
        placed = np.concatenate(rows)
        cells = placed[:, 0].astype(np.int64)
        counts = self.own_counts[cells]
        mags = np.sqrt(np.abs(placed[:, 1] * placed[:, 4] - placed[:, 2] * placed[:, 3]))
        vertices = self.own_vertices[cells].astype(np.float64)
        perimeters = self.own_perimeters[cells]
        # A cell with many polygons of its own (a flat layout's top cell) is counted
        # by the polygons meeting the window, not whole: otherwise every tile of a
        # flat layout would count all of it.
        big = np.flatnonzero(counts > COUNT_EXACT_ABOVE)
        for k in big.tolist():
            cd = self._by_index[int(cells[k])]
            m = placed[k, 1:5].reshape(2, 2)
            counts[k], vertices[k], perimeters[k] = self._count_in(cd, m, placed[k, 5:], window)
        pieces = float((vertices + mags * perimeters / EDGE_PIECE_NM).sum())
        return int(counts.sum()), pieces

    @staticmethod
    def _count_in(cd: _CellData, m: np.ndarray, t: np.ndarray, window: Box):
        """The own polygons of ``cd`` placed by ``m`` and ``t`` whose box meets
        ``window`` (as :meth:`_place` selects them): their number, vertices and
        perimeter (nm, unplaced)."""
        shifts = np.asarray(t, dtype=np.float64).reshape(1, 2)
        n, vertices, perimeter = 0, 0, 0.0
        for ld, (ps, bb) in cd.polys.items():
            if len(ps):
                k = _selected(cd, ld, bb, m, shifts, window)[1]
                n += len(k)
                vertices += int(cd.edges[ld][0][k].sum())
                perimeter += float(cd.edges[ld][1][k].sum())
        return n, vertices, perimeter

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
        run_nested(self._placement_steps(name, aff, window, rows, tokens))

    def _placement_steps(self, name: str, aff: Affine, window: Box, rows, tokens=None):
        """:meth:`_placements` as steps for :func:`run_nested` (it yields its nested
        calls)."""
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
                local, digest = yield self._local(child, placed.m, t, window, tokens is not None)
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
        over and over.  Steps for :func:`run_nested`."""
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
            yield self._placement_steps(name, Affine(m, np.zeros(2)), rel, found)
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
            o = offsets_in(offs, aff, np.array(placed.box(ccd.bbox)), window)
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
        run_nested(self._visit(name, aff, window, out))
        return any(len(ps) for ps in out.get(ld, ()))

    def _visit(self, name: str, aff: Affine, window: Box, out):
        """Add to ``out`` the polygons of cell ``name`` placed by ``aff`` that meet
        ``window``, depth first; steps for :func:`run_nested`."""
        cd = self.cells[name]
        if cd.bbox is None or not boxes_meet(aff.box(cd.bbox), window):
            return
        self._place(cd, aff.m, aff.t, np.zeros((1, 2)), window, out)
        for child, ccd, placed, o in self.children_in(cd, aff, window):
            if not ccd.refs:  # a leaf: all its instances at once
                self._place(ccd, placed.m, placed.t, o, window, out)
                continue
            for off in o:
                yield self._visit(child, Affine(placed.m, placed.t + off), window, out)

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
