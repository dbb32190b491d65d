"""Sites -> canonical 1-D cuts across each site, deduplicated."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from pitchguard.geometry.edge_frames import EdgeFrames
from pitchguard.geometry.features import Edges
from pitchguard.geometry.sites import Sites


@dataclass(frozen=True)
class Cut:
    """A canonical drawn profile: boundaries (nm, relative to the feature centre).

    ``bounds`` are sorted; material (drawn shape) lies between ``bounds[0]``
    and ``bounds[1]``, ``bounds[2]`` and ``bounds[3]``, ... The profile is
    clipped to ``[-reach, reach]``; the site's own feature is the interval
    containing 0.
    """

    bounds: tuple[float, ...]
    reach: float

    @property
    def feature(self) -> tuple[float, float]:
        b = self.bounds
        for k in range(0, len(b) - 1, 2):
            if b[k] <= 0.0 <= b[k + 1]:
                return b[k], b[k + 1]
        raise ValueError("cut has no feature at its centre")

    @property
    def context(self) -> str:
        """Where the feature sits: ``interior``, ``outer`` (one neighbour) or ``alone``."""
        left, _ = self.feature
        k = list(self.bounds).index(left)
        n = (k >= 2) + (k + 2 < len(self.bounds))
        return ("alone", "outer", "interior")[n]

    @property
    def search(self) -> tuple[float, float]:
        """Where the feature's printed edges may lie: to the middle of each neighbouring space."""
        left, right = self.feature
        b = list(self.bounds)
        k = b.index(left)
        lo = 0.5 * (left + b[k - 1]) if k >= 1 else -self.reach
        hi = 0.5 * (right + b[k + 2]) if k + 2 < len(b) else self.reach
        return lo, hi


class CutSet(NamedTuple):
    """The cuts of a layer's sites (see :func:`site_cuts`)."""

    which: np.ndarray
    cuts: list[Cut]
    angles: list[float]
    changes: np.ndarray


def site_cuts(
    edges: Edges,
    sites: Sites,
    reach_nm: float,
    grid_nm: float,
    turn_source: bool = True,
    probe_nm: float = 0.0,
    near_nm: float = math.inf,
    screen: bool = True,
) -> CutSet:
    """Canonical cut of every site with a finite width.

    ``cuts[which[k]]`` is the cut of site ``k`` (``which[k] = -1`` where the
    site has no cut: infinite width or an inconsistent crossing pattern);
    ``angles[c]`` is the pitch direction of cut ``c`` in degrees mod 180 (0
    for every cut when ``turn_source`` is False: a source that turning does
    not change).  With ``probe_nm``, ``changes[k]`` flags sites whose cut
    pattern, within ``near_nm`` of the site's feature, differs ``probe_nm``
    along the edge either way.  ``screen`` probes
    only the sites where a change is possible (:func:`_may_change`); without
    it every site is probed (the plain twin, same result).
    """
    n = len(sites)
    which = np.full(n, -1, dtype=np.int64)
    changes = np.zeros(n, dtype=bool)
    angles: list[float] = []
    if n == 0 or len(edges) == 0:
        return CutSet(which, [], angles, changes)
    a, b = edges.a, edges.b
    vec = b - a
    length = np.hypot(vec[:, 0], vec[:, 1])
    d = vec / length[:, None]
    eps = grid_nm * 0.25
    frames = EdgeFrames(a, b, d, eps)

    mid = sites.midpoints()
    nrm = sites.normal
    pitch_angle = np.degrees(np.arctan2(nrm[:, 1], nrm[:, 0])) % 180.0
    angle_key = (
        np.round(pitch_angle * 10).astype(np.int64) % 1800
        if turn_source
        else np.zeros(n, dtype=np.int64)
    )
    todo = np.flatnonzero(np.isfinite(sites.width) & (sites.width <= reach_nm))
    keys: dict[tuple, int] = {}
    cuts: list[Cut] = []
    q = grid_nm
    chunk = 50_000
    for c0 in range(0, len(todo), chunk):
        ids = todo[c0 : c0 + chunk]
        own, line_dir = sites.edge[ids], sites.direction[ids]
        pairs = None
        if probe_nm > 0:
            # One query serves the site's cut and both probe cuts.
            along = line_dir * probe_nm
            c0, c1 = mid[ids] - nrm[ids] * reach_nm, mid[ids] + nrm[ids] * reach_nm
            pairs = _segment_pairs(frames, c0 - along, c1 - along, line_dir, c0 + along, c1 + along)
        tq, entering, starts, ends, h = _crossings(
            frames, a, vec, d, mid[ids], nrm[ids], line_dir, own, reach_nm, q, pairs
        )
        if probe_nm > 0:
            changes[ids] = _changes_along(
                frames,
                a,
                vec,
                d,
                sites,
                ids,
                mid,
                nrm,
                reach_nm,
                q,
                probe_nm,
                near_nm,
                (tq, entering, starts, ends),
                pairs,
                screen,
            )
        wq = np.round(sites.width[ids] / q).astype(np.int64)
        raw = np.stack(
            [h[:, 0].view(np.int64), h[:, 1].view(np.int64), ends - starts, wq, angle_key[ids]],
            axis=1,
        )
        _, first, inverse = np.unique(raw, axis=0, return_index=True, return_inverse=True)
        inverse = inverse.ravel()
        # The cut of a pattern is built from the quantised pattern alone (not from
        # the exact crossings of whichever site came first), so every site with
        # that pattern gets the same cut however the layout was split into tiles.
        tq_l, ent_l, wq_l = tq.tolist(), entering.tolist(), wq.tolist()
        rep_cut = np.full(len(first), -1, dtype=np.int64)
        for u, k in enumerate(first.tolist()):
            site = int(ids[k])
            ts = [v * q for v in tq_l[starts[k] : ends[k]]]
            bounds = _bounds(ts, ent_l[starts[k] : ends[k]], reach_nm, q)
            if bounds is None:
                continue
            # Relative to the feature centre (at -width / 2), in half grid steps.
            rel = tuple(round(2.0 * x / q) + wq_l[k] for x in bounds)
            if not any(a <= 0 <= b for a, b in zip(rel[0::2], rel[1::2], strict=True)):
                continue  # the crossings disagree with the width: inconsistent, no cut
            mirrored = tuple(-v for v in reversed(rel))
            prof = min(rel, mirrored)
            key = (int(angle_key[site]), prof)
            idx = keys.get(key)
            if idx is None:
                idx = len(cuts)
                keys[key] = idx
                cuts.append(Cut(tuple(v * 0.5 * q for v in prof), reach_nm))
                angles.append(key[0] / 10.0)
            rep_cut[u] = idx
        which[ids] = rep_cut[inverse]
    return CutSet(which, cuts, angles, changes)


