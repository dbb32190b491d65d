"""Edges with several nearest neighbours cut into pieces, as arrays over all such edges.

The plain twin is :func:`edge_frames.resolve_complex` (a Python loop per edge
and per piece); this gives the same pieces, in the same order, from numpy
sorts and run merging, and the tests hold the two to each other on random
candidates.  The steps are those of the twin:

1. per edge and side, the nearest candidate on each stretch between the
   candidates' ends (nearest first; on a tie a facing edge, then by place
   along the edge, then the order found), stretches of ``eps`` or less
   skipped, runs of one candidate with gaps of ``eps`` or less merged;
2. per edge, the stretches between the ends of both sides' pieces, each
   tagged with its width and space candidates, runs of one tag merged;
3. 1-D pieces (both sides facing, at least ``min_run_nm`` long) kept as
   sites, the others longer than ``4 eps`` as 2-D pieces.
"""

from __future__ import annotations

import numpy as np

_INF = np.inf


def _unique_points(edge: np.ndarray, value: np.ndarray):
    """Sorted distinct ``(edge, value)`` pairs and the index of each input pair among them."""
    order = np.lexsort((value, edge))
    e_s, v_s = edge[order], value[order]
    new = np.ones(len(order), dtype=bool)
    new[1:] = (e_s[1:] != e_s[:-1]) | (v_s[1:] != v_s[:-1])
    rank = np.cumsum(new) - 1
    inverse = np.empty(len(order), dtype=np.int64)
    inverse[order] = rank
    return e_s[new], v_s[new], inverse


def _stretches(pe: np.ndarray, pv: np.ndarray, eps: float):
    """The stretches between consecutive distinct points of one edge longer than ``eps``:
    their index ``t`` (from point ``t`` to ``t + 1``)."""
    t = np.flatnonzero((pe[1:] == pe[:-1]) & (pv[1:] - pv[:-1] > eps))
    return t


def _runs(edge, u0, u1, tags: list[np.ndarray], eps: float):
    """Merge consecutive stretches of one edge with equal tags and gaps of at most
    ``eps``: the first and last stretch of each run."""
    n = len(edge)
    if n == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    start = np.ones(n, dtype=bool)
    same = (edge[1:] == edge[:-1]) & (np.abs(u1[:-1] - u0[1:]) <= eps)
    for tag in tags:
        same &= tag[1:] == tag[:-1]
    start[1:] = ~same
    first = np.flatnonzero(start)
    last = np.append(first[1:] - 1, n - 1)
    return first, last


def _side_envelope(edges, length, k, lo, hi, dist, facing, j, eps):
    """Step 1 for one side: pieces ``(edge, u0, u1, dist, facing, j)`` per edge of
    ``edges`` (positions ``0..E-1``; ``k`` the position of each candidate's edge)."""
    ne = len(edges)
    lo_c = np.minimum(np.maximum(lo, 0.0), length[k])
    hi_c = np.minimum(np.maximum(hi, 0.0), length[k])
    pos = np.arange(ne)
    pe, pv, inv = _unique_points(
        np.concatenate([pos, pos, k, k]),
        np.concatenate([np.zeros(ne), length, lo_c, hi_c]),
    )
    nr = len(k)
    ulo, uhi = inv[2 * ne : 2 * ne + nr], inv[2 * ne + nr :]
    # Candidate r covers the stretches ulo[r] .. uhi[r] - 1 between distinct points.
    count = np.maximum(uhi - ulo, 0)
    row = np.repeat(np.arange(nr), count)
    t = np.repeat(ulo, count) + (
        np.arange(count.sum()) - np.repeat(np.cumsum(count) - count, count)
    )
    order = np.lexsort((row, hi[row], lo[row], ~facing[row], dist[row], t))
    t_s = t[order]
    head = np.ones(len(t_s), dtype=bool)
    head[1:] = t_s[1:] != t_s[:-1]
    best = np.full(len(pe), -1, dtype=np.int64)  # per stretch: its nearest candidate
    best[t_s[head]] = row[order[head]]

    s = _stretches(pe, pv, eps)
    b = best[s]
    has = b >= 0
    bc = np.where(has, b, 0)
    s_dist = np.where(has, dist[bc] if nr else _INF, _INF)
    s_fac = np.where(has, facing[bc] if nr else True, True)
    s_j = np.where(has, j[bc] if nr else -1, -1)
    u0, u1 = pv[s], pv[s + 1]
    first, last = _runs(pe[s], u0, u1, [s_dist, s_fac, s_j], eps)
    return pe[s][first], u0[first], u1[last], s_dist[first], s_fac[first], s_j[first]


