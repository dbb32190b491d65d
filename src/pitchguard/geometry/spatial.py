"""Spatial index helpers (R-tree bulk queries) and connected components."""

from __future__ import annotations

import numpy as np
import rtree

QUERY_CHUNK = 100_000
"""Edges queried against the R-tree per numpy batch (bounds peak memory)."""


RTREE_CAPACITY = 16
"""Node capacity of the R-trees: smaller than the library's default of 100,
which makes bulk self-queries of line-shaped boxes about twice as fast."""


def components(n: int, a: np.ndarray, b: np.ndarray) -> tuple[int, np.ndarray]:
    """Connected components of the undirected graph on nodes ``0..n-1`` with
    edges ``a[k]``-``b[k]``: ``(count, label)``, components numbered in the
    order of their smallest node (as scipy.sparse.csgraph numbers them).

    Hooking and pointer jumping on whole arrays: each round hooks every root
    that an edge joins to a smaller root onto the smallest such root, then
    points every node straight at its root; edges inside one component are
    dropped.  Every root left with an edge has a neighbour that hooked, so
    the roots still to merge at least halve per round.  Written here because
    scipy's version would be a scan's only use of scipy.sparse, whose import
    (it pulls in scipy.linalg) costs more than the work; the test checks this
    one against scipy's.
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


def build_rtree(mins: np.ndarray, maxs: np.ndarray) -> rtree.index.Index:
    ids = np.arange(len(mins), dtype=np.int64)
    prop = rtree.index.Property()
    prop.leaf_capacity = RTREE_CAPACITY
    prop.index_capacity = RTREE_CAPACITY
    prop.fill_factor = 0.9
    return rtree.index.Index(
        (ids, np.ascontiguousarray(mins), np.ascontiguousarray(maxs)), properties=prop
    )


def query_pairs(index, mins, maxs) -> tuple[np.ndarray, np.ndarray]:
    """All (query, hit) pairs of a bulk R-tree query, as two int64 arrays."""
    hits, counts = index.intersection_v(np.ascontiguousarray(mins), np.ascontiguousarray(maxs))
    q = np.repeat(np.arange(len(mins), dtype=np.int64), counts.astype(np.int64))
    return q, hits.astype(np.int64)


BATCH_MAX = 8
"""Query boxes answered by one R-tree query in :func:`query_pairs_batched`."""


def query_pairs_batched(index, item_lo, item_hi, mins, maxs) -> tuple[np.ndarray, np.ndarray]:
    """:func:`query_pairs` for many boxes in rows, at a fraction of the cost.

    An R-tree query has a fixed cost many times that of each item it finds
    (see docs/performance.md).  The boxes of an array's edges and
    cuts come in rows: the same extent in y (or x), one after another in x
    (or y).  Up to
    :data:`BATCH_MAX` such neighbours are queried as one box covering them
    (a batch spans at most one box's width plus height), and each item found
    is kept for each box it touches (closed intervals, the R-tree's own
    test), so the pairs are exactly those of one query per box, in another
    order.  ``item_lo``/``item_hi`` are the boxes the tree was built from.
    """
    n = len(mins)
    if n < 2 * BATCH_MAX:
        return query_pairs(index, mins, maxs)
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
    bq, hit = query_pairs(index, bmin, bmax)
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
