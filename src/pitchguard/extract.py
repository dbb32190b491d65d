"""Extract 1-D line/space sites from the polygons of one layer.

Pipeline (all in nm, as drawn):

1. **Features.**  Shapes whose bounding boxes touch are grouped through an
   R-tree; groups of more than one shape are merged with a boolean OR, so a
   line drawn as two abutting rectangles is one feature.  Edges that come back
   twice in opposite directions (the cut lines that join a hole to its outer
   boundary) are dropped, and collinear edges that meet end to end are joined.
2. **Edges.**  Every boundary is oriented with the material on its left, so
   the outward normal of an edge with unit direction ``d`` is ``(d_y, -d_x)``.
   Edges shorter than ``min_run_nm`` are 2-D (line ends, jogs): counted, not
   judged.
3. **Facing edges.**  For every long edge an R-tree query returns the edges
   within ``ambit_nm`` on either side.  Going outward from an edge the first
   boundary crossed is the facing edge of the neighbour (the *space*); going
   inward it is the feature's own far side (the *width*).  Both are
   antiparallel to the edge.  Where one neighbour faces the whole edge and no
   other edge is nearer (the usual case in arrays) this is decided with numpy
   for all edges at once; elsewhere the edge is cut into pieces, each with its
   own nearest facing edge.  A piece whose nearest neighbour is not parallel,
   or that is shorter than ``min_run_nm``, is 2-D.

A *site* is one such piece: an edge interval with its width and space.  Its
pitch is ``width + space``.  A space or width with nothing within the ambit
is ``inf`` (isolated edge, or edge of a wide feature).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import rtree

from pitchguard.layout import PolygonSet

PARALLEL_SIN = math.sin(math.radians(1.0))
"""Edges within 1 degree of parallel count as parallel (grid snapping of
rotated geometry tilts short edges by a fraction of a degree)."""

SITE_CELL_NM = 10_000.0
"""Site pieces are cut at this global grid (drawn nm), see :func:`find_sites`."""

QUERY_CHUNK = 100_000
"""Edges queried against the R-tree per numpy batch (bounds peak memory)."""


RTREE_CAPACITY = 16
"""Node capacity of the R-trees.  A bulk self-query of 10^6 line-shaped boxes
took 3.3 s against 6.5 s with the library default of 100; end to end on the
10^6-shape benchmark the two settings were within run-to-run noise."""


def components(n: int, a: np.ndarray, b: np.ndarray) -> tuple[int, np.ndarray]:
    """Connected components of the undirected graph on nodes ``0..n-1`` with
    edges ``a[k]``-``b[k]``: ``(count, label)``, components numbered in the
    order of their smallest node (as scipy.sparse.csgraph numbers them).

    Hooking and pointer jumping on whole arrays: each round hooks every root
    that an edge joins to a smaller root onto the smallest such root, then
    points every node straight at its root; edges inside one component are
    dropped.  Every root left with an edge has a neighbour that hooked, so
    the roots still to merge at least halve per round.  Written here because
    scipy's version was the only use of scipy.sparse in a scan, and importing
    it cost 0.13 s in every scan (it pulls in scipy.linalg); the test checks
    this one against scipy's.
    """
    parent = np.arange(n, dtype=np.intp)
    a = np.asarray(a, dtype=np.intp)
    b = np.asarray(b, dtype=np.intp)
    while len(a):
        ra, rb = parent[a], parent[b]  # roots: parent is flat between rounds
        apart = ra != rb
        if not apart.all():
            ra, rb = ra[apart], rb[apart]
        if not len(ra):
            break
        a, b = np.minimum(ra, rb), np.maximum(ra, rb)  # edges between roots
        np.minimum.at(parent, b, a)  # parent[x] <= x always: no cycles
        while True:
            up = parent[parent]
            if np.array_equal(up, parent):
                break
            parent = up
    roots, label = np.unique(parent, return_inverse=True)
    return len(roots), label.reshape(-1)


def _rtree(mins: np.ndarray, maxs: np.ndarray) -> rtree.index.Index:
    ids = np.arange(len(mins), dtype=np.int64)
    prop = rtree.index.Property()
    prop.leaf_capacity = RTREE_CAPACITY
    prop.index_capacity = RTREE_CAPACITY
    prop.fill_factor = 0.9
    return rtree.index.Index(
        (ids, np.ascontiguousarray(mins), np.ascontiguousarray(maxs)), properties=prop
    )


def _query_pairs(index, mins, maxs) -> tuple[np.ndarray, np.ndarray]:
    """All (query, hit) pairs of a bulk R-tree query, as two int64 arrays."""
    hits, counts = index.intersection_v(np.ascontiguousarray(mins), np.ascontiguousarray(maxs))
    q = np.repeat(np.arange(len(mins), dtype=np.int64), counts.astype(np.int64))
    return q, hits.astype(np.int64)


BATCH_MAX = 8
"""Query boxes answered by one R-tree query in :func:`_query_pairs_batched`."""


def _query_pairs_batched(index, item_lo, item_hi, mins, maxs) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_query_pairs` for many boxes in rows, at a fraction of the cost.

    An R-tree query costs about 3 us whatever it returns and about 0.15 us per
    item found (measured with the rtree package on this project's edge
    trees).  The boxes of an array's edges and cuts come in rows: the same
    extent in y (or x), one after another in x (or y).  Up to
    :data:`BATCH_MAX` such neighbours are queried as one box covering them
    (a batch spans at most one box's width plus height), and each item found
    is kept for each box it touches (closed intervals, the R-tree's own
    test), so the pairs are exactly those of one query per box, in another
    order.  ``item_lo``/``item_hi`` are the boxes the tree was built from.
    """
    n = len(mins)
    if n < 2 * BATCH_MAX:
        return _query_pairs(index, mins, maxs)
    mins = np.ascontiguousarray(mins, dtype=np.float64)
    maxs = np.ascontiguousarray(maxs, dtype=np.float64)
    batch = np.full(n, -1, dtype=np.int64)
    n_batches = 0
    for shared in (1, 0):  # rows sharing their y extent, then their x extent
        free = np.flatnonzero(batch < 0)
        if len(free) < 2:
            break
        other = 1 - shared
        lo_s, hi_s = mins[free, shared], maxs[free, shared]
        lo_o = mins[free, other]
        span = (maxs[free, 0] - mins[free, 0]) + (maxs[free, 1] - mins[free, 1])
        order = np.lexsort((lo_o, hi_s, lo_s))
        lo_s, hi_s, lo_o, span = lo_s[order], hi_s[order], lo_o[order], span[order]
        same = (lo_s[1:] == lo_s[:-1]) & (hi_s[1:] == hi_s[:-1])
        same &= lo_o[1:] - lo_o[:-1] <= span[:-1]
        row_new = np.r_[True, ~same]
        row_start = np.flatnonzero(row_new)
        row_len = np.diff(np.r_[row_start, len(order)])
        first = np.repeat(row_start, row_len)
        pos = np.arange(len(order)) - first
        # Within a row: at most BATCH_MAX a batch, spanning at most one box's span.
        step = np.floor((lo_o - lo_o[first]) / np.maximum(span[first], 1e-9)).astype(np.int64)
        key_new = np.r_[
            True, (pos[1:] // BATCH_MAX != pos[:-1] // BATCH_MAX) | (step[1:] != step[:-1])
        ]
        new = row_new | key_new
        bid = np.cumsum(new) - 1
        size = np.bincount(bid)
        if shared == 1:
            # Lone boxes wait for the other direction.
            take = size[bid] > 1
            bid = np.unique(bid[take], return_inverse=True)[1].ravel()
            batch[free[order[take]]] = n_batches + bid
            n_batches += int(bid.max(initial=-1)) + 1
        else:
            batch[free[order]] = n_batches + bid
            n_batches += int(bid[-1]) + 1
    left = np.flatnonzero(batch < 0)  # at most one box
    batch[left] = n_batches + np.arange(len(left))
    order = np.argsort(batch, kind="stable")
    starts = np.flatnonzero(np.r_[True, batch[order][1:] != batch[order][:-1]])
    bmin = np.minimum.reduceat(mins[order], starts)
    bmax = np.maximum.reduceat(maxs[order], starts)
    bq, hit = _query_pairs(index, bmin, bmax)
    # Each hit of a batch, for each member of the batch; keep those that touch.
    members = np.diff(np.r_[starts, n])
    rep = members[bq]
    k = np.repeat(np.arange(len(bq)), rep)
    offset = np.arange(len(k)) - np.repeat(np.cumsum(rep) - rep, rep)
    q = order[starts[bq[k]] + offset]
    j = hit[k]
    keep = (item_lo[j, 0] <= maxs[q, 0]) & (item_hi[j, 0] >= mins[q, 0])
    keep &= (item_lo[j, 1] <= maxs[q, 1]) & (item_hi[j, 1] >= mins[q, 1])
    return q[keep], j[keep]


# --------------------------------------------------------------------------- features


@dataclass(frozen=True)
class Edges:
    """Boundary edges of the merged features of one layer (material on the left)."""

    a: np.ndarray  # (n, 2) start points
    b: np.ndarray  # (n, 2) end points
    feature: np.ndarray  # (n,) feature id
    n_features: int

    def __len__(self) -> int:
        return len(self.feature)

    @property
    def length(self) -> np.ndarray:
        return np.hypot(*(self.b - self.a).T)


def _signed_areas(ps: PolygonSet) -> np.ndarray:
    p = ps.points
    s = ps.starts[:-1]
    nxt = np.arange(len(p)) + 1
    nxt[ps.starts[1:] - 1] = s  # last vertex of each polygon wraps to its first
    cross = p[:, 0] * p[nxt, 1] - p[nxt, 0] * p[:, 1]
    return 0.5 * np.add.reduceat(cross, s)


def _ring_edges(ps: PolygonSet, ring_feature: np.ndarray, reverse: np.ndarray):
    """Edges of every ring of ``ps``; rings flagged in ``reverse`` are walked backwards."""
    p = ps.points
    starts = ps.starts
    sizes = np.diff(starts)
    owner = np.repeat(np.arange(len(sizes)), sizes)
    nxt = np.arange(len(p)) + 1
    nxt[starts[1:] - 1] = starts[:-1]
    a = p
    b = p[nxt]
    flip = reverse[owner]
    a2 = np.where(flip[:, None], b, a)
    b2 = np.where(flip[:, None], a, b)
    return a2, b2, ring_feature[owner]


def _point_ids(*point_sets: np.ndarray, grid_nm: float) -> list[np.ndarray]:
    """Integer id per point, equal for points on the same spot (to 1e-3 grid)."""
    q = 1.0 / max(grid_nm * 1e-3, 1e-9)
    allp = np.round(np.concatenate(point_sets) * q).astype(np.int64)
    order = np.lexsort((allp[:, 1], allp[:, 0]))
    sp = allp[order]
    new = np.concatenate([[True], np.any(sp[1:] != sp[:-1], axis=1)])
    ids = np.empty(len(allp), dtype=np.int64)
    ids[order] = np.cumsum(new) - 1
    sizes = np.cumsum([len(p) for p in point_sets])[:-1]
    return np.split(ids, sizes)


def _drop_cut_lines(a, b, grid_nm):
    """Keep-mask dropping edge pairs that run over one segment in opposite directions."""
    ia, ib = _point_ids(a, b, grid_nm=grid_nm)
    lo, hi = np.minimum(ia, ib), np.maximum(ia, ib)
    fwd = ia < ib
    order = np.lexsort((fwd, hi, lo))
    lo_s, hi_s, fwd_s = lo[order], hi[order], fwd[order]
    pair = (lo_s[1:] == lo_s[:-1]) & (hi_s[1:] == hi_s[:-1]) & (fwd_s[1:] != fwd_s[:-1])
    cut = np.zeros(len(a), dtype=bool)
    cut[order[1:][pair]] = True
    cut[order[:-1][pair]] = True
    return ~cut


def _join_straight(a, b, feat, grid_nm):
    """Join consecutive edges of one feature that continue in a straight line.

    Edge ``k`` is joined to the edge that starts where it ends when both point
    the same way and the shared vertex lies within 0.75 grid of the chord (grid
    snapping after rotation, or a vertex left where a hole's cut line was
    removed, would otherwise split one long edge into pieces).
    """
    sa, sb = _point_ids(a, b, grid_nm=grid_nm)
    order = np.argsort(sa, kind="stable")
    sa_sorted = sa[order]
    pos = np.searchsorted(sa_sorted, sb)
    pos_c = np.minimum(pos, len(sa) - 1)
    found = sa_sorted[pos_c] == sb
    # Only a vertex where exactly one edge starts is unambiguous.
    unique_start = np.ones(len(sa), dtype=bool)
    dup = np.concatenate([[False], sa_sorted[1:] == sa_sorted[:-1]])
    dup_any = dup | np.concatenate([dup[1:], [False]])
    unique_start[order] = ~dup_any
    nxt = np.where(found, order[pos_c], -1)
    ok = (nxt >= 0) & (nxt != np.arange(len(a)))
    ok[ok] &= unique_start[nxt[ok]] & (feat[nxt[ok]] == feat[ok])
    if not ok.any():
        return a, b, feat
    idx = np.flatnonzero(ok)
    da = b[idx] - a[idx]
    dn = b[nxt[idx]] - a[nxt[idx]]
    chord = b[nxt[idx]] - a[idx]
    clen = np.hypot(chord[:, 0], chord[:, 1])
    dev = np.abs(chord[:, 0] * da[:, 1] - chord[:, 1] * da[:, 0]) / np.maximum(clen, 1e-12)
    straight = (np.einsum("ij,ij->i", da, dn) > 0) & (dev <= 0.75 * grid_nm)
    link = np.full(len(a), -1, dtype=np.int64)
    link[idx[straight]] = nxt[idx[straight]]
    if (link < 0).all():
        return a, b, feat
    has_in = np.zeros(len(a), dtype=bool)
    has_in[link[link >= 0]] = True
    keep_a, keep_b, keep_f = [], [], []
    done = np.zeros(len(a), dtype=bool)
    heads = np.flatnonzero((link >= 0) & ~has_in).tolist()
    tol = 0.75 * grid_nm
    for h in heads:
        start = a[h]
        cur = h
        verts = [a[h]]
        done[h] = True
        while link[cur] >= 0 and not done[link[cur]]:
            cand = link[cur]
            chord = b[cand] - start
            clen = math.hypot(chord[0], chord[1])
            inner = np.array(verts[1:] + [b[cur]]) - start
            devs = np.abs(chord[0] * inner[:, 1] - chord[1] * inner[:, 0]) / max(clen, 1e-12)
            if devs.max() > tol:
                break
            verts.append(b[cur])
            cur = cand
            done[cur] = True
        keep_a.append(start)
        keep_b.append(b[cur])
        keep_f.append(feat[h])
        if link[cur] >= 0 and not done[link[cur]]:
            heads.append(int(link[cur]))  # chain broke: the rest starts a new chain
            has_in[link[cur]] = False
    rest = ~done
    a2 = np.concatenate([a[rest], np.array(keep_a).reshape(-1, 2)])
    b2 = np.concatenate([b[rest], np.array(keep_b).reshape(-1, 2)])
    f2 = np.concatenate([feat[rest], np.array(keep_f, dtype=feat.dtype)])
    return a2, b2, f2


MERGE_BATCH = 512
"""Shapes per boolean call: one call on 10^5 shapes took 6.2 s, batches of whole
groups take a fraction of that (the union's cost grows faster than linearly)."""


def _merge_groups(ps: PolygonSet, idx: np.ndarray, group: np.ndarray, grid_nm: float):
    """Boolean OR of touching shapes, in batches of whole groups."""
    import gdstk

    order = np.argsort(group, kind="stable")
    idx, group = idx[order], group[order]
    starts = np.flatnonzero(np.concatenate([[True], group[1:] != group[:-1]]))
    out = []
    lo = 0
    while lo < len(idx):
        # Extend the batch to MERGE_BATCH shapes, then to the end of that group.
        k = np.searchsorted(starts, lo + MERGE_BATCH, side="left")
        hi = int(starts[k]) if k < len(starts) else len(idx)
        hi = max(hi, lo + 1)
        polys = [gdstk.Polygon(ps.polygon(m)) for m in idx[lo:hi].tolist()]
        out.extend(q.points for q in gdstk.boolean(polys, [], "or", precision=grid_nm))
        lo = hi
    return PolygonSet.from_arrays(out)


def build_features(ps: PolygonSet, grid_nm: float) -> Edges:
    """Merge touching shapes into features and return their oriented edges."""

    n = len(ps)
    if n == 0:
        z = np.zeros((0, 2))
        return Edges(z, z, np.zeros(0, dtype=np.int64), 0)
    boxes = ps.bounding_boxes()
    eps = grid_nm * 0.25
    lo, hi = boxes[:, :2] - eps, boxes[:, 2:] + eps
    qi, qj = _query_pairs_batched(_rtree(lo, hi), lo, hi, lo, hi)
    keep = qi < qj
    qi, qj = qi[keep], qj[keep]
    n_comp, label = components(n, qi, qj)
    comp_size = np.bincount(label, minlength=n_comp)
    single = comp_size[label] == 1

    # Shapes that touch nothing are features as drawn; orient them counter-clockwise.
    singles = ps.select(single)
    area = _signed_areas(singles) if len(singles) else np.zeros(0)
    ok = np.abs(area) > 0
    if not ok.all():
        singles = singles.select(ok)
        area = area[ok]
    a1, b1, f1 = _ring_edges(singles, np.arange(len(singles), dtype=np.int64), area < 0)

    # Groups of touching shapes are merged; the result is oriented (outer CCW, holes CW).
    multi_idx = np.flatnonzero(~single)
    parts = [a1[:0]], [b1[:0]], [f1[:0]]
    n_features = len(singles)
    if len(multi_idx):
        mset = _merge_groups(ps, multi_idx, label[multi_idx], grid_nm)
        marea = _signed_areas(mset)
        a2, b2, f2 = _ring_edges(mset, np.arange(len(mset), dtype=np.int64) + n_features, marea < 0)
        n_features += len(mset)
        parts = [a1, a2], [b1, b2], [f1, f2]
    else:
        parts = [a1], [b1], [f1]
    a = np.concatenate(parts[0])
    b = np.concatenate(parts[1])
    feat = np.concatenate(parts[2])
    nonzero = np.hypot(*(b - a).T) > grid_nm * 1e-3
    a, b, feat = a[nonzero], b[nonzero], feat[nonzero]
    keep = _drop_cut_lines(a, b, grid_nm)
    a, b, feat = a[keep], b[keep], feat[keep]
    if len(a):
        a, b, feat = _join_straight(a, b, feat, grid_nm)
    return Edges(a, b, feat, n_features)


# --------------------------------------------------------------------------- sites


@dataclass
class Sites:
    """1-D sites of one layer, one row per edge piece (struct of arrays)."""

    edge: np.ndarray  # index into Edges
    feature: np.ndarray
    u0: np.ndarray  # piece start along the edge, nm from the edge start
    u1: np.ndarray
    origin: np.ndarray  # (n, 2) edge start point
    direction: np.ndarray  # (n, 2) unit direction of the edge (material on the left)
    width: np.ndarray  # nm, inf when the far side is beyond the ambit
    space: np.ndarray  # nm, inf when no neighbour within the ambit

    def __len__(self) -> int:
        return len(self.edge)

    @property
    def pitch(self) -> np.ndarray:
        return self.width + self.space

    @property
    def run(self) -> np.ndarray:
        return self.u1 - self.u0

    @property
    def normal(self) -> np.ndarray:
        """Outward unit normal (towards the space)."""
        return np.stack([self.direction[:, 1], -self.direction[:, 0]], axis=1)

    @property
    def orientation_deg(self) -> np.ndarray:
        """Direction of the lines in degrees, 0 <= angle < 180 (0: lines along x)."""
        ang = np.degrees(np.arctan2(self.direction[:, 1], self.direction[:, 0])) % 180.0
        return np.where(ang >= 180.0 - 1e-9, 0.0, ang)

    def corners(self) -> np.ndarray:
        """``(n, 4, 2)``: the rectangle from the far side of the line to the neighbour.

        Infinite width or space is clipped to zero (the rectangle then covers
        only the finite side).
        """
        w = np.where(np.isfinite(self.width), self.width, 0.0)
        s = np.where(np.isfinite(self.space), self.space, 0.0)
        d, nrm, o = self.direction, self.normal, self.origin
        p0 = o + d * self.u0[:, None]
        p1 = o + d * self.u1[:, None]
        return np.stack(
            [
                p0 - nrm * w[:, None],
                p1 - nrm * w[:, None],
                p1 + nrm * s[:, None],
                p0 + nrm * s[:, None],
            ],
            axis=1,
        )

    def midpoints(self) -> np.ndarray:
        return self.origin + self.direction * (0.5 * (self.u0 + self.u1))[:, None]

    def take(self, idx) -> Sites:
        return Sites(*(getattr(self, f)[idx] for f in _SITE_FIELDS))

    @classmethod
    def concat(cls, parts: list[Sites]) -> Sites:
        return cls(*(np.concatenate([getattr(p, f) for p in parts]) for f in _SITE_FIELDS))

    @classmethod
    def empty(cls) -> Sites:
        z = np.zeros(0)
        zi = np.zeros(0, dtype=np.int64)
        return cls(zi, zi, z, z, np.zeros((0, 2)), np.zeros((0, 2)), z, z)


_SITE_FIELDS = ("edge", "feature", "u0", "u1", "origin", "direction", "width", "space")


@dataclass
class ExtractStats:
    """Counts a scan reports besides its findings."""

    shapes: int = 0
    features: int = 0
    edges: int = 0
    short_edges: int = 0  # edges below min_run: 2-D, not judged
    pieces_2d: int = 0  # pieces of long edges that are 2-D (non-parallel neighbour, short)
    sites: int = 0
    isolated_sites: int = 0  # no neighbour within the ambit
    extra: dict = field(default_factory=dict)

    def add(self, other: ExtractStats, times: int = 1) -> None:
        """Add ``other``'s counts ``times`` over (a tile reused on ``times`` tiles)."""
        for k in (
            "shapes",
            "features",
            "edges",
            "short_edges",
            "pieces_2d",
            "sites",
            "isolated_sites",
        ):
            setattr(self, k, getattr(self, k) + times * getattr(other, k))
        for k, v in other.extra.items():
            self.extra[k] = self.extra.get(k, 0) + times * v


_INF = math.inf


def _envelope(length: float, cands: list[tuple], eps: float) -> list[tuple]:
    """Nearest candidate along an edge, as pieces ``(u0, u1, dist, facing, j)``.

    ``cands`` rows are ``(lo, hi, dist, facing, j)``: candidate ``j`` covers
    ``[lo, hi]`` of the edge at distance ``dist``; ``facing`` is False for an
    edge that is not antiparallel (a 2-D blocker).
    """
    cuts = {0.0, length}
    for lo, hi, *_ in cands:
        cuts.add(min(max(lo, 0.0), length))
        cuts.add(min(max(hi, 0.0), length))
    pts = sorted(cuts)
    out: list[tuple] = []
    for u0, u1 in zip(pts[:-1], pts[1:], strict=True):
        if u1 - u0 <= eps:
            continue
        mid = 0.5 * (u0 + u1)
        # Nearest first; on a tie a facing edge, then by place along the edge:
        # never by the order the candidates were found in (a tile's spatial
        # index returns them in another order than the whole layout's).
        best = (_INF, True, -1)
        rank = (_INF, 1, 0.0, 0.0)
        for lo, hi, dist, facing, j in cands:
            if lo <= mid <= hi:
                r = (dist, 0 if facing else 1, lo, hi)
                if r < rank:
                    rank, best = r, (dist, facing, j)
        if out and out[-1][2:] == best and abs(out[-1][1] - u0) <= eps:
            out[-1] = (out[-1][0], u1, *best)
        else:
            out.append((u0, u1, *best))
    return out


class _EdgeFrames:
    """R-trees of all edges, one per orientation class, for tight bulk queries.

    An R-tree holds axis-aligned boxes, so the box swept by a 45 degree edge
    would hold many edges it never faces.  Edges are grouped by direction
    modulo 90 degrees (0.5 degree bins); each large group gets a tree of all
    edges turned so that the group's edges are axis-aligned, and is queried
    with exact boxes in that frame.  Small groups share the unturned tree.
    """

    MIN_GROUP = 2000

    def __init__(self, a: np.ndarray, b: np.ndarray, d: np.ndarray, eps: float):
        self.a, self.b, self.eps = a, b, eps
        ang = np.degrees(np.arctan2(d[:, 1], d[:, 0])) % 90.0
        key = np.round(ang * 2.0).astype(np.int64) % 180  # 0.5 degree bins, 90 == 0
        self.key = key
        counts = np.bincount(key, minlength=180)
        big = np.flatnonzero(counts >= self.MIN_GROUP)
        self.turn = {int(k): math.radians(k / 2.0) for k in big}
        self.turn.setdefault(0, 0.0)
        self._trees: dict[int, rtree.index.Index] = {}
        self.boxes: dict[int, tuple[np.ndarray, np.ndarray]] = {}  # each tree's item boxes

    def _rotated(self, theta: float, pts: np.ndarray) -> np.ndarray:
        if theta == 0.0:
            return pts
        c, s_ = math.cos(-theta), math.sin(-theta)
        return pts @ np.array([[c, s_], [-s_, c]])

    def _tree(self, group: int) -> rtree.index.Index:
        if group not in self._trees:
            th = self.turn[group]
            ra, rb = self._rotated(th, self.a), self._rotated(th, self.b)
            lo, hi = np.minimum(ra, rb) - self.eps, np.maximum(ra, rb) + self.eps
            self._trees[group] = _rtree(lo, hi)
            self.boxes[group] = (lo, hi)
        return self._trees[group]

    def query(self, group: int, mins: np.ndarray, maxs: np.ndarray):
        """All (query, edge) pairs of boxes in ``group``'s frame (see _query_pairs_batched)."""
        tree = self._tree(group)
        return _query_pairs_batched(tree, *self.boxes[group], mins, maxs)

    def pairs(self, ids: np.ndarray, nrm: np.ndarray, window: float):
        """``(i, j)``: edges ``j`` touching the box of edge ``i`` swept by +-window."""
        group = np.where(np.isin(self.key[ids], list(self.turn)), self.key[ids], 0)
        out_i, out_j = [], []
        for g in np.unique(group).tolist():
            sel = ids[group == g]
            th = self.turn[g]
            sweep = nrm[sel] * window
            ends = np.stack(
                [self.a[sel] + sweep, self.a[sel] - sweep, self.b[sel] + sweep, self.b[sel] - sweep]
            )
            ends = self._rotated(th, ends.reshape(-1, 2)).reshape(ends.shape)
            qk, j = self.query(g, ends.min(axis=0), ends.max(axis=0))
            out_i.append(sel[qk])
            out_j.append(j)
        i = np.concatenate(out_i)
        j = np.concatenate(out_j)
        keep = i != j
        return i[keep], j[keep]


def _candidates(i, j, a, d, nrm, length, window, eps):
    """Project edges ``j`` into the frame of edges ``i``; keep those that bound ``i``.

    Returns ``(i, j, lo, hi, dist, side, facing)``: edge ``j`` covers
    ``[lo, hi]`` along ``i`` at distance ``dist`` on ``side`` (+1 outward,
    -1 inward); ``facing`` when ``j`` is antiparallel to ``i``.
    """
    b = a + d * length[:, None]
    di, ni, ai = d[i], nrm[i], a[i]
    pa = a[j] - ai
    pb = b[j] - ai
    ua = np.einsum("ij,ij->i", pa, di)
    ub = np.einsum("ij,ij->i", pb, di)
    va = np.einsum("ij,ij->i", pa, ni)
    vb = np.einsum("ij,ij->i", pb, ni)
    lo = np.maximum(np.minimum(ua, ub), 0.0)
    hi = np.minimum(np.maximum(ua, ub), length[i])
    # v of edge j at the ends of the overlap (linear along j).
    du = ub - ua
    with np.errstate(divide="ignore", invalid="ignore"):
        t_lo = np.where(np.abs(du) > 1e-12, (lo - ua) / du, 0.0)
        t_hi = np.where(np.abs(du) > 1e-12, (hi - ua) / du, 1.0)
    v_lo = va + t_lo * (vb - va)
    v_hi = va + t_hi * (vb - va)
    v_mid = 0.5 * (v_lo + v_hi)
    same_sign = np.sign(v_lo) == np.sign(v_hi)
    dist = np.where(same_sign, np.minimum(np.abs(v_lo), np.abs(v_hi)), 0.0)
    dj = d[j]
    cross = di[:, 0] * dj[:, 1] - di[:, 1] * dj[:, 0]
    dot = np.einsum("ij,ij->i", di, dj)
    parallel = np.abs(cross) < PARALLEL_SIN
    facing = parallel & (dot < 0)
    keep = (hi - lo > eps) & (dist <= window) & (np.abs(v_mid) > eps)
    # Same-direction parallel edges can never be the first boundary crossed, and
    # a parallel edge at distance ~0 is collinear with i: it bounds nothing across.
    keep &= ~(parallel & ((dot > 0) | (dist <= eps)))
    # Facing parallel edges use their mean distance (robust to tiny tilts).
    dist = np.where(facing, np.abs(v_mid), dist)
    side = np.where(v_mid > 0, 1, -1)
    return i[keep], j[keep], lo[keep], hi[keep], dist[keep], side[keep], facing[keep]


def _nearest_if_simple(ids, i, lo, hi, dist, side, facing, length, slack):
    """Per edge of ``ids`` and side: the distance when one facing edge bounds it all.

    Returns ``(width, space, found_w, found_s, any_w, any_s)``: ``found_*``
    when the nearest candidate on that side is facing, covers the whole edge
    (within ``slack``) and nothing is nearer; ``any_*`` when that side has a
    candidate at all.
    """
    n = len(ids)
    width = np.full(n, _INF)
    space = np.full(n, _INF)
    found = np.zeros(2 * n, dtype=bool)
    has = np.zeros(2 * n, dtype=bool)
    if len(i):
        pos = np.searchsorted(ids, i)
        key = pos * 2 + (side > 0)
        # Ties go to a facing edge, then to the one covering more of the edge, then
        # by place: never to the order the spatial index returned them in.
        order = np.lexsort((lo, lo - hi, ~facing, dist, key))
        key_s = key[order]
        first = order[np.concatenate([[True], key_s[1:] != key_s[:-1]])]
        fk = key[first]
        has[fk] = True
        covers = facing[first] & (lo[first] <= slack) & (hi[first] >= length[i[first]] - slack)
        found[fk[covers]] = True
        is_space = (fk % 2) == 1
        sel_s = covers & is_space
        sel_w = covers & ~is_space
        space[fk[sel_s] // 2] = dist[first[sel_s]]
        width[fk[sel_w] // 2] = dist[first[sel_w]]
    return width, space, found[0::2], found[1::2], has[0::2], has[1::2]


def find_sites(
    edges: Edges,
    min_run_nm: float,
    ambit_nm: float,
    grid_nm: float,
    first_window_nm: float | None = None,
    cell_nm: float | None = SITE_CELL_NM,
    region: tuple[float, float, float, float] | None = None,
) -> tuple[Sites, ExtractStats]:
    """Sites of all long edges: width, space and run length per edge piece.

    With ``region`` (x0, y0, x1, y1) only the sites whose midpoint lies in it
    (``x0 <= x < x1``, ``y0 <= y < y1``) are returned, and only edges that
    meet it are looked at; the other edges still bound them.  The counts are
    then of what the region owns: edges and 2-D pieces by their lowest-left
    end, features by their lowest-left vertex, so the regions of a tiling add
    up to the whole layout's counts.  (An edge read through a window may be
    cut short where shapes outside the window would have continued it; its
    ends inside the window are true ones, so its lowest-left end is the
    same in every window that holds it, unlike its midpoint.)

    Pieces are cut where they cross the lines ``x = k cell_nm`` and
    ``y = k cell_nm`` of a fixed global grid, so every piece lies in one grid
    cell: scans of tiles that are whole grid cells see exactly the pieces of
    a scan of the whole layout.

    Neighbours are looked for in two passes: first within ``first_window_nm``
    (default a third of the ambit; dense arrays are settled there with few
    candidates), then within the full ambit for the edges the first pass did
    not settle.
    """
    stats = ExtractStats(features=edges.n_features, edges=len(edges))
    if len(edges) == 0:
        return Sites.empty(), stats
    a, b = edges.a, edges.b
    vec = b - a
    length = np.hypot(vec[:, 0], vec[:, 1])
    d = vec / length[:, None]
    nrm = np.stack([d[:, 1], -d[:, 0]], axis=1)
    long_ = length >= min_run_nm
    eps = grid_nm * 0.5
    wanted = long_
    if region is not None:
        owned = in_region(_lowest_left(a, b), region)
        stats.edges = int(owned.sum())
        stats.short_edges = int((owned & ~long_).sum())
        stats.features = _features_owned(edges, region)
        x0, y0, x1, y1 = region
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        wanted = (
            long_
            & (hi[:, 0] >= x0 - eps)
            & (lo[:, 0] <= x1 + eps)
            & (hi[:, 1] >= y0 - eps)
            & (lo[:, 1] <= y1 + eps)
        )
    else:
        stats.short_edges = int((~long_).sum())
    slack = 4 * eps  # snapped rotated geometry may end a grid short of the corner
    frames = _EdgeFrames(a, b, d, eps)
    w1 = min(ambit_nm, first_window_nm if first_window_nm else ambit_nm / 3.0)

    parts: list[Sites] = []
    complex_rows: dict[int, list] = {}

    def settled_sites(ids, width, space) -> None:
        parts.append(
            Sites(
                edge=ids,
                feature=edges.feature[ids],
                u0=np.zeros(len(ids)),
                u1=length[ids],
                origin=a[ids],
                direction=d[ids],
                width=width,
                space=space,
            )
        )

    long_idx = np.flatnonzero(wanted)
    for c0 in range(0, len(long_idx), QUERY_CHUNK):
        ids = long_idx[c0 : c0 + QUERY_CHUNK]
        # Pass 1: a small window settles edges whose neighbours are close.
        cand = _candidates(*frames.pairs(ids, nrm, w1), a, d, nrm, length, w1, eps)
        width, space, fw, fs, _, _ = _nearest_if_simple(ids, *_pick(cand), length, slack)
        done = fw & fs
        settled_sites(ids[done], width[done], space[done])
        # Pass 2: the full ambit for the rest.
        rest = ids[~done]
        if len(rest) == 0:
            continue
        i, j, lo, hi, dist, side, facing = _candidates(
            *frames.pairs(rest, nrm, ambit_nm), a, d, nrm, length, ambit_nm, eps
        )
        width, space, fw, fs, hw, hs = _nearest_if_simple(
            rest, i, lo, hi, dist, side, facing, length, slack
        )
        simple = (fw | ~hw) & (fs | ~hs)  # a side with nothing at all is settled (inf)
        settled_sites(rest[simple], width[simple], space[simple])
        hard = np.zeros(len(length), dtype=bool)
        hard[rest[~simple]] = True
        sel = hard[i]
        for row in zip(
            i[sel].tolist(),
            side[sel].tolist(),
            lo[sel].tolist(),
            hi[sel].tolist(),
            dist[sel].tolist(),
            facing[sel].tolist(),
            j[sel].tolist(),
            strict=True,
        ):
            complex_rows.setdefault(row[0], []).append(row[1:])
        for e in rest[~simple].tolist():
            complex_rows.setdefault(e, [])

    pieces, flat = _resolve_complex(complex_rows, length, min_run_nm, eps)
    if region is not None and flat:
        e2 = np.array([p[0] for p in flat], dtype=np.int64)
        p0 = a[e2] + d[e2] * np.array([p[1] for p in flat])[:, None]
        p1 = a[e2] + d[e2] * np.array([p[2] for p in flat])[:, None]
        flat = np.flatnonzero(in_region(_lowest_left(p0, p1), region))
    stats.pieces_2d = len(flat)
    if pieces:
        e_arr = np.array([p[0] for p in pieces], dtype=np.int64)
        parts.append(
            Sites(
                edge=e_arr,
                feature=edges.feature[e_arr],
                u0=np.array([p[1] for p in pieces]),
                u1=np.array([p[2] for p in pieces]),
                origin=a[e_arr],
                direction=d[e_arr],
                width=np.array([p[3] for p in pieces]),
                space=np.array([p[4] for p in pieces]),
            )
        )
    sites = Sites.concat(parts) if parts else Sites.empty()
    if cell_nm:
        sites = _cut_at_cells(sites, cell_nm, eps)
    if region is not None and len(sites):
        sites = sites.take(np.flatnonzero(in_region(sites.midpoints(), region)))
    stats.sites = len(sites)
    stats.isolated_sites = int(np.isinf(sites.space).sum())
    return sites, stats


def _cut_at_cells(sites: Sites, cell: float, eps: float) -> Sites:
    """Split pieces where they cross the global grid lines ``x, y = k cell``."""
    if len(sites) == 0:
        return sites
    p0 = sites.origin + sites.direction * sites.u0[:, None]
    p1 = sites.origin + sites.direction * sites.u1[:, None]
    crosses = np.any(np.floor(p0 / cell) != np.floor(p1 / cell), axis=1)
    if not crosses.any():
        return sites
    rows = []
    for k in np.flatnonzero(crosses).tolist():
        o, d = sites.origin[k], sites.direction[k]
        u0, u1 = float(sites.u0[k]), float(sites.u1[k])
        cuts = set()
        for axis in (0, 1):
            if abs(d[axis]) < 1e-12:
                continue
            a, b = sorted((o[axis] + d[axis] * u0, o[axis] + d[axis] * u1))
            for line in range(int(np.floor(a / cell)) + 1, int(np.floor(b / cell)) + 1):
                u = (line * cell - o[axis]) / d[axis]
                if u0 + eps < u < u1 - eps:
                    cuts.add(u)
        bounds = [u0, *sorted(cuts), u1]
        rows.extend((k, a, b) for a, b in zip(bounds[:-1], bounds[1:], strict=True))
    keep = np.flatnonzero(~crosses)
    idx = np.array([r[0] for r in rows], dtype=np.int64)
    split = sites.take(idx)
    split.u0 = np.array([r[1] for r in rows])
    split.u1 = np.array([r[2] for r in rows])
    return Sites.concat([sites.take(keep), split])


def _pick(cand):
    """``(i, lo, hi, dist, side, facing)`` out of a :func:`_candidates` result."""
    i, _j, lo, hi, dist, side, facing = cand
    return i, lo, hi, dist, side, facing


def _resolve_complex(rows: dict, length, min_run_nm, eps) -> tuple[list[tuple], list[tuple]]:
    """Cut edges with several nearest neighbours into pieces (pure Python, rare).

    Returns ``(sites, flat)``: ``(e, u0, u1, width, space)`` of each 1-D piece
    long enough to judge, and ``(e, u0, u1)`` of each 2-D piece.
    """
    out = []
    flat = []
    for e, cands in rows.items():
        L = float(length[e])
        space_c = [(lo, hi, dist, fac, j) for s, lo, hi, dist, fac, j in cands if s > 0]
        width_c = [(lo, hi, dist, fac, j) for s, lo, hi, dist, fac, j in cands if s < 0]
        sp = _envelope(L, space_c, eps)
        wp = _envelope(L, width_c, eps)
        cuts = sorted(
            {p[0] for p in sp} | {p[1] for p in sp} | {p[0] for p in wp} | {p[1] for p in wp}
        )
        merged: list[list] = []
        for u0, u1 in zip(cuts[:-1], cuts[1:], strict=True):
            if u1 - u0 <= eps:
                continue
            mid = 0.5 * (u0 + u1)
            s = next((p for p in sp if p[0] <= mid <= p[1]), (0, 0, _INF, True, -1))
            w = next((p for p in wp if p[0] <= mid <= p[1]), (0, 0, _INF, True, -1))
            one_d = s[3] and w[3]
            tag = (one_d, w[2], s[2], w[4], s[4])
            if merged and merged[-1][2] == tag and abs(merged[-1][1] - u0) <= eps:
                merged[-1][1] = u1
            else:
                merged.append([u0, u1, tag])
        for u0, u1, (one_d, wd, sd, _, _) in merged:
            if one_d and u1 - u0 >= min_run_nm:
                out.append((e, u0, u1, wd, sd))
            elif u1 - u0 > 4 * eps:  # slivers of a grid or two are snapping noise
                flat.append((e, u0, u1))
    return out, flat


def _lowest_left(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Per row, the one of points ``p``, ``q`` with least x, then least y."""
    first = (p[:, 0] < q[:, 0]) | ((p[:, 0] == q[:, 0]) & (p[:, 1] <= q[:, 1]))
    return np.where(first[:, None], p, q)


def in_region(points: np.ndarray, region) -> np.ndarray:
    """Which ``points`` (n, 2) lie in ``region``: ``x0 <= x < x1``, ``y0 <= y < y1``."""
    x0, y0, x1, y1 = region
    x, y = points[:, 0], points[:, 1]
    return (x >= x0) & (x < x1) & (y >= y0) & (y < y1)


def _features_owned(edges: Edges, region) -> int:
    """Features whose lowest-left vertex (least x, then least y) lies in ``region``.

    A feature's lowest-left point is one of its vertices, the same whether the
    whole layout or a window around ``region`` was read (every shape touching
    a point inside the window is read), so each feature is counted in one
    region of a tiling.  A large concave feature cut by the window into parts
    can be counted once per part whose own lowest-left vertex is inside.
    """
    if len(edges) == 0:
        return 0
    order = np.lexsort((edges.a[:, 1], edges.a[:, 0], edges.feature))
    f = edges.feature[order]
    first = order[np.r_[True, f[1:] != f[:-1]]]
    return int(in_region(edges.a[first], region).sum())
