"""Tile results -> one FindingSet: distinct tiles' findings placed, border regions merged."""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from pitchguard.deck import SEVERITIES, Deck
from pitchguard.judge.findings import FindingSet, placed, replaced
from pitchguard.judge.regions import (
    SNAP_PITCH_SPREAD,
    Region,
    canonical_normal,
    count_lines,
    periodicity_class,
    rectangles_touch,
    same_region_class,
)


class Assembled(NamedTuple):
    """A tiled scan's findings: every tile's, as distinct findings and offsets.

    ``hint_keys[i]`` is what the hint of ``findings.distinct[i]`` is made from
    (None when it has its hint); ``per_group`` pairs each distinct tile's
    counts with its number of tiles.
    """

    findings: FindingSet
    hint_keys: list
    per_group: list


class TileAssembly:
    """Findings of every tile from those of the distinct tiles, merged across borders.

    :meth:`add` takes each distinct tile's result as it arrives (in any order);
    :meth:`finish` merges the regions cut by tile borders and returns a
    :class:`~pitchguard.judge.findings.FindingSet`: each distinct tile's
    findings once, with the offsets of the tiles they recur on, and the hint
    key of each distinct finding.  No per-copy record is
    made here: the copies of a chip's findings (10^5-10^6) are made by
    whoever reads them, one at a time.  The outcome does not depend on the
    arrival order.

    Which parts of two neighbouring tiles join depends only on the two tiles'
    contents and where they sit relative to each other: it is worked out once
    per such pair of distinct tiles (from their sites near the border, by the
    whole-layout scan's own region rule) and applied to every copy of the pair.
    """

    def __init__(self, tiles):
        self.tiles = tiles
        self.members: list[list[int]] = []  # per group: its tiles, the first scanned
        self.inner: list[list[Region]] = []  # final regions, away from the tile's border
        self.reps: list[list[Region]] = []  # regions with sites near the border
        self.stats: list = []

    def group(self, members: list[int]) -> int:
        """A new group of tiles (more members may be appended until finish)."""
        self.members.append(members)
        for part in (self.inner, self.reps):
            part.append(())
        self.stats.append(None)
        return len(self.members) - 1

    def add(self, g: int, regions: list[Region], stats) -> None:
        # Only regions with sites near a tile's border can join other tiles'; the
        # others came finished from tile_task.
        self.inner[g] = [r for r in regions if not r.on_border]
        self.reps[g] = [r for r in regions if r.on_border]
        self.stats[g] = stats

    def finish(self, deck: Deck, grid_nm: float) -> Assembled:
        if any(s is None for s in self.stats):
            raise RuntimeError("a distinct tile's result is missing")
        boxes = np.asarray(self.tiles, dtype=np.float64).reshape(-1, 4)
        # Each group's tiles, from its first tile, (m, 2) nm.
        offsets = [boxes[m, :2] - boxes[m[0], :2] for m in self.members]
        size = np.array([len(m) for m in self.members])
        distinct: list[Region] = []
        which: list[np.ndarray] = []
        offset: list[np.ndarray] = []
        for g, rs in enumerate(self.inner):  # by group, finding, then tile
            which.append(np.repeat(np.arange(len(distinct), len(distinct) + len(rs)), size[g]))
            offset.append(np.tile(offsets[g], (len(rs), 1)))
            distinct.extend(rs)
        # Border copies, numbered group by group, finding-major: the copy of
        # group g's border finding r on its tile m is start[g] + r size[g] + m.
        raw = [r for reps in self.reps for r in reps]
        n_reps = np.array([len(r) for r in self.reps])
        rep0 = np.r_[0, np.cumsum(n_reps)[:-1]]
        start = np.r_[0, np.cumsum(n_reps * size)[:-1]]
        b_which = np.concatenate(
            [np.repeat(np.arange(rep0[g], rep0[g] + n_reps[g]), size[g]) for g in range(len(size))]
            or [np.zeros(0, np.int64)]
        )
        b_off = np.concatenate(
            [np.tile(offsets[g], (n_reps[g], 1)) for g in range(len(size))] or [np.zeros((0, 2))]
        )
        group_of = np.empty(len(self.tiles), dtype=np.int64)
        slot_of = np.empty(len(self.tiles), dtype=np.int64)
        for g, members in enumerate(self.members):
            group_of[members] = g
            slot_of[members] = np.arange(len(members))
        # Neighbouring tiles (sides and corners), grouped by their distinct contents
        # and relative place.
        t, u = neighbouring_tiles(self.tiles)
        rel = np.round(boxes[u, :2] - boxes[t, :2], 3)
        gt, gu = group_of[t], group_of[u]
        both = (n_reps[gt] > 0) & (n_reps[gu] > 0)
        t, u, rel = t[both], u[both], rel[both]
        kinds_of_pair, pair_kind = np.unique(
            np.stack([gt[both], gu[both], rel[:, 0], rel[:, 1]], axis=1),
            axis=0,
            return_inverse=True,
        )
        pair_kind = pair_kind.ravel()
        by_kind = np.argsort(pair_kind, kind="stable")
        cuts = np.flatnonzero(np.diff(pair_kind[by_kind])) + 1
        ea, eb = [], []
        sites = BorderSites(self.reps, deck, grid_nm)
        for (g, h, dx, dy), ks in zip(
            kinds_of_pair.tolist(), np.split(by_kind, cuts) if len(by_kind) else [], strict=True
        ):
            g, h = int(g), int(h)
            # Parts of the distinct tiles that join, placed as the pair sits.
            shift = boxes[self.members[g][0], :2] + (dx, dy) - boxes[self.members[h][0], :2]
            rg, rh = sites.joining(g, h, shift)
            if not len(rg):
                continue
            mt, mu = slot_of[t[ks]], slot_of[u[ks]]
            ea.append((start[g] + rg[None, :] * size[g] + mt[:, None]).ravel())
            eb.append((start[h] + rh[None, :] * size[h] + mu[:, None]).ravel())
        joined = _joined_groups(
            len(b_which),
            np.concatenate(ea or [np.zeros(0, np.int64)]),
            np.concatenate(eb or [np.zeros(0, np.int64)]),
        )
        # Regions cut by borders are merged.  Regions whose parts are the same
        # distinct findings placed alike are the same region moved: each such
        # kind is merged once (its parts made, line points and hulls moved).
        kind, moved, first_of = _kinds(joined.inside, joined.sizes, b_which, b_off)
        alone, slot = joined.alone, joined.slot
        parts = {k: _moved_part(raw[b_which[k]], b_off[k]) for g in first_of for k in g.tolist()}
        merged = merge_regions(parts, first_of, deck, grid_nm)
        # In the order of each region's first part: a part alone is a copy of its
        # distinct finding; a merged region a copy of its kind's.
        base = len(distinct)
        distinct.extend(raw)
        distinct.extend(merged)
        lone = slot < 0
        w = np.empty(len(slot), dtype=np.int64)
        o = np.zeros((len(slot), 2))
        w[lone] = base + b_which[alone]
        o[lone] = b_off[alone]
        w[~lone] = base + len(raw) + kind[slot[~lone]]
        o[~lone] = moved[slot[~lone]]
        which.append(w)
        offset.append(o)
        per_group = [(st, len(m)) for st, m in zip(self.stats, self.members, strict=True)]
        findings = FindingSet(
            [r.finding for r in distinct], np.concatenate(which), np.concatenate(offset)
        )
        return Assembled(findings, [r.hint_key for r in distinct], per_group)