_HASH_MULT = (0x9E3779B97F4A7C15, 0xC2B2AE3D27D4EB4F)
"""Odd 64-bit multipliers of the two pattern hashes (golden-ratio and a mixing prime)."""


def _powers(mult: int, n: int) -> np.ndarray:
    """``mult ** k`` modulo 2^64 for k = 0..n-1 (uint64)."""
    out = np.empty(n, dtype=np.uint64)
    acc = 1
    for k in range(n):
        out[k] = acc
        acc = (acc * mult) % (1 << 64)
    return out


def _crossings(
    frames, a, vec, d, origin, nrm, line_dir, own_edge, reach_nm, q, pairs=None, hashed=True
):
    """Where cuts ``origin + t nrm`` (|t| <= reach) cross the edges other than
    ``own_edge``: per crossing its cut, quantised position and whether the cut
    enters material there (sorted by cut, then position), each cut's slice,
    and (with ``hashed``) a 128-bit hash of each cut's quantised pattern.
    ``pairs``: candidate (cut, edge) pairs found already (covering these cuts)."""
    n = len(origin)
    p0 = origin - nrm * reach_nm
    p1 = origin + nrm * reach_nm
    qk, j = _segment_pairs(frames, p0, p1, line_dir) if pairs is None else pairs
    m, nn = origin[qk], nrm[qk]
    e0, ev = a[j], vec[j]
    den = nn[:, 0] * ev[:, 1] - nn[:, 1] * ev[:, 0]
    ok = np.abs(den) > 1e-12
    r = e0 - m
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (r[:, 0] * ev[:, 1] - r[:, 1] * ev[:, 0]) / den
        u = (r[:, 0] * nn[:, 1] - r[:, 1] * nn[:, 0]) / den
    ok &= (u >= -1e-9) & (u <= 1 + 1e-9) & (np.abs(t) <= reach_nm)
    ok &= j != own_edge[qk]
    # Entering material when moving against the edge's outward normal.
    out_j = np.stack([d[j, 1], -d[j, 0]], axis=1)
    entering = np.einsum("ij,ij->i", nn, out_j) < 0
    qk, t, entering = qk[ok], t[ok], entering[ok]
    order = np.lexsort((t, qk))
    qk, t, entering = qk[order], t[order], entering[order]
    starts = np.searchsorted(qk, np.arange(n))
    ends = np.searchsorted(qk, np.arange(n), side="right")
    tq = np.round(t / q).astype(np.int64)
    # A crossing within half a step of the site keeps its side (sub-grid slivers).
    tiny = (tq == 0) & (t != 0)
    tq[tiny] = np.sign(t[tiny]).astype(np.int64)
    if not hashed:
        return tq, entering, starts, ends, None
    val = (tq * 2 + entering).astype(np.uint64)
    rank = np.arange(len(qk)) - starts[qk]
    h = np.zeros((n, 2), dtype=np.uint64)
    with np.errstate(over="ignore"):
        for col, mult in enumerate(_HASH_MULT):
            prod = val * _powers(mult, int(rank.max(initial=0)) + 1)[rank]
            np.add.at(h[:, col], qk, prod)
    return tq, entering, starts, ends, h