def _covering(piece_edge, piece_u0, piece_u1, edge, mid):
    """Per query ``(edge, mid)``: the piece of that edge whose span holds ``mid``
    (pieces of one edge sorted and disjoint), or -1."""
    n_p = len(piece_edge)
    ev_edge = np.concatenate([piece_edge, edge])
    ev_pos = np.concatenate([piece_u0, mid])
    ev_kind = np.concatenate([np.zeros(n_p, dtype=np.int8), np.ones(len(edge), dtype=np.int8)])
    order = np.lexsort((ev_kind, ev_pos, ev_edge))
    idx = np.where(order < n_p, order, -1)
    latest = np.maximum.accumulate(idx) if len(idx) else idx
    out = np.empty(len(edge), dtype=np.int64)
    is_q = order >= n_p
    out[order[is_q] - n_p] = latest[is_q]
    ok = out >= 0
    oc = np.where(ok, out, 0)
    if n_p:
        ok &= (piece_edge[oc] == edge) & (piece_u0[oc] <= mid) & (mid <= piece_u1[oc])
    return np.where(ok, out, -1)


def resolve_complex_arrays(edges, length, cands, min_run_nm: float, eps: float):
    """:func:`edge_frames.resolve_complex` on arrays.

    ``edges``: the edge ids in the order their pieces are to come out;
    ``cands``: ``(i, side, lo, hi, dist, facing, j)``, every candidate of those
    edges in the order found.  Returns ``(sites, flat)``: ``(edge, u0, u1,
    width, space)`` and ``(edge, u0, u1)``, arrays in the twin's order.
    """
    edges = np.asarray(edges, dtype=np.int64)
    i, side, lo, hi, dist, facing, j = (np.asarray(v) for v in cands)
    lo, hi, dist = (np.asarray(v, dtype=np.float64) for v in (lo, hi, dist))
    facing = facing.astype(bool)
    lengths = np.asarray(length, dtype=np.float64)[edges]
    where = np.full(int(max(edges.max(initial=-1), i.max(initial=-1))) + 1, -1, dtype=np.int64)
    where[edges] = np.arange(len(edges))
    k = where[i]
    sides = []
    for pick in (side > 0, side < 0):  # space, width
        sides.append(
            _side_envelope(
                edges, lengths, k[pick], lo[pick], hi[pick], dist[pick], facing[pick], j[pick], eps
            )
        )
    (se, s0, s1, sd, sf, sj), (we, w0, w1, wd, wf, wj) = sides
    ce, cv, _ = _unique_points(np.concatenate([se, se, we, we]), np.concatenate([s0, s1, w0, w1]))
    st = _stretches(ce, cv, eps)
    e_t, u0, u1 = ce[st], cv[st], cv[st + 1]
    mid = 0.5 * (u0 + u1)
    tag = []
    for pe, p0, p1, pd, pf, pj in ((se, s0, s1, sd, sf, sj), (we, w0, w1, wd, wf, wj)):
        c = _covering(pe, p0, p1, e_t, mid)
        has = c >= 0
        cc = np.where(has, c, 0)
        if len(pe):
            tag.append(
                (
                    np.where(has, pd[cc], _INF),
                    np.where(has, pf[cc], True),
                    np.where(has, pj[cc], -1),
                )
            )
        else:
            tag.append((np.full(len(e_t), _INF), np.ones(len(e_t), bool), np.full(len(e_t), -1)))
    (s_d, s_f, s_j), (w_d, w_f, w_j) = tag
    one_d = s_f & w_f
    first, last = _runs(e_t, u0, u1, [one_d, w_d, s_d, w_j, s_j], eps)
    pe, p0, p1 = e_t[first], u0[first], u1[last]
    p_one, p_w, p_s = one_d[first], w_d[first], s_d[first]
    is_site = p_one & (p1 - p0 >= min_run_nm)
    is_flat = ~is_site & (p1 - p0 > 4 * eps)
    sites = (edges[pe[is_site]], p0[is_site], p1[is_site], p_w[is_site], p_s[is_site])
    flat = (edges[pe[is_flat]], p0[is_flat], p1[is_flat])
    return sites, flat
