"""Holders (layout.holders) of many windows at once: the same walk, a level at a time.

The windows that reach one cell in one frame go down together.  Windows (with
their regions) whose coordinates round alike to 1/KEY_SCALE nm are walked
once, as the plain walk's memo shares them, the first of them in input order
standing for the rest.  At each level, the placements of the cell's children
that meet each window come from array arithmetic: a lattice's index ranges
from the window's corners, an offset list's sorted x, single placements by
their boxes (in a bucket grid when there are many).  Where more than one
meets a window, whether each has polygons of the layer in it is found the
same way, a level of its hierarchy at a time; a cell's own polygons by a
bulk box query (``layout.box_grid`` buckets).  The windows one placement
holds move into its frame and go down together.

Every comparison is the plain walk's, on the same floating-point values: the
sums, products and matrix products are done in the same order and shapes as
``HierarchyQuery.children_in``, ``meets`` and ``Affine.box`` do them (a product
of one offset row by a matrix rounds differently from many rows at once, and
is done alone where the plain code does it alone).  So the holders are the
same (tests/unit/test_holders_batch.py holds them to :class:`Holders`).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from pitchguard.layout.box_grid import BoxGrid
from pitchguard.layout.hierarchy import Affine, HierarchyQuery
from pitchguard.layout.holders import KEY_SCALE

EXPAND_CHUNK = 1 << 20
"""Candidate (window, instance) pairs made at once (bounds peak memory)."""

FEW_POLYGONS = 64
"""Own polygons of a cell below which every window is tested against all of them."""

FEW_SINGLES = 64
"""Single placements in a cell below which each is tested against every window (more:
a bucket grid over their boxes)."""


class _Ref(NamedTuple):
    """A reference of a cell placed by ``m`` at the origin (``HierarchyQuery`` terms)."""

    child: str
    leaf: bool  # the child places nothing
    m: np.ndarray  # the child's placement matrix in the top frame
    mt: np.ndarray  # m @ reference origin: the placement's origin before the frame's shift
    box: np.ndarray  # the child's box placed by ``m`` at the origin (Affine.box)
    kind: str  # "one", "list" or "lattice" (HierarchyQuery._load)
    data: object


class _Frame(NamedTuple):
    """A cell placed by ``m`` at the origin: its box and references, and its single
    placements together (a cell placing thousands is searched once per batch of
    windows, not once per placement)."""

    box: np.ndarray | None
    refs: list
    arrays: list  # the references placing more than one instance (indexes into refs)
    singles: np.ndarray  # the single placements (indexes into refs)
    single_box: np.ndarray  # (n, 4): their boxes placed by m at the origin
    single_mt: np.ndarray  # (n, 2): their origins placed by m
    single_grid: BoxGrid | None  # over their boxes at their origins, if many


def _meet(b: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Row by row, whether boxes ``b`` meet boxes ``w`` (touching counts)."""
    return (b[:, 0] <= w[:, 2]) & (b[:, 2] >= w[:, 0]) & (b[:, 1] <= w[:, 3]) & (b[:, 3] >= w[:, 1])


def _four(t: np.ndarray) -> np.ndarray:
    """Shifts ``(n, 2)`` as box shifts ``(n, 4)``."""
    return np.concatenate([t, t], axis=1)


