"""Line ends of one layer and what each faces: the 2-D places a 1-D cut cannot see.

A line end is a short edge (at most ``width_max_nm``) between two convex
corners whose sides run straight back from it, each at least as long as the
end is wide: the tip of a line.  Looking out of the tip along its outward
normal, the nearest edge that faces back (anti-parallel, overlapping the
tip across) within ``gap_max_nm`` is what the tip faces: the tip of another
line (tip-to-tip) or the side of a line or shape (tip-to-side).

All lengths are nm as drawn; edges are those of :func:`geometry.features.build_features`
(material on the left, so the outward normal of an edge ``a -> b`` is the
direction of ``b - a`` turned clockwise).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pitchguard.geometry.features import Edges
from pitchguard.geometry.spatial import build_rtree, query_pairs

SQUARE = 0.99
"""|cos| or |sin| above this counts as parallel (about 8 degrees)."""


@dataclass(frozen=True)
class LineEnds:
    """Line ends (one row each) and what they face."""

    edge: np.ndarray  # (n,) index of the end edge in the layer's Edges
    mid: np.ndarray  # (n, 2) middle of the tip
    normal: np.ndarray  # (n, 2) outward unit normal
    width: np.ndarray  # (n,) drawn width: the end edge's length
    side: np.ndarray  # (n,) the shorter of the two sides running back from the tip
    gap: np.ndarray  # (n,) distance to the facing edge; inf when none within reach
    facing: np.ndarray  # (n,) the facing edge, -1 for none
    facing_end: np.ndarray  # (n,) the facing line end (tip-to-tip), -1 for none

    def __len__(self) -> int:
        return len(self.edge)

    def take(self, idx: np.ndarray) -> LineEnds:
        """The ends ``idx``; ``facing_end`` renumbered (-1 where its end is not kept)."""
        idx = np.asarray(idx, dtype=np.int64)
        new = np.full(len(self), -1, dtype=np.int64)
        new[idx] = np.arange(len(idx))
        fe = self.facing_end[idx]
        fe = np.where(fe >= 0, new[np.maximum(fe, 0)], -1)
        return LineEnds(
            self.edge[idx],
            self.mid[idx],
            self.normal[idx],
            self.width[idx],
            self.side[idx],
            self.gap[idx],
            self.facing[idx],
            fe,
        )

    @property
    def angle_deg(self) -> np.ndarray:
        """Direction of the outward normal (degrees, the clip frame's x axis)."""
        return np.degrees(np.arctan2(self.normal[:, 1], self.normal[:, 0]))


def _point_keys(p: np.ndarray, q: float) -> np.ndarray:
    """One int64 key per point snapped to ``q`` (equal points, equal keys)."""
    k = np.round(p / q).astype(np.int64)
    return (k[:, 0] + (1 << 31)) * (1 << 32) + (k[:, 1] + (1 << 31))


def _neighbours(edges: Edges, q: float) -> tuple[np.ndarray, np.ndarray]:
    """Per edge, the edge that starts where it ends (``nxt``) and the one that ends
    where it starts (``prv``), in the same feature; -1 where none or ambiguous."""
    n = len(edges)
    ka, kb = _point_keys(edges.a, q), _point_keys(edges.b, q)

    def lookup(keys_from: np.ndarray, keys_to: np.ndarray) -> np.ndarray:
        order = np.argsort(keys_from, kind="stable")
        sk = keys_from[order]
        lo = np.searchsorted(sk, keys_to, side="left")
        hi = np.searchsorted(sk, keys_to, side="right")
        out = np.full(n, -1, dtype=np.int64)
        one = hi - lo == 1  # a vertex two rings share (touching corners) is ambiguous
        out[one] = order[lo[one]]
        same = out >= 0
        same[same] = edges.feature[out[same]] == edges.feature[same]
        return np.where(same, out, -1)

    return lookup(ka, kb), lookup(kb, ka)


def find_line_ends(edges: Edges, width_max_nm: float, grid_nm: float) -> LineEnds:
    """Line ends of a layer's edges (see the module docstring); not yet facing anything."""
    d = edges.b - edges.a
    length = np.hypot(d[:, 0], d[:, 1])
    with np.errstate(invalid="ignore", divide="ignore"):
        u = d / length[:, None]
    nxt, prv = _neighbours(edges, 0.5 * grid_nm)
    ok = (length > 0) & (length <= width_max_nm) & (nxt >= 0) & (prv >= 0)
    i = np.flatnonzero(ok)
    un, up = u[nxt[i]], u[prv[i]]
    ui = u[i]
    # Left turns of a right angle at both corners: the sides run back, inward.
    turn_b = ui[:, 0] * un[:, 1] - ui[:, 1] * un[:, 0]
    turn_a = up[:, 0] * ui[:, 1] - up[:, 1] * ui[:, 0]
    side = np.minimum(length[nxt[i]], length[prv[i]])
    keep = (turn_a > SQUARE) & (turn_b > SQUARE) & (side >= length[i])
    i, side = i[keep], side[keep]
    normal = np.stack([u[i, 1], -u[i, 0]], axis=1)
    m = len(i)

    return LineEnds(
        edge=i,
        mid=0.5 * (edges.a[i] + edges.b[i]),
        normal=normal,
        width=length[i],
        side=side,
        gap=np.full(m, np.inf),
        facing=np.full(m, -1, dtype=np.int64),
        facing_end=np.full(m, -1, dtype=np.int64),
    )


def facing(ends: LineEnds, edges: Edges, gap_max_nm: float, grid_nm: float) -> LineEnds:
    """``ends`` with the nearest edge each faces within ``gap_max_nm`` (see the module
    docstring), and the facing line end where that edge is one."""
    m = len(ends)
    if not m or not len(edges):
        return ends
    tol = 0.25 * grid_nm
    along = np.stack([-ends.normal[:, 1], ends.normal[:, 0]], axis=1)  # tip direction
    half = 0.5 * ends.width
    corners = [
        ends.mid + s * half[:, None] * along + t * gap_max_nm * ends.normal
        for s in (-1.0, 1.0)
        for t in (0.0, 1.0)
    ]
    qlo = np.min(corners, axis=0) - tol
    qhi = np.max(corners, axis=0) + tol
    lo = np.minimum(edges.a, edges.b)
    hi = np.maximum(edges.a, edges.b)
    q, e = query_pairs(build_rtree(lo, hi), qlo, qhi)
    d = edges.b[e] - edges.a[e]
    length = np.hypot(d[:, 0], d[:, 1])
    en = np.stack([d[:, 1], -d[:, 0]], axis=1) / np.maximum(length, 1e-300)[:, None]
    n_q = ends.normal[q]
    back = (en * n_q).sum(axis=1) < -SQUARE
    gap = ((edges.a[e] - ends.mid[q]) * n_q).sum(axis=1)
    t0 = ((edges.a[e] - ends.mid[q]) * along[q]).sum(axis=1)
    t1 = ((edges.b[e] - ends.mid[q]) * along[q]).sum(axis=1)
    overlap = np.minimum(np.maximum(t0, t1), half[q]) - np.maximum(np.minimum(t0, t1), -half[q])
    ok = back & (gap > tol) & (gap <= gap_max_nm + tol) & (overlap > tol)
    q, e, gap = q[ok], e[ok], gap[ok]
    best_gap = np.full(m, np.inf)
    np.minimum.at(best_gap, q, gap)
    first = gap <= best_gap[q] + tol
    q, e, gap = q[first], e[first], gap[first]
    # One facing edge per end (the lowest index among equally near ones).
    order = np.lexsort((e, q))
    q, e, gap = q[order], e[order], gap[order]
    lead = np.r_[True, q[1:] != q[:-1]][: len(q)]
    q, e, gap = q[lead], e[lead], gap[lead]
    fac = np.full(m, -1, dtype=np.int64)
    fac[q] = e
    g = np.full(m, np.inf)
    g[q] = gap
    end_of_edge = {int(k): j for j, k in enumerate(ends.edge.tolist())}
    fe = np.array([end_of_edge.get(int(k), -1) if k >= 0 else -1 for k in fac], dtype=np.int64)
    return LineEnds(ends.edge, ends.mid, ends.normal, ends.width, ends.side, g, fac, fe)


def facing_plain(ends: LineEnds, edges: Edges, gap_max_nm: float, grid_nm: float) -> np.ndarray:
    """Plain twin of :func:`facing` for tests: the gap of each end, every edge tried."""
    tol = 0.25 * grid_nm
    out = np.full(len(ends), np.inf)
    for k in range(len(ends)):
        n = ends.normal[k]
        t = np.array([-n[1], n[0]])
        for j in range(len(edges)):
            a, b = edges.a[j], edges.b[j]
            d = b - a
            ln = float(np.hypot(*d))
            if ln == 0:
                continue
            en = np.array([d[1], -d[0]]) / ln
            if float(en @ n) >= -SQUARE:
                continue
            gap = float((a - ends.mid[k]) @ n)
            t0, t1 = float((a - ends.mid[k]) @ t), float((b - ends.mid[k]) @ t)
            h = 0.5 * ends.width[k]
            overlap = min(max(t0, t1), h) - max(min(t0, t1), -h)
            if tol < gap <= gap_max_nm + tol and overlap > tol:
                out[k] = min(out[k], gap)
    return out
