"""Polygons -> features: outlines with touching and overlapping shapes merged, as oriented edges."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pitchguard.geometry.spatial import build_rtree, components, query_pairs_batched
from pitchguard.layout.polygons import PolygonSet


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


def _cancel_shared_edges(a, b, feat, n_features: int, grid_nm: float, renumber=None):
    """Remove the parts of boundary that two outlines (or one outline with itself)
    run over in opposite directions, and join the outlines that met there.

    The union engine leaves shapes that only share a stretch of edge (a T or L
    junction, abutting pieces, a self-touching polygon) as separate outlines;
    on the wafer they print as one piece.  On each line, boundary runs with the
    material on opposite sides cancel where they overlap; what is left is the
    outline of the merged feature.  Exact on the database grid: lines are
    keyed by integer direction and offset.  Returns the edges, their feature
    ids (``renumber``, the feature ids of edges left out of the call, first,
    then these edges'), and the number of features.
    """
    other = np.zeros(0, dtype=feat.dtype) if renumber is None else renumber
    q = np.round(a / grid_nm).astype(np.int64)
    r = np.round(b / grid_nm).astype(np.int64)
    d = r - q
    g = np.gcd(np.abs(d[:, 0]), np.abs(d[:, 1]))
    g = np.where(g == 0, 1, g)
    u = d // g[:, None]
    # Canonical direction (first nonzero component positive); sign: the edge's way.
    flip = (u[:, 0] < 0) | ((u[:, 0] == 0) & (u[:, 1] < 0))
    sign = np.where(flip, -1, 1)
    u = np.where(flip[:, None], -u, u)
    offset = u[:, 1] * q[:, 0] - u[:, 0] * q[:, 1]
    t0 = u[:, 0] * q[:, 0] + u[:, 1] * q[:, 1]
    t1 = u[:, 0] * r[:, 0] + u[:, 1] * r[:, 1]
    lo, hi = np.minimum(t0, t1), np.maximum(t0, t1)
    key = np.stack([u[:, 0], u[:, 1], offset], axis=1)
    _, line = np.unique(key, axis=0, return_inverse=True)
    line = line.ravel()
    # Lines that hold runs both ways are the only candidates.
    both = np.zeros(line.max() + 1, dtype=np.int8)
    np.bitwise_or.at(both, line, np.where(sign > 0, 1, 2).astype(np.int8))
    cand = np.flatnonzero(both[line] == 3)
    if len(cand) == 0:
        return a, b, np.concatenate([other, feat]), n_features
    parent = np.arange(n_features)

    def root(x: int) -> int:
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    drop = np.zeros(len(a), dtype=bool)
    new_a, new_b, new_f = [], [], []
    order = cand[np.argsort(line[cand], kind="stable")]
    groups = np.split(order, np.flatnonzero(np.diff(line[order])) + 1)
    for grp in groups:
        lo_g, hi_g, s_g = lo[grp], hi[grp], sign[grp]
        cuts = np.unique(np.concatenate([lo_g, hi_g]))
        if len(cuts) < 2:
            continue
        left, right = cuts[:-1], cuts[1:]
        # Per elementary piece: the edges covering it, each way.
        cover = (lo_g[:, None] <= left[None, :]) & (hi_g[:, None] >= right[None, :])
        fwd = cover & (s_g[:, None] > 0)
        bwd = cover & (s_g[:, None] < 0)
        shared = fwd.any(axis=0) & bwd.any(axis=0)
        if not shared.any():
            continue
        for k in np.flatnonzero(shared).tolist():
            fa = feat[grp[np.flatnonzero(fwd[:, k])[0]]]
            fb = feat[grp[np.flatnonzero(bwd[:, k])[0]]]
            ra, rb = root(int(fa)), root(int(fb))
            if ra != rb:
                parent[max(ra, rb)] = min(ra, rb)
        # The group's edges are replaced by the pieces covered one way only.
        drop[grp] = True
        ux, uy = int(u[grp[0], 0]), int(u[grp[0], 1])
        off = int(offset[grp[0]])
        norm2 = ux * ux + uy * uy
        for k in range(len(left)):
            if shared[k] or not cover[:, k].any():
                continue
            e = grp[np.flatnonzero(cover[:, k])[0]]
            # The point at parameter t on the line: (t u + off (uy, -ux)) / |u|^2.
            pa = np.array([left[k] * ux + off * uy, left[k] * uy - off * ux]) / norm2
            pb = np.array([right[k] * ux + off * uy, right[k] * uy - off * ux]) / norm2
            if sign[e] < 0:
                pa, pb = pb, pa
            new_a.append(pa * grid_nm)
            new_b.append(pb * grid_nm)
            new_f.append(feat[e])
    if not drop.any():
        return a, b, np.concatenate([other, feat]), n_features
    keep = ~drop
    a = np.concatenate([a[keep], np.array(new_a).reshape(-1, 2)])
    b = np.concatenate([b[keep], np.array(new_b).reshape(-1, 2)])
    feat = np.concatenate([feat[keep], np.array(new_f, dtype=feat.dtype)])
    roots = np.array([root(x) for x in range(n_features)])
    _, renum = np.unique(roots, return_inverse=True)
    renum = renum.ravel()
    return a, b, renum[np.concatenate([other, feat])], int(renum.max()) + 1


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
    qi, qj = query_pairs_batched(build_rtree(lo, hi), lo, hi, lo, hi)
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
        # Only merged outlines and polygons other than rectangles can share or
        # retrace a stretch of boundary (a lone rectangle touches nothing).
        rect = np.zeros(n_features, dtype=bool)
        rect[: len(singles)] = np.diff(singles.starts) == 4
        plain = rect[feat]
        if not plain.all():
            ca, cb, cf, n_features = _cancel_shared_edges(
                a[~plain], b[~plain], feat[~plain], n_features, grid_nm, renumber=feat[plain]
            )
            a = np.concatenate([a[plain], ca])
            b = np.concatenate([b[plain], cb])
            feat = cf
    if len(a):
        a, b, feat = _join_straight(a, b, feat, grid_nm)
    return Edges(a, b, feat, n_features)