class RegionKinds(NamedTuple):
    """Groups of parts that are the same region moved: group ``i`` is the group
    ``first_of[kind[i]]`` (its members) moved by ``moved[i]`` (nm)."""

    kind: np.ndarray
    moved: np.ndarray
    first_of: list[np.ndarray]


def _kinds(inside: np.ndarray, sizes: np.ndarray, which: np.ndarray, off: np.ndarray):
    """Groups of parts that are the same region moved (:class:`RegionKinds`): the
    same distinct findings, placed alike.  Groups are ``inside`` cut into runs
    of ``sizes``."""
    n = len(sizes)
    kind = np.empty(n, dtype=np.int64)
    start = np.r_[0, np.cumsum(sizes)[:-1]].astype(np.int64)
    at = off[inside[start]] if n else np.zeros((0, 2))
    first_group: list[int] = []
    for s in np.unique(sizes).tolist():
        sel = np.flatnonzero(sizes == s)
        members = inside[start[sel][:, None] + np.arange(s)]  # (m, s)
        rel = np.round(off[members] - at[sel][:, None, :], 3) + 0.0
        sig = np.concatenate([which[members].astype(np.float64), rel.reshape(len(sel), -1)], axis=1)
        _, first, inverse = np.unique(sig, axis=0, return_index=True, return_inverse=True)
        # Kinds numbered in the order of their first group (as a loop would).
        by_first = np.argsort(first, kind="stable")
        rank = np.empty(len(first), dtype=np.int64)
        rank[by_first] = np.arange(len(first))
        kind[sel] = len(first_group) + rank[inverse.ravel()]
        first_group.extend(sel[first[by_first]].tolist())
    moved = at - at[np.array(first_group, dtype=np.int64)[kind]] if n else np.zeros((0, 2))
    return RegionKinds(kind, moved, [inside[start[i] : start[i] + sizes[i]] for i in first_group])


