"""Lattice extraction, step 1: polygons -> compact features (see the package notes)."""

from __future__ import annotations

import numpy as np

from pitchguard.geometry.features import build_features
from pitchguard.geometry.lattice.common import (
    COMPACT,
    DEGENERATE,
    FRAME_CUT_DEG,
    HOLE,
    LARGE,
    NOT_MANHATTAN,
    SQRT2,
    TOL_GRID,
    cell_keys,
    dedupe_rows,
    expand_runs,
    first_per_group,
    row_dot,
)
from pitchguard.geometry.lattice.records import CompactFeatures, FeatureColumns
from pitchguard.geometry.spatial import build_rtree, components, query_pairs
from pitchguard.layout.polygons import PolygonSet


def _ring_properties(a: np.ndarray, b: np.ndarray, starts: np.ndarray, tol: float):
    """Properties of features given as edges ``a -> b`` grouped by feature
    (feature ``k``: rows ``starts[k]:starts[k + 1]``), any orientation.

    Returns centroid, size (w, h), angle_deg, area, bbox, centre, Manhattan flag.
    Coordinates are taken from each feature's lowest-left bounding corner so that
    chip-sized offsets do not cancel in the area sums.
    """
    s = starts[:-1]
    owner = np.repeat(np.arange(len(s)), np.diff(starts))
    lo = np.minimum.reduceat(np.minimum(a, b), s, axis=0)
    hi = np.maximum.reduceat(np.maximum(a, b), s, axis=0)
    la, lb = a - lo[owner], b - lo[owner]
    cross = la[:, 0] * lb[:, 1] - lb[:, 0] * la[:, 1]
    area2 = np.add.reduceat(cross, s)
    with np.errstate(invalid="ignore", divide="ignore"):
        cx = np.add.reduceat((la[:, 0] + lb[:, 0]) * cross, s) / (3.0 * area2)
        cy = np.add.reduceat((la[:, 1] + lb[:, 1]) * cross, s) / (3.0 * area2)
    centroid = lo + np.stack([cx, cy], axis=1)
    # Frame: length-weighted mean of 4 theta (edges modulo 90 degrees); exact for
    # edges along the axes or the diagonals.
    d = b - a
    l2 = row_dot(d, d)
    length = np.sqrt(l2)
    with np.errstate(invalid="ignore", divide="ignore"):
        c2 = np.where(l2 > 0, (d[:, 0] ** 2 - d[:, 1] ** 2) / l2, 0.0)
        s2 = np.where(l2 > 0, 2.0 * d[:, 0] * d[:, 1] / l2, 0.0)
    c4 = np.add.reduceat(length * (c2 * c2 - s2 * s2), s)
    s4 = np.add.reduceat(length * (2.0 * s2 * c2), s)
    phi = np.degrees(np.arctan2(s4, c4)) / 4.0  # (-45, 45]
    phi = np.where(phi <= FRAME_CUT_DEG - 90.0, phi + 90.0, phi)
    t = np.radians(phi)
    cu, su = np.cos(t), np.sin(t)
    # Axis frames exactly: cos and sin of 0 and 90 degrees without round-off.
    cu = np.where(phi == 0.0, 1.0, np.where(phi == 90.0, 0.0, cu))
    su = np.where(phi == 0.0, 0.0, np.where(phi == 90.0, 1.0, su))
    pu = la[:, 0] * cu[owner] + la[:, 1] * su[owner]
    pv = -la[:, 0] * su[owner] + la[:, 1] * cu[owner]
    u0, u1 = np.minimum.reduceat(pu, s), np.maximum.reduceat(pu, s)
    v0, v1 = np.minimum.reduceat(pv, s), np.maximum.reduceat(pv, s)
    size = np.stack([u1 - u0, v1 - v0], axis=1)
    um, vm = 0.5 * (u0 + u1), 0.5 * (v0 + v1)
    centre = lo + np.stack([um * cu - vm * su, um * su + vm * cu], axis=1)
    off = np.minimum(
        np.abs(d[:, 0] * cu[owner] + d[:, 1] * su[owner]),
        np.abs(-d[:, 0] * su[owner] + d[:, 1] * cu[owner]),
    )
    manhattan = np.maximum.reduceat(off, s) <= tol
    area = 0.5 * np.abs(area2)
    cols = FeatureColumns(centroid, size, phi, area, np.hstack([lo, hi]), centre)
    return cols, manhattan