def _changes_along(
    frames, a, vec, d, sites, ids, mid, nrm, reach_nm, q, probe_nm, near_nm, here, pairs, screen
):
    """Sites ``ids`` whose cut pattern is not the same ``probe_nm`` along the edge
    both ways: the line does not run on unchanged around the cut (a junction,
    a jog, a line end, or a line meeting the cut end-on).  Every site is
    probed: pieces end where the site's width or space changes, but the cut
    also reaches past its feature and its neighbour, where nothing ends a piece.
    Only crossings within ``near_nm`` of the site's feature are compared.
    ``here``: the crossings of the sites' own cuts (:func:`_crossings`);
    ``pairs``: candidate (site, edge) pairs covering the probe cuts."""
    n = len(ids)
    changed = np.zeros(n, dtype=bool)
    # Only crossings within near_nm of the feature count (farther shapes barely
    # touch its image), and none near the cut's ends (they come and go as it moves).
    far = min(near_nm / q, reach_nm / q - PROBE_TOL_STEPS)
    lo = -np.minimum(np.round(sites.width[ids] / q) + far, reach_nm / q - PROBE_TOL_STEPS)
    tq, ent, starts, ends = _inside(*here, lo, far)
    line_dir = sites.direction[ids]
    qk, j = pairs
    if screen:
        sub = np.flatnonzero(
            _may_change(
                a, vec, d, (qk, j), mid[ids], nrm[ids], line_dir, probe_nm, lo * q, far * q, 2.0 * q
            )
        )
    else:
        sub = np.arange(n)
    if len(sub) == 0:
        return changed
    if len(sub) < n:
        renumber = np.full(n, -1, dtype=np.int64)
        renumber[sub] = np.arange(len(sub))
        keep = renumber[qk] >= 0
        qk, j = renumber[qk[keep]], j[keep]
    along = line_dir[sub] * probe_nm
    for sign in (-1.0, 1.0):
        there = _crossings(
            frames,
            a,
            vec,
            d,
            mid[ids[sub]] + sign * along,
            nrm[ids[sub]],
            line_dir[sub],
            sites.edge[ids[sub]],
            reach_nm,
            q,
            (qk, j),
            hashed=False,
        )
        probe = _inside(*there[:4], lo[sub], far)
        changed[sub] |= _patterns_differ(tq, ent, starts[sub], ends[sub], *probe)
    return changed