def _moved_part(r: Region, off: np.ndarray) -> Region:
    """A border region moved by ``off`` (nm), line points and hull included."""
    dx, dy = off.tolist()
    return Region(
        placed(r.finding, dx, dy),
        None if r.line_points is None else r.line_points + off,
        None,
        None if r.extent_nm is None else r.extent_nm + off,
        r.hint_key,
    )


class JoinedParts(NamedTuple):
    """Connected groups of parts, over all groups in the order of their first
    part: ``slot`` is -1 for a lone part and otherwise the index of its group
    among the groups of two or more, whose members (in index order) are
    ``inside`` cut into runs of ``sizes``; ``alone`` lists the lone parts in
    that order."""

    alone: np.ndarray
    slot: np.ndarray
    inside: np.ndarray
    sizes: np.ndarray


def _joined_groups(n: int, ea: np.ndarray, eb: np.ndarray) -> JoinedParts:
    """Connected groups of ``n`` parts joined by pairs ``ea``-``eb``."""
    from pitchguard.geometry.spatial import components

    if n == 0:
        z = np.zeros(0, np.int64)
        return JoinedParts(z, z, z, z)
    n_lab, labels = components(n, ea, eb)  # numbered in the order of their first part
    count = np.bincount(labels, minlength=n_lab)
    multi = count > 1
    slot = np.full(n_lab, -1, dtype=np.int64)
    slot[multi] = np.arange(int(multi.sum()))
    # A lone part is its group's first part, so in index order they are in group order.
    alone = np.flatnonzero(~multi[labels])
    # Members of the groups of two or more, group by group, in index order.
    inside = np.flatnonzero(multi[labels])
    inside = inside[np.argsort(labels[inside], kind="stable")]
    return JoinedParts(alone, slot, inside, count[multi])


def neighbouring_tiles(tiles) -> tuple[np.ndarray, np.ndarray]:
    """Pairs ``(t, u)``, ``t < u``, of tiles that share a side or a corner."""
    from pitchguard.geometry.spatial import build_rtree, query_pairs

    if len(tiles) < 2:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    b = np.asarray(tiles, dtype=np.float64)
    # Tiles from tiles_for: a full grid, row by row.  Its neighbours by index.
    nx = int(np.argmax(b[:, 1] != b[0, 1])) or len(b)
    if len(b) % nx == 0:
        ny = len(b) // nx
        g = b.reshape(ny, nx, 4)
        if (g[:, :, 0] == g[0:1, :, 0]).all() and (g[:, :, 1] == g[:, 0:1, 1]).all():
            idx = np.arange(len(b)).reshape(ny, nx)
            t = np.concatenate(
                [
                    idx[:, :-1].ravel(),
                    idx[:-1, :].ravel(),
                    idx[:-1, :-1].ravel(),
                    idx[:-1, 1:].ravel(),
                ]
            )
            u = np.concatenate(
                [idx[:, 1:].ravel(), idx[1:, :].ravel(), idx[1:, 1:].ravel(), idx[1:, :-1].ravel()]
            )
            return t, u
    eps = 1e-3
    qi, qj = query_pairs(
        build_rtree(b[:, :2] - eps, b[:, 2:] + eps), b[:, :2] - eps, b[:, 2:] + eps
    )
    keep = qi < qj
    return qi[keep], qj[keep]