def _quad_edges(ps: PolygonSet) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Edges of every polygon of ``ps`` as drawn, grouped by polygon."""
    p = ps.points
    nxt = np.arange(len(p)) + 1
    nxt[ps.starts[1:] - 1] = ps.starts[:-1]
    return p, p[nxt], ps.starts


def _quad_properties(qs: PolygonSet, tol: float):
    """:func:`_ring_properties` of four-vertex polygons, worked out once per distinct
    shape (vertices relative to the lowest-left bounding corner) and placed."""
    pts = qs.points.reshape(-1, 4, 2)
    lo = pts.min(axis=1)
    rel = (pts - lo[:, None, :]).reshape(-1, 8)
    rep, inv = dedupe_rows(rel)
    uniq = PolygonSet(rel[rep].reshape(-1, 2), np.arange(0, 4 * len(rep) + 1, 4))
    u, man = _ring_properties(*_quad_edges(uniq), tol)
    cols = FeatureColumns(
        lo + u.centroid[inv],
        u.size[inv],
        u.angle_deg[inv],
        u.area[inv],
        u.bbox[inv] + np.hstack([lo, lo]),
        lo + u.centre[inv],
    )
    return cols, man[inv]


def _overlapping_pairs(lo: np.ndarray, hi: np.ndarray, cell: float):
    """Pairs ``i < j`` of boxes that overlap or touch, each once.

    Boxes are filed in every cell of a square grid they cover; a pair is kept
    in the one cell holding the lower-left corner of their intersection."""
    n = len(lo)
    if n < 2:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    c0 = np.floor(lo / cell).astype(np.int64)
    c1 = np.floor(hi / cell).astype(np.int64)
    span = c1 - c0 + 1
    box, k = expand_runs(np.zeros(n, np.int64), span[:, 0] * span[:, 1])
    cx = c0[box, 0] + k % span[box, 0]
    cy = c0[box, 1] + k // span[box, 0]
    key, _ = cell_keys(cx, cy)
    order = np.argsort(key, kind="stable")
    key_s, box_s = key[order], box[order]
    cx_s, cy_s = cx[order], cy[order]
    new = np.r_[True, key_s[1:] != key_s[:-1]]
    gid = np.cumsum(new) - 1
    gstart = np.flatnonzero(new)
    gend = np.r_[gstart[1:], len(key_s)]
    after = gend[gid] - np.arange(len(key_s)) - 1
    qi, qj = expand_runs(np.arange(len(key_s)) + 1, after)
    a, b = box_s[qi], box_s[qj]
    keep = np.all(lo[a] <= hi[b], axis=1) & np.all(lo[b] <= hi[a], axis=1)
    corner = np.floor(np.maximum(lo[a], lo[b]) / cell).astype(np.int64)
    keep &= (corner[:, 0] == cx_s[qi]) & (corner[:, 1] == cy_s[qi])
    a, b = a[keep], b[keep]
    return np.minimum(a, b), np.maximum(a, b)


def _touching_large(lo, hi, small, large, block: float) -> np.ndarray:
    """Which boxes ``small`` (indices) touch one of the boxes ``large``.

    The R-tree holds the large boxes; it is queried once per block of small
    boxes (their common bounding box), not once per box."""
    hit_small = np.zeros(len(small), dtype=bool)
    if not len(large) or not len(small):
        return hit_small
    tree = build_rtree(lo[large], hi[large])
    centre = 0.5 * (lo[small] + hi[small])
    bk = np.floor(centre / block).astype(np.int64)
    bkey, _ = cell_keys(bk[:, 0], bk[:, 1])
    order = np.argsort(bkey, kind="stable")
    new = np.r_[True, bkey[order][1:] != bkey[order][:-1]]
    gstart = np.flatnonzero(new)
    gsize = np.diff(np.r_[gstart, len(order)])
    bmin = np.minimum.reduceat(lo[small][order], gstart, axis=0)
    bmax = np.maximum.reduceat(hi[small][order], gstart, axis=0)
    q, hit = query_pairs(tree, bmin, bmax)
    run, pos = expand_runs(gstart[q], gsize[q])
    s_local = order[pos]
    s_box, l_box = small[s_local], large[hit[run]]
    touch = np.all(lo[s_box] <= hi[l_box], axis=1) & np.all(lo[l_box] <= hi[s_box], axis=1)
    hit_small[s_local[touch]] = True
    return hit_small


def _ring_counts(a: np.ndarray, b: np.ndarray, feature: np.ndarray, n: int, grid_nm: float):
    """Closed rings per feature: components of the graph of edges joined end to start."""
    pts = np.round(np.concatenate([a, b]) / (grid_nm * 1e-3)).astype(np.int64)
    _, pid = np.unique(pts, axis=0, return_inverse=True)
    pid = pid.ravel()
    m = len(a)
    _, label = components(int(pid.max(initial=-1)) + 1, pid[:m], pid[m:])
    ring = label[pid[:m]]
    pairs = np.unique(np.stack([feature, ring], axis=1), axis=0)
    return np.bincount(pairs[:, 0], minlength=n)


def compact_features(
    ps: PolygonSet, grid_nm: float, max_extent_nm: float, tol_grid: float = TOL_GRID
) -> CompactFeatures:
    """Compact features of one layer: touching shapes merged, both frame extents
    below ``max_extent_nm``, Manhattan at some rotation (every edge within ``tol``
    of the frame's axes), no hole.

    Fast path: a shape whose box touches no other box and has four vertices is a
    feature as drawn; shapes whose box is at least ``sqrt(2) max_extent_nm`` wide
    cannot belong to a compact feature, nor can what touches them; the other
    groups of touching shapes are merged by :func:`build_features`.  The plain
    twin is :func:`compact_features_plain` (everything merged).
    """
    tol = tol_grid * grid_nm
    n = len(ps)
    feature_of = np.full(n, -1, dtype=np.int64)
    reason = np.full(n, LARGE, dtype=np.int8)
    if n == 0:
        return CompactFeatures(FeatureColumns.empty(), feature_of, reason)
    boxes = ps.bounding_boxes()
    eps = 0.25 * grid_nm  # as build_features: boxes this close touch
    lo, hi = boxes[:, :2] - eps, boxes[:, 2:] + eps
    extent = np.max(boxes[:, 2:] - boxes[:, :2], axis=1)
    large = extent >= SQRT2 * max_extent_nm
    small = np.flatnonzero(~large)
    large_idx = np.flatnonzero(large)
    # Cells of the typical size, but never under an eighth of the largest small box
    # (which is filed in every cell it covers).
    ext = extent[small]
    cell = max(float(np.median(ext)) if len(ext) else 1.0, ext.max(initial=0) / 8, 4 * grid_nm)
    pa, pb = _overlapping_pairs(lo[small], hi[small], cell)
    n_comp, label = components(len(small), pa, pb)
    bad = np.zeros(n_comp, dtype=bool)
    bad[label[_touching_large(lo, hi, small, large_idx, 64.0 * cell)]] = True
    comp_size = np.bincount(label, minlength=n_comp)
    nverts = np.diff(ps.starts)[small]
    quad = (comp_size[label] == 1) & (nverts == 4) & ~bad[label]
    rest = ~quad & ~bad[label]

    parts, manh, holes = [], [], []
    q_idx, r_idx = small[quad], small[rest]
    if len(q_idx):
        cols, man = _quad_properties(ps.take(q_idx), tol)
        parts.append(cols)
        manh.append(man)
        holes.append(np.zeros(len(q_idx), dtype=bool))
    if len(r_idx):
        edges = build_features(ps.take(r_idx), grid_nm)
        order = np.argsort(edges.feature, kind="stable")
        a, b, f = edges.a[order], edges.b[order], edges.feature[order]
        present = np.unique(f)
        starts = np.r_[np.searchsorted(f, present), len(f)]
        cols, man = _ring_properties(a, b, starts, tol)
        rings = _ring_counts(a, b, np.searchsorted(present, f), len(present), grid_nm)
        parts.append(cols)
        manh.append(man)
        holes.append(rings > 1)
    cols = FeatureColumns.joined(parts)
    man = np.concatenate(manh) if manh else np.zeros(0, bool)
    hole = np.concatenate(holes) if holes else np.zeros(0, bool)
    why = np.full(len(cols), COMPACT, dtype=np.int8)
    why[np.any(cols.size >= max_extent_nm, axis=1)] = LARGE
    why[(why == COMPACT) & ~man] = NOT_MANHATTAN
    why[(why == COMPACT) & hole] = HOLE
    why[(why == COMPACT) & ~(cols.area > 0)] = DEGENERATE
    keep = why == COMPACT
    new_index = np.cumsum(keep) - 1
    # Polygons to features: a lone shape is its feature (the first rows); a merged
    # shape belongs to the smallest merged feature whose box holds its box.
    nq = len(q_idx)
    held = _holding_box(boxes[r_idx], cols.bbox[nq:], eps)
    fid = np.r_[np.arange(nq), np.where(held >= 0, nq + held, -1)]
    idx = np.r_[q_idx, r_idx]
    found = fid >= 0
    reason[idx[~found]] = DEGENERATE
    idx, fid = idx[found], fid[found]
    reason[idx] = why[fid]
    feature_of[idx] = np.where(keep[fid], new_index[fid], -1)
    return CompactFeatures(cols.take(np.flatnonzero(keep)), feature_of, reason)


def _holding_box(inner: np.ndarray, outer: np.ndarray, eps: float) -> np.ndarray:
    """For each box of ``inner``, the smallest box of ``outer`` holding it (within
    ``eps``), -1 where none does."""
    if not len(inner):
        return np.zeros(0, dtype=np.int64)
    if not len(outer):
        return np.full(len(inner), -1, dtype=np.int64)
    tree = build_rtree(outer[:, :2] - eps, outer[:, 2:] + eps)
    q, h = query_pairs(tree, inner[:, :2], inner[:, 2:])
    inside = np.all(outer[h, :2] - eps <= inner[q, :2], axis=1)
    inside &= np.all(outer[h, 2:] + eps >= inner[q, 2:], axis=1)
    q, h = q[inside], h[inside]
    area = (outer[h, 2] - outer[h, 0]) * (outer[h, 3] - outer[h, 1])
    o = np.lexsort((h, area, q))
    q, h = q[o], h[o]
    best = first_per_group(q, len(inner))
    return np.where(best >= 0, h[np.maximum(best, 0)], -1)


def compact_features_plain(
    ps: PolygonSet, grid_nm: float, max_extent_nm: float, tol_grid: float = TOL_GRID
) -> FeatureColumns:
    """Plain twin of :func:`compact_features`: every shape through
    :func:`build_features`, then the same tests (features only, no polygon map)."""
    tol = tol_grid * grid_nm
    if len(ps) == 0:
        return FeatureColumns.empty()
    edges = build_features(ps, grid_nm)
    order = np.argsort(edges.feature, kind="stable")
    a, b, f = edges.a[order], edges.b[order], edges.feature[order]
    present = np.unique(f)
    starts = np.r_[np.searchsorted(f, present), len(f)]
    cols, man = _ring_properties(a, b, starts, tol)
    rings = _ring_counts(a, b, np.searchsorted(present, f), len(present), grid_nm)
    keep = np.all(cols.size < max_extent_nm, axis=1) & man & (rings == 1) & (cols.area > 0)
    return cols.take(np.flatnonzero(keep))


def points_on_features(points: np.ndarray, f: FeatureColumns, tol: float) -> np.ndarray:
    """Per point: whether it lies in (or within ``tol`` of) the frame rectangle of
    one of the features ``f``; candidates from an R-tree of their boxes."""
    out = np.zeros(len(points), dtype=bool)
    if not len(points) or not len(f):
        return out
    index = build_rtree(f.bbox[:, :2] - tol, f.bbox[:, 2:] + tol)
    q, hit = query_pairs(index, points, points)
    t = np.radians(f.angle_deg[hit])
    d = points[q] - f.centre[hit]
    du = d[:, 0] * np.cos(t) + d[:, 1] * np.sin(t)
    dv = -d[:, 0] * np.sin(t) + d[:, 1] * np.cos(t)
    inside = (np.abs(du) <= 0.5 * f.size[hit, 0] + tol) & (np.abs(dv) <= 0.5 * f.size[hit, 1] + tol)
    out[q[inside]] = True
    return out


def points_on_features_plain(points: np.ndarray, f: FeatureColumns, tol: float) -> np.ndarray:
    """Plain twin of :func:`points_on_features`: every point against every feature."""
    out = np.zeros(len(points), dtype=bool)
    for i, p in enumerate(np.asarray(points, dtype=np.float64)):
        for k in range(len(f)):
            t = np.radians(f.angle_deg[k])
            d = p - f.centre[k]
            du = d[0] * np.cos(t) + d[1] * np.sin(t)
            dv = -d[0] * np.sin(t) + d[1] * np.cos(t)
            if abs(du) <= 0.5 * f.size[k, 0] + tol and abs(dv) <= 0.5 * f.size[k, 1] + tol:
                out[i] = True
                break
    return out
