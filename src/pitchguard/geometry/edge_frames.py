"""Nearest facing edges in each edge's own frame: the candidates behind widths and spaces."""

from __future__ import annotations

import math

import numpy as np
import rtree

from pitchguard.geometry.spatial import build_rtree, query_pairs_batched

PARALLEL_SIN = math.sin(math.radians(1.0))
"""Edges within 1 degree of parallel count as parallel (grid snapping of
rotated geometry tilts short edges by a fraction of a degree)."""


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


class EdgeFrames:
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

    def rotated(self, theta: float, pts: np.ndarray) -> np.ndarray:
        if theta == 0.0:
            return pts
        c, s_ = math.cos(-theta), math.sin(-theta)
        return pts @ np.array([[c, s_], [-s_, c]])

    def _tree(self, group: int) -> rtree.index.Index:
        if group not in self._trees:
            th = self.turn[group]
            ra, rb = self.rotated(th, self.a), self.rotated(th, self.b)
            lo, hi = np.minimum(ra, rb) - self.eps, np.maximum(ra, rb) + self.eps
            self._trees[group] = build_rtree(lo, hi)
            self.boxes[group] = (lo, hi)
        return self._trees[group]

    def query(self, group: int, mins: np.ndarray, maxs: np.ndarray):
        """All (query, edge) pairs of boxes in ``group``'s frame (see query_pairs_batched)."""
        tree = self._tree(group)
        return query_pairs_batched(tree, *self.boxes[group], mins, maxs)

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
            ends = self.rotated(th, ends.reshape(-1, 2)).reshape(ends.shape)
            qk, j = self.query(g, ends.min(axis=0), ends.max(axis=0))
            out_i.append(sel[qk])
            out_j.append(j)
        i = np.concatenate(out_i)
        j = np.concatenate(out_j)
        keep = i != j
        return i[keep], j[keep]


def edge_candidates(i, j, a, d, nrm, length, window, eps):
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


def nearest_if_simple(ids, i, lo, hi, dist, side, facing, length, slack):
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


def pick_nearest(cand):
    """``(i, lo, hi, dist, side, facing)`` out of a :func:`edge_candidates` result."""
    i, _j, lo, hi, dist, side, facing = cand
    return i, lo, hi, dist, side, facing


def resolve_complex(rows: dict, length, min_run_nm, eps) -> tuple[list[tuple], list[tuple]]:
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