class BorderSites:
    """Which findings of two neighbouring tiles are parts of one region.

    Exactly the rule a whole-layout scan forms regions by
    (``judge.regions.region_labels``), applied to the findings' sites near the border:
    two parts join when a site of each touches the other's, on the same
    layer, with lines the same way (within ``ORIENTATION_TOL_DEG``) and
    pitches within the layer's tolerance (or either infinite).  Each group's
    sites and their R-tree are made once, whatever pairs it is part of.
    """

    PAD_NM = 1e-3
    """Candidate boxes are padded by this much (far below any grid) so that the
    R-tree passes every pair the exact test, which allows 1e-6 nm, may accept."""

    def __init__(self, reps: list[list[Region]], deck: Deck, grid_nm: float):
        self.reps = reps
        self.names = [r.name for r in deck.layers]
        self.tol_of = np.array(
            [
                max(r.pitch_tolerance_nm / deck.scale_to_wafer, SNAP_PITCH_SPREAD * grid_nm)
                for r in deck.layers
            ]
        )
        self._sites: dict[int, tuple] = {}
        self._trees: dict[int, tuple] = {}  # group -> (R-tree, its boxes' lo, hi)

    def sites(self, g: int) -> tuple:
        """Group ``g``'s border sites: corners (k, 4, 2), angle, pitch, layer, owner."""
        if g not in self._sites:
            rs = self.reps[g]
            rows = np.concatenate([r.border_sites for r in rs])
            owner = np.repeat(np.arange(len(rs)), [len(r.border_sites) for r in rs])
            layer = np.array([self.names.index(r.finding.layer) for r in rs])[owner]
            self._sites[g] = (rows[:, :8].reshape(-1, 4, 2), rows[:, 8], rows[:, 9], layer, owner)
        return self._sites[g]

    def joining(self, g: int, h: int, shift) -> tuple[np.ndarray, np.ndarray]:
        """``(i, j)``: finding ``i`` of group ``g`` and ``j`` of group ``h`` are parts
        of one region when ``h``'s tile sits ``shift`` (nm) from ``g``'s."""
        from pitchguard.geometry.spatial import build_rtree, query_pairs_batched

        shift = np.asarray(shift, dtype=np.float64)
        ca, anga, pa, la, oa = self.sites(g)
        cb, angb, pb, lb, ob = self.sites(h)
        if h not in self._trees:
            lo, hi = cb.min(axis=1), cb.max(axis=1)
            self._trees[h] = (build_rtree(lo, hi), lo, hi)
        tree, lo_b, hi_b = self._trees[h]
        # ``a``'s boxes moved into ``h``'s frame, padded (see PAD_NM).
        qlo = ca.min(axis=1) - shift - self.PAD_NM
        qhi = ca.max(axis=1) - shift + self.PAD_NM
        qi, qj = query_pairs_batched(tree, lo_b, hi_b, qlo, qhi)
        keep = la[qi] == lb[qj]
        keep &= same_region_class(anga[qi], angb[qj], pa[qi], pb[qj], self.tol_of[la[qi]])
        qi, qj = qi[keep], qj[keep]
        # Exact overlap test in the frame of the site of ``a``, as whole-layout regions use.
        rad = np.radians(anga[qi])
        d = np.stack([np.cos(rad), np.sin(rad)], axis=1)
        touch = rectangles_touch(ca[qi], cb[qj] + shift, d)
        joined = np.unique(np.stack([oa[qi[touch]], ob[qj[touch]]], axis=1), axis=0)
        return joined[:, 0], joined[:, 1]