def _ranges(starts: np.ndarray, lengths: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(row, value)``: for each row ``k``, the values ``starts[k] + 0 .. lengths[k]-1``."""
    lengths = np.maximum(lengths, 0)
    row = np.repeat(np.arange(len(starts)), lengths)
    first = np.cumsum(lengths) - lengths
    return row, starts[row] + (np.arange(len(row)) - first[row])


def _chunks(sizes: np.ndarray):
    """Slices of consecutive rows whose ``sizes`` add up to about EXPAND_CHUNK."""
    total = np.cumsum(sizes)
    a = 0
    while a < len(sizes):
        base = total[a - 1] if a else 0
        b = max(a + 1, int(np.searchsorted(total, base + EXPAND_CHUNK, side="right")))
        yield slice(a, b)
        a = b


def _exact_products(m: np.ndarray) -> bool:
    """Whether ``p @ m.T`` is exact however it is summed: each row of ``m`` has one
    non-zero entry at most, a power of two (no turn or a mirror, magnified by a
    power of two)."""
    nz = m != 0
    return bool((nz.sum(axis=1) <= 1).all() and (np.abs(np.frexp(m[nz])[0]) == 0.5).all())


def first_of_groups(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(first, inverse)`` of the rows of ``keys``: the first row (input order) of
    each group of equal rows, in input order, and each row's group."""
    n = len(keys)
    if n == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    order = np.lexsort(keys.T[::-1])  # stable: a group's first row comes first
    s = keys[order]
    new = np.ones(n, dtype=bool)
    new[1:] = (s[1:] != s[:-1]).any(axis=1)
    group = np.cumsum(new) - 1
    first = order[new]
    rank = np.empty(len(first), np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(first))
    inverse = np.empty(n, np.int64)
    inverse[order] = rank[group]
    return np.sort(first), inverse


class BatchHolders:
    """:class:`layout.holders.Holders` for many windows of one opened layout at once."""

    def __init__(self, q: HierarchyQuery):
        self.q = q
        self.paths: list[tuple[str, ...]] = []  # from the top cell, as :meth:`of` gives them
        self._rel: list[tuple[str, ...]] = []  # below the cell a walk starts from
        self._rel_ids: dict[tuple[str, ...], int] = {}
        self._frames: dict = {}
        self._boxes: dict = {}
        self._list_offsets: dict = {}

    def of(self, windows: np.ndarray, regions: np.ndarray, lds: list):
        """The holders of ``windows`` (n, 4) nm, top frame, with their findings'
        ``regions`` (n, 4) and layers ``lds`` (``(layer, datatype)`` each):
        ``(path, m (n, 4), t (n, 2), context (n,))``, ``path`` indexing
        :attr:`paths` (names from the top cell down to the holder)."""
        q = self.q
        w = np.asarray(windows, dtype=np.float64).reshape(-1, 4)
        r = np.asarray(regions, dtype=np.float64).reshape(-1, 4)
        n = len(w)
        path = np.zeros(n, np.int64)
        m = np.zeros((n, 4))
        t = np.zeros((n, 2))
        ctx = np.zeros(n, dtype=bool)
        found: dict[tuple[str, ...], int] = {}
        codes: dict = {}
        code = np.array([codes.setdefault(ld, len(codes)) for ld in lds], dtype=np.int64)
        # The top cell of a window: the first whose box meets it, else the first top.
        top = np.full(n, -1, np.int64)
        for k, name in enumerate(q.tops):
            box = q.cells[name].bbox
            if box is not None:
                top[(top < 0) & _meet(np.broadcast_to(np.array(box), (n, 4)), w)] = k
        top[top < 0] = 0
        for ld, c in codes.items():
            for k, name in enumerate(q.tops):
                sel = np.flatnonzero((code == c) & (top == k))
                if not len(sel):
                    continue
                sub, fm, ft, cx = self._descend(name, np.eye(2), ld, w[sel], r[sel])
                ids = np.zeros(len(self._rel), np.int64)
                for s in np.unique(sub).tolist():
                    full = (name, *self._rel[s])
                    ids[s] = found.setdefault(full, len(found))
                path[sel] = ids[sub]
                m[sel], t[sel], ctx[sel] = fm, ft, cx
        self.paths = list(found)
        return path, m, t, ctx

    def _rel_id(self, p: tuple[str, ...]) -> int:
        """The number of a path below a walk's first cell."""
        k = self._rel_ids.get(p)
        if k is None:
            k = self._rel_ids[p] = len(self._rel)
            self._rel.append(p)
        return k

    # -- the walk ------------------------------------------------------------
    def _descend(self, name: str, m: np.ndarray, ld, w: np.ndarray, r: np.ndarray):
        """``(path below name (ids), m (k, 4), t (k, 2), context (k,))`` of windows
        ``w`` and regions ``r`` in the frame of cell ``name`` placed by ``m``."""
        first, inverse = first_of_groups(np.rint(np.hstack([w, r]) * KEY_SCALE) + 0.0)
        w, r = w[first], r[first]
        k = len(w)
        held, which, ct = self._held(name, m, ld, w)
        sub = np.full(k, self._rel_id(()), np.int64)
        fm = np.broadcast_to(m.ravel(), (k, 4)).copy()
        ft = np.zeros((k, 2))
        ctx = np.zeros(k, dtype=bool)
        stop = np.flatnonzero(~held)
        if len(stop):
            ctx[stop] = self._held(name, m, ld, r[stop])[0]
        refs = self._frame(name, m).refs
        go = np.flatnonzero(held)
        # Placements of one cell in one orientation go down together.
        frames: dict = {}
        for j in np.unique(which[go]).tolist():
            frames.setdefault((refs[j].child, refs[j].m.tobytes()), []).append(j)
        for js in frames.values():
            sel = go[np.isin(which[go], js)]
            ref = refs[js[0]]
            c = ct[sel]
            got = self._descend(ref.child, ref.m, ld, w[sel] - _four(c), r[sel] - _four(c))
            ids = np.zeros(len(self._rel), np.int64)
            for s in np.unique(got[0]).tolist():
                ids[s] = self._rel_id((ref.child, *self._rel[s]))
            sub[sel] = ids[got[0]]
            fm[sel] = got[1]
            ft[sel] = got[2] + c
            ctx[sel] = got[3]
        return sub[inverse], fm[inverse], ft[inverse], ctx[inverse]

    def _held(self, name: str, m: np.ndarray, ld, w: np.ndarray):
        """``(held, reference, t)``: per window (frame of cell ``name`` placed by ``m``),
        whether one placement of a child holds it, which reference it is of
        (an index into the frame's refs) and where it is placed
        (``Holders.held``)."""
        k = len(w)
        zero = np.zeros((k, 2))
        win, ref, ct = self._instances(name, m, zero, w)
        count = np.bincount(win, minlength=k)
        own = np.zeros(k, dtype=bool)
        some = np.flatnonzero(count > 0)
        own[some] = self._own(name, m, ld, zero[some], w[some])
        keep = np.ones(len(win), dtype=bool)
        multi = ((count > 1) & ~own)[win]
        if multi.any():
            keep[multi] = self._placed_meet(
                name, m, ld, ref[multi], ct[multi], w[win[multi]], leaves_boxed=True
            )
        win, ref, ct = win[keep], ref[keep], ct[keep]
        held = (np.bincount(win, minlength=k) == 1) & ~own
        out_ref = np.full(k, -1, np.int64)
        out_t = np.zeros((k, 2))
        one = held[win]
        out_ref[win[one]] = ref[one]
        out_t[win[one]] = ct[one]
        return held, out_ref, out_t

    def _placed_meet(self, name, m, ld, ref, ct, w, leaves_boxed: bool) -> np.ndarray:
        """Whether the children of ``name`` (frame ``m``) placed by its references
        ``ref`` at ``ct`` have polygons of ``ld`` meeting ``w`` (row by row); a
        leaf's box tested first only if ``leaves_boxed`` (``HierarchyQuery.meets``
        tests it, its search below a cell does not)."""
        refs = self._frame(name, m).refs
        out = np.zeros(len(ref), dtype=bool)
        frames: dict = {}
        for j in np.unique(ref).tolist():
            frames.setdefault((refs[j].child, refs[j].m.tobytes()), []).append(j)
        for js in frames.values():
            sel = np.flatnonzero(np.isin(ref, js))
            child = refs[js[0]]
            if child.leaf and not leaves_boxed:
                out[sel] = self._own(child.child, child.m, ld, ct[sel], w[sel])
            else:
                out[sel] = self._meets(child.child, child.m, ld, ct[sel], w[sel])
        return out

    # -- HierarchyQuery.meets, children_in and _offsets_in for many windows ----
    def _meets(self, name: str, m: np.ndarray, ld, t: np.ndarray, w: np.ndarray) -> np.ndarray:
        """Per row, whether cell ``name`` placed by ``m`` and ``t[k]`` has a polygon
        box of ``ld`` (its own or below) meeting ``w[k]`` (``HierarchyQuery.meets``)."""
        fr = self._frame(name, m)
        hit = np.zeros(len(w), dtype=bool)
        if fr.box is None:
            return hit
        idx = np.flatnonzero(_meet(fr.box + _four(t), w))
        if not len(idx):
            return hit
        own = self._own(name, m, ld, t[idx], w[idx])
        hit[idx[own]] = True
        idx = idx[~own]
        if len(idx) and fr.refs:
            win, ref, ct = self._instances(name, m, t[idx], w[idx])
            got = self._placed_meet(name, m, ld, ref, ct, w[idx][win], leaves_boxed=False)
            hit[idx[win[got]]] = True
        return hit

    def _instances(self, name: str, m: np.ndarray, t: np.ndarray, w: np.ndarray):
        """``(window, reference, placement origin)`` of every instance of a child of
        cell ``name`` (placed by ``m`` and ``t[k]``) whose box meets ``w[k]``."""
        fr = self._frame(name, m)
        wins, refs, ts = [np.zeros(0, np.int64)], [np.zeros(0, np.int64)], [np.zeros((0, 2))]
        for j in fr.arrays if fr.single_grid is not None else range(len(fr.refs)):
            ref = fr.refs[j]
            placed_t = ref.mt + t
            if ref.kind == "one":
                x, y = placed_t[:, 0], placed_t[:, 1]
                b = ref.box
                win = np.flatnonzero(
                    (b[0] + x <= w[:, 2])
                    & (b[2] + x >= w[:, 0])
                    & (b[1] + y <= w[:, 3])
                    & (b[3] + y >= w[:, 1])
                )
                o = np.zeros((len(win), 2))  # the plain search's zero offset
            else:
                win, o = self._offsets(ref, m, ref.box + _four(placed_t), w)
            wins.append(win)
            refs.append(np.full(len(win), j, np.int64))
            ts.append(placed_t[win] + o)
        if fr.single_grid is not None:
            win, k = _grid_pairs(fr.single_grid, np.eye(2), t, w)
            placed_t = fr.single_mt[k] + t[win]
            hit = _meet(fr.single_box[k] + _four(placed_t), w[win])
            wins.append(win[hit])
            refs.append(fr.singles[k[hit]])
            ts.append(placed_t[hit] + np.zeros(2))  # the plain search's zero offset
        return np.concatenate(wins), np.concatenate(refs), np.concatenate(ts)

    def _offsets(self, ref: _Ref, m: np.ndarray, base: np.ndarray, w: np.ndarray):
        """``(window, offset)`` of the instances of ``ref`` (frame ``m``, an array or
        list) whose box, ``base[k]`` moved by the offset, meets ``w[k]``
        (``HierarchyQuery._offsets_in``)."""
        if ref.kind == "list":
            return self._list_instances(ref, m, base, w)
        return self._lattice_instances(ref, m, base, w)

    def _list_instances(self, ref: _Ref, m: np.ndarray, base: np.ndarray, w: np.ndarray):
        data = ref.data
        lo = np.stack([w[:, 0] - base[:, 2], w[:, 1] - base[:, 3]], axis=1)
        hi = np.stack([w[:, 2] - base[:, 0], w[:, 3] - base[:, 1]], axis=1)
        ok = ~(lo > hi).any(axis=1)
        if not np.array_equal(m, np.eye(2)):
            c = np.stack(
                [lo, np.stack([hi[:, 0], lo[:, 1]], 1), hi, np.stack([lo[:, 0], hi[:, 1]], 1)], 1
            )
            c = c @ np.linalg.inv(m).T
            lo, hi = c.min(axis=1), c.max(axis=1)
        slack = 1e-6 * (1.0 + np.abs(lo).max(axis=1) + np.abs(hi).max(axis=1))
        x0, y0 = lo[:, 0] - slack, lo[:, 1] - slack
        x1, y1 = hi[:, 0] + slack, hi[:, 1] + slack
        a = np.searchsorted(data.x, x0, side="left")
        b = np.searchsorted(data.x, x1, side="right")
        span = np.where(ok, b - a, 0)
        key = (id(data), m.tobytes())
        moved = self._list_offsets.get(key)
        if moved is None:
            moved = self._list_offsets[key] = data.xy @ m.T
        alone = not _exact_products(m)
        wins, offs = [np.zeros(0, np.int64)], [np.zeros((0, 2))]
        for part in _chunks(span):
            row, at = _ranges(a[part], span[part])
            row += part.start
            y = data.xy[at, 1]
            inside = (y >= y0[row]) & (y <= y1[row])
            row, at = row[inside], at[inside]
            o = moved[at]
            if alone and len(row):
                # A window with one offset in its slice has it multiplied alone.
                single = np.bincount(row, minlength=len(w))[row] == 1
                for k in np.flatnonzero(single).tolist():
                    o[k] = data.xy[at[k] : at[k] + 1] @ m.T
            hit = _meet(base[row] + _four(o), w[row])
            wins.append(row[hit])
            offs.append(o[hit])
        return np.concatenate(wins), np.concatenate(offs)

    def _lattice_instances(self, ref: _Ref, m: np.ndarray, base: np.ndarray, w: np.ndarray):
        cols, rows, v1, v2 = ref.data
        a1, a2 = m @ v1, m @ v2
        (p, q), (r, s) = a1.tolist(), a2.tolist()
        det = p * s - r * q
        if abs(det) <= 1e-12 * (abs(p * s) + abs(r * q) + 1e-300):
            return self._one_by_one(ref, m, base, w)
        left, right = w[:, 0] - base[:, 2], w[:, 2] - base[:, 0]
        low, high = w[:, 1] - base[:, 3], w[:, 3] - base[:, 1]
        x = np.stack([left, right, right, left], axis=1)  # the window's corners, widened
        y = np.stack([low, low, high, high], axis=1)
        ii = (s * x - r * y) / det
        jj = (p * y - q * x) / det
        i0 = np.clip(np.floor(ii.min(axis=1)), 0, cols)
        i1 = np.clip(np.ceil(ii.max(axis=1)), -1, cols - 1)
        j0 = np.clip(np.floor(jj.min(axis=1)), 0, rows)
        j1 = np.clip(np.ceil(jj.max(axis=1)), -1, rows - 1)
        ni = np.maximum(i1 - i0 + 1, 0).astype(np.int64)
        nj = np.maximum(j1 - j0 + 1, 0).astype(np.int64)
        wins, offs = [np.zeros(0, np.int64)], [np.zeros((0, 2))]
        size = ni * nj
        for part in _chunks(size):
            row, at = _ranges(np.zeros(part.stop - part.start, np.int64), size[part])
            row += part.start
            i = i0[row] + at // nj[row]
            j = j0[row] + at % nj[row]
            o = np.stack([i * p + j * r, i * q + j * s], axis=1)
            hit = _meet(base[row] + _four(o), w[row])
            wins.append(row[hit])
            offs.append(o[hit])
        return np.concatenate(wins), np.concatenate(offs)

    def _one_by_one(self, ref: _Ref, m: np.ndarray, base: np.ndarray, w: np.ndarray):
        """A degenerate lattice (collinear vectors): the plain search, window by window."""
        here = Affine(m, np.zeros(2))
        wins, offs = [np.zeros(0, np.int64)], [np.zeros((0, 2))]
        for k in range(len(w)):
            o = self.q._offsets_in((ref.kind, ref.data), here, base[k], tuple(w[k].tolist()))
            wins.append(np.full(len(o), k, np.int64))
            offs.append(o)
        return np.concatenate(wins), np.concatenate(offs)

    # -- own polygons --------------------------------------------------------
    def _own(self, name: str, m: np.ndarray, ld, t: np.ndarray, w: np.ndarray) -> np.ndarray:
        """Per row, whether an own polygon box of ``ld`` of cell ``name`` placed by
        ``m`` and ``t[k]`` meets ``w[k]`` (the selection of ``_selected``)."""
        cd = self.q.cells[name]
        hit = np.zeros(len(w), dtype=bool)
        if ld not in cd.polys or not len(cd.polys[ld][1]) or not len(w):
            return hit
        lo, hi = self._placed_boxes(name, m, ld)
        if len(lo) <= FEW_POLYGONS or abs(float(np.linalg.det(m))) < 1e-12:
            for part in _chunks(np.full(len(w), len(lo))):
                tx, ty = t[part, :1], t[part, 1:]
                wk = w[part]
                hit[part] = (
                    (lo[None, :, 0] + tx <= wk[:, 2:3])
                    & (hi[None, :, 0] + tx >= wk[:, 0:1])
                    & (lo[None, :, 1] + ty <= wk[:, 3:4])
                    & (hi[None, :, 1] + ty >= wk[:, 1:2])
                ).any(axis=1)
            return hit
        row, k = _grid_pairs(self._grid(cd, ld), m, t, w)
        ok = (
            (lo[k, 0] + t[row, 0] <= w[row, 2])
            & (hi[k, 0] + t[row, 0] >= w[row, 0])
            & (lo[k, 1] + t[row, 1] <= w[row, 3])
            & (hi[k, 1] + t[row, 1] >= w[row, 1])
        )
        hit[row[ok]] = True
        return hit

    def _placed_boxes(self, name: str, m: np.ndarray, ld):
        """The boxes of the own polygons of ``ld`` of cell ``name`` placed by ``m`` at
        the origin, as ``_boxes_meeting`` makes them: ``(lo, hi)``, (n, 2) each."""
        key = (name, m.tobytes(), ld)
        got = self._boxes.get(key)
        if got is None:
            bb = self.q.cells[name].polys[ld][1]
            corners = np.stack([bb[:, [0, 1]], bb[:, [2, 1]], bb[:, [2, 3]], bb[:, [0, 3]]], axis=1)
            tc = corners @ m.T
            got = self._boxes[key] = (tc.min(axis=1), tc.max(axis=1))
        return got

    @staticmethod
    def _grid(cd, ld) -> BoxGrid:
        """The cell's bucket grid of ``ld`` (shared with ``HierarchyQuery``)."""
        grid = cd.grids.get(ld)
        if grid is None:
            grid = cd.grids[ld] = BoxGrid(cd.polys[ld][1])
        return grid

    def _frame(self, name: str, m: np.ndarray) -> _Frame:
        key = (name, m.tobytes())
        fr = self._frames.get(key)
        if fr is None:
            q = self.q
            cd = q.cells[name]
            here = Affine(m, np.zeros(2))
            box = None if cd.bbox is None else np.array(here.box(cd.bbox))
            refs = []
            for child, ref_aff, (kind, data) in cd.refs:
                ccd = q.cells[child]
                if ccd.bbox is None:
                    continue
                placed = here.then(ref_aff)
                cbox = np.array(Affine(placed.m, np.zeros(2)).box(ccd.bbox))
                refs.append(_Ref(child, not ccd.refs, placed.m, m @ ref_aff.t, cbox, kind, data))
            one = [j for j, ref in enumerate(refs) if ref.kind == "one"]
            single_box = np.array([refs[j].box for j in one]).reshape(-1, 4)
            single_mt = np.array([refs[j].mt for j in one]).reshape(-1, 2)
            fr = self._frames[key] = _Frame(
                box,
                refs,
                [j for j, ref in enumerate(refs) if ref.kind != "one"],
                np.array(one, dtype=np.int64),
                single_box,
                single_mt,
                BoxGrid(single_box + _four(single_mt)) if len(one) > FEW_SINGLES else None,
            )
        return fr


def _grid_pairs(grid: BoxGrid, m: np.ndarray, t: np.ndarray, w: np.ndarray):
    """``(row, polygon)``: for each window ``w[row]``, the polygons the bucket grid
    puts near it with the cell placed by ``m`` and ``t[row]`` (a superset of
    those whose placed box meets it; ``BoxGrid.candidates`` for many windows)."""
    grow = np.abs(m) @ grid.reach
    eps = 1e-9 * np.maximum(1.0, np.abs(w).max(axis=1)) + 1e-6
    gx, gy = grow[0] + eps, grow[1] + eps
    x0, y0, x1, y1 = w[:, 0] - gx, w[:, 1] - gy, w[:, 2] + gx, w[:, 3] + gy
    corners = np.stack(
        [np.stack(c, axis=1) for c in ((x0, y0), (x1, y0), (x1, y1), (x0, y1))], axis=1
    )
    local = (corners - t[:, None, :]) @ np.linalg.inv(m).T
    pad = 1e-9 * np.maximum(1.0, np.abs(local).max(axis=1)) + 1e-6
    lo, hi = local.min(axis=1) - pad, local.max(axis=1) + pad
    top = grid.lo + grid.step * grid.g
    near = ~((hi < grid.lo).any(axis=1) | (lo > top).any(axis=1))
    g = grid.g
    a = np.clip(np.floor((lo - grid.lo) / grid.step), 0, g - 1).astype(np.int64)
    b = np.clip(np.floor((hi - grid.lo) / grid.step), 0, g - 1).astype(np.int64)
    win = np.flatnonzero(near)
    rows_of, row = _ranges(a[win, 1], b[win, 1] - a[win, 1] + 1)
    win = win[rows_of]
    first = grid.starts[row * g + a[win, 0]]
    last = grid.starts[row * g + b[win, 0] + 1]
    at, pos = _ranges(first, last - first)
    return win[at], grid.order[pos]