def _may_change(a, vec, d, pairs, mid, nrm, line_dir, probe_nm, lo_nm, far_nm, slack):
    """Sites whose cut pattern may change within ``probe_nm`` along the line, in
    the window ``lo_nm < t < far_nm`` across it: an edge has an end in that
    rectangle, or crosses it at a slant.  Edges parallel to the line that
    cross it end to end cross every cut in it at the same place."""
    qk, j = pairs
    out = np.zeros(len(mid), dtype=bool)
    if len(qk) == 0:
        return out
    m, nn, u = mid[qk], nrm[qk], line_dir[qk]
    pa, pb = a[j] - m, a[j] + vec[j] - m
    sa, ta = np.einsum("ij,ij->i", pa, u), np.einsum("ij,ij->i", pa, nn)
    sb, tb = np.einsum("ij,ij->i", pb, u), np.einsum("ij,ij->i", pb, nn)
    s_lo, s_hi = -probe_nm - slack, probe_nm + slack
    t_lo, t_hi = np.broadcast_to(lo_nm, len(mid))[qk] - slack, far_nm + slack

    def within(s, t):
        return (s >= s_lo) & (s <= s_hi) & (t >= t_lo) & (t <= t_hi)

    hit = within(sa, ta) | within(sb, tb)
    slanted = np.abs(d[j, 0] * u[:, 1] - d[j, 1] * u[:, 0]) > 1e-9
    # Liang-Barsky: the part of each slanted edge inside the rectangle.
    ds, dt = sb - sa, tb - ta
    w0, w1 = np.zeros(len(qk)), np.ones(len(qk))
    miss = np.zeros(len(qk), dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        for p, room in ((-ds, sa - s_lo), (ds, s_hi - sa), (-dt, ta - t_lo), (dt, t_hi - ta)):
            r = room / p
            w0 = np.where(p < 0, np.maximum(w0, r), w0)
            w1 = np.where(p > 0, np.minimum(w1, r), w1)
            miss |= (p == 0) & (room < 0)
    hit |= slanted & ~miss & (w0 <= w1)
    out[qk[hit]] = True
    return out


def _inside(tq, ent, starts, ends, lo, hi):
    """The crossings (see :func:`_crossings`) with ``lo < tq < hi`` (``lo`` per
    cut or one for all), sliced per cut."""
    owner = np.repeat(np.arange(len(starts)), ends - starts)
    keep = (tq > np.broadcast_to(lo, len(starts))[owner]) & (tq < hi)
    kept = np.concatenate([[0], np.cumsum(keep)])
    return tq[keep], ent[keep], kept[starts], kept[ends]


PROBE_TOL_STEPS = 3
"""Crossings of the probe cuts may move this many grid steps from the site's
cut without counting as a change: snapping a slanted edge to the grid moves it
by up to about 0.7 step (SNAP_PITCH_SPREAD in judge.regions)."""


def _patterns_differ(tq, ent, starts, ends, tq2, ent2, s2, e2) -> np.ndarray:
    """Per cut: the second pattern has other crossings than the first (a crossing
    more or less, the other way, or moved by more than PROBE_TOL_STEPS)."""
    count, count2 = ends - starts, e2 - s2
    differ = count != count2
    same = np.flatnonzero(~differ & (count > 0))
    if len(same):
        reps = count[same]
        rank = np.arange(int(reps.sum())) - np.repeat(np.cumsum(reps) - reps, reps)
        i1 = np.repeat(starts[same], reps) + rank
        i2 = np.repeat(s2[same], reps) + rank
        bad = (np.abs(tq[i1] - tq2[i2]) > PROBE_TOL_STEPS) | (ent[i1] != ent2[i2])
        owner = np.repeat(same, reps)
        differ[np.unique(owner[bad])] = True
    return differ


def _segment_pairs(frames: EdgeFrames, p0, p1, line_dir, *more):
    """Candidate edges for cut segments p0-p1, or for the boxes around them and the
    points ``more`` (grouped by the site's orientation)."""
    ang = np.degrees(np.arctan2(line_dir[:, 1], line_dir[:, 0])) % 90.0
    key = np.round(ang * 2.0).astype(np.int64) % 180
    group = np.where(np.isin(key, list(frames.turn)), key, 0)
    out_k, out_j = [], []
    for g in np.unique(group).tolist():
        sel = np.flatnonzero(group == g)
        th = frames.turn[g]
        ends = np.stack([p0[sel], p1[sel], *(m[sel] for m in more)])
        ends = frames.rotated(th, ends.reshape(-1, 2)).reshape(ends.shape)
        qk, j = frames.query(g, ends.min(axis=0), ends.max(axis=0))
        out_k.append(sel[qk])
        out_j.append(j)
    return np.concatenate(out_k), np.concatenate(out_j)


def _bounds(ts: list[float], entering: list[bool], reach: float, q: float) -> list[float] | None:
    """Material boundaries along one cut, or None when the crossings are inconsistent.

    At ``t = 0-`` the cut is inside the site's feature and at ``0+`` in its
    space.  Walking outward, crossings must alternate; a vertex hit twice
    (two edges meeting on the cut) is merged.
    """
    # A crossing at the very end of the cut bounds nothing inside it.
    neg = [(t, e) for t, e in zip(ts, entering, strict=True) if -reach < t < 0][::-1]  # outward
    pos = [(t, e) for t, e in zip(ts, entering, strict=True) if 0 < t < reach]
    out_neg: list[float] = []
    inside = True  # walking towards -t from inside the feature
    for t, ent in _dedupe(neg, q):
        # Walking backwards along the cut, "entering" (forward) means leaving.
        if inside != ent:
            return None
        inside = not inside
        out_neg.append(t)
    out_pos: list[float] = []
    inside = False
    for t, ent in _dedupe(pos, q):
        if inside == ent:
            return None
        inside = not inside
        out_pos.append(t)
    lo = [-reach] if len(out_neg) % 2 == 0 else []  # material runs past the cut's end
    hi = [reach] if len(out_pos) % 2 == 1 else []
    bounds = lo + out_neg[::-1] + [0.0] + out_pos + hi
    if len(bounds) % 2:
        return None
    return bounds


def _dedupe(cross: list[tuple[float, bool]], q: float):
    """Drop a crossing repeated at the same place with the same sense (a shared vertex)."""
    out: list[tuple[float, bool]] = []
    for t, e in cross:
        if out and abs(out[-1][0] - t) <= 0.25 * q and out[-1][1] == e:
            continue
        out.append((t, e))
    return out


def respaced(cut: Cut, space: float, new_space: float, tol: float) -> Cut:
    """The cut redrawn with its spaces of ``space`` (within ``tol``) set to
    ``new_space``; when widening, every space narrower than ``new_space`` widens
    to it.  Features keep their widths and the site's feature its centre; the
    rest moves outward (or in).  When no space matches, the narrower space
    beside the feature changes.

    A cut spans ``reach`` from its site's edge: ``reach + w/2`` from the feature
    centre on the site's side and ``reach - w/2`` on the other (``w`` the
    feature width).  A bound there is material running past the cut's end and
    stays there; a side with no such bound is taken to span the longer way.
    """
    b, r = list(cut.bounds), cut.reach
    left, right = cut.feature
    k = b.index(left)
    half = 0.5 * (right - left)
    spans = (r + half, r - half)
    # Each side as distances from the feature centre, outward from the feature's edge.
    sides = [b[k + 1 :], [-v for v in reversed(b[: k + 1])]]
    ends = []
    for side in sides:
        last = side[-1]
        ends.append(last if len(side) > 1 and any(abs(last - e) < 1e-6 for e in spans) else None)
    if ends[0] is None and ends[1] is not None:
        ends[0] = spans[1] if abs(ends[1] - spans[0]) < 1e-6 else spans[0]
    if ends[1] is None and ends[0] is not None:
        ends[1] = spans[1] if abs(ends[0] - spans[0]) < 1e-6 else spans[0]
    ends = [spans[0] if e is None else e for e in ends]

    def spaces_of(s: int) -> list[int]:
        # Indexes i of the spaces side[i] -> side[i + 1] (those ending in material).
        side = sides[s]
        return [i for i in range(0, len(side) - 1, 2) if side[i + 1] < ends[s] - 1e-6]

    def changes(g: float) -> bool:
        return abs(g - space) <= tol or (new_space > space and g < new_space)

    chosen = [{i for i in spaces_of(s) if changes(sides[s][i + 1] - sides[s][i])} for s in (0, 1)]
    if not chosen[0] and not chosen[1]:
        near = [(sides[s][1] - sides[s][0], s) for s in (0, 1) if spaces_of(s)]
        if near:
            chosen[min(near)[1]] = {0}

    def moved(s: int) -> list[float]:
        side, end = sides[s], ends[s]
        out, shift = [side[0]], 0.0
        for i in range(len(side) - 1):
            if i in chosen[s]:
                shift += new_space - (side[i + 1] - side[i])
            v = side[i + 1]
            out.append(math.inf if v >= end - 1e-6 else v + shift)
        # Keep what lies inside the cut: (start, end) of each neighbour, outward.
        kept = [out[0]]
        for i in range(1, len(out) - 1, 2):
            if out[i] >= end:
                break
            kept += [out[i], min(out[i + 1], end)]
        return kept

    bounds = [-v for v in reversed(moved(1))] + moved(0)
    return Cut(tuple(bounds), r)


def cut_segments(cut: Cut, period_nm: float) -> tuple[np.ndarray, np.ndarray]:
    """Period ``[-P/2, P/2)`` split at the cut's boundaries: ``(edges, is_material)``."""
    half = period_nm / 2
    b = [min(max(v, -half), half) for v in cut.bounds]
    edges = [-half]
    material = []
    state = False
    for v in b:
        if v > edges[-1]:
            edges.append(v)
            material.append(state)
        state = not state
    if edges[-1] < half:
        edges.append(half)
        material.append(state)
    return np.array(edges), np.array(material, dtype=bool)


def window_period(reach_nm: float, lambda_over_na_nm: float) -> float:
    """Image period of a cut: the cut (2 reach) plus one lambda/NA of padding each side."""
    return 2.0 * reach_nm + 2.0 * lambda_over_na_nm