def merge_regions(
    regions: dict[int, Region], groups: list[np.ndarray], deck: Deck, grid_nm: float
) -> list[Region]:
    """One region per group of parts (``regions`` by number): the worst part's
    finding, spanning all parts, with the worst part's hint key.

    The region's frame is its worst site's (the worst part's outline); the
    outline is the parts' extent in that frame; line positions are united,
    so line counts are exact.
    """
    if not groups:
        return []
    members = np.concatenate(groups)
    gid = np.repeat(np.arange(len(groups)), [len(g) for g in groups])
    rank = {s: k for k, s in enumerate(SEVERITIES)}
    parts = [regions[k].finding for k in members.tolist()]
    sev = np.array([rank[f.severity] for f in parts])
    pitch = np.array([f.pitch_nm for f in parts])
    cut = np.round(np.array([f.cut_origin_nm for f in parts], dtype=np.float64), 3)
    # The worst part: by severity, pitch, then the cut's position (y, x); first on ties.
    order = np.lexsort((np.arange(len(parts)), cut[:, 0], cut[:, 1], pitch, sev, gid))
    first = np.r_[True, gid[order][1:] != gid[order][:-1]]
    best = members[order[first]]
    o = np.array([regions[k].finding.outline_nm for k in best.tolist()], dtype=np.float64)
    d = o[:, 1] - o[:, 0]
    length = np.hypot(d[:, 0], d[:, 1])
    rad = np.radians([regions[k].finding.orientation_deg for k in best.tolist()])
    d = np.where(
        length[:, None] > 0,
        d / np.where(length > 0, length, 1.0)[:, None],
        np.stack([np.cos(rad), np.sin(rad)], axis=1),
    )
    nrm = np.stack([d[:, 1], -d[:, 0]], axis=1)
    # The parts' extents (hulls of their sites' corners) in the frame of the worst.
    hulls = [
        regions[k].extent_nm
        if regions[k].extent_nm is not None
        else np.asarray(regions[k].finding.outline_nm, dtype=np.float64)
        for k in members.tolist()
    ]
    sizes = np.array([len(h) for h in hulls])
    pts = np.concatenate(hulls)
    owner = np.repeat(gid, sizes)
    pu = pts[:, 0] * d[owner, 0] + pts[:, 1] * d[owner, 1]
    pv = pts[:, 0] * nrm[owner, 0] + pts[:, 1] * nrm[owner, 1]
    starts_pts = np.r_[0, np.cumsum(np.bincount(owner, minlength=len(groups)))[:-1]]
    u0 = np.minimum.reduceat(pu, starts_pts)
    u1 = np.maximum.reduceat(pu, starts_pts)
    v0 = np.minimum.reduceat(pv, starts_pts)
    v1 = np.maximum.reduceat(pv, starts_pts)
    starts = np.r_[0, np.cumsum([len(g) for g in groups])[:-1]]
    corners = np.stack(
        [
            d * u0[:, None] + nrm * v0[:, None],
            d * u1[:, None] + nrm * v0[:, None],
            d * u1[:, None] + nrm * v1[:, None],
            d * u0[:, None] + nrm * v1[:, None],
        ],
        axis=1,
    )
    boxes = np.concatenate([corners.min(axis=1), corners.max(axis=1)], axis=1)
    pmax = np.maximum.reduceat(np.array([f.pitch_max_nm for f in parts]), starts)
    sites = np.add.reduceat(np.array([f.sites for f in parts]), starts)
    dense = {r.name: r.dense_min_lines for r in deck.layers}
    out = []
    for g, (b, corner, box) in enumerate(
        zip(best.tolist(), corners.tolist(), boxes.tolist(), strict=True)
    ):
        f = regions[b].finding
        parts = [regions[k].line_points for k in groups[g].tolist()]
        points = np.unique(
            np.concatenate([q for q in parts if q is not None] or [np.zeros((0, 2))]), axis=0
        )
        lines = count_lines(points, canonical_normal(nrm[g]), grid_nm)
        merged = replaced(
            f,
            pitch_max_nm=float(pmax[g]),
            lines=lines,
            periodicity=periodicity_class(lines, dense[f.layer]),
            sites=int(sites[g]),
            run_nm=round(float(u1[g] - u0[g]), 3),
            bbox_nm=tuple(box),
            outline_nm=tuple(map(tuple, corner)),
        )
        out.append(Region(merged, hint_key=regions[b].hint_key))
    return out
