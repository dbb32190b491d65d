"""Features -> sites: line/space pieces with width, space and run (through the spatial index)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from pitchguard.geometry.complex_edges import resolve_complex_arrays
from pitchguard.geometry.edge_frames import (
    EdgeFrames,
    edge_candidates,
    nearest_if_simple,
    pick_nearest,
)
from pitchguard.geometry.features import Edges
from pitchguard.geometry.spatial import QUERY_CHUNK

SITE_CELL_NM = 10_000.0
"""Site pieces are cut at this global grid (drawn nm), see :func:`find_sites`."""


@dataclass
class Sites:
    """1-D sites of one layer, one row per edge piece (struct of arrays)."""

    edge: np.ndarray  # index into Edges
    feature: np.ndarray
    u0: np.ndarray  # piece start along the edge, nm from the edge start
    u1: np.ndarray
    origin: np.ndarray  # (n, 2) edge start point
    direction: np.ndarray  # (n, 2) unit direction of the edge (material on the left)
    width: np.ndarray  # nm, inf when the far side is beyond the interaction range
    space: np.ndarray  # nm, inf when no neighbour within the interaction range

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
    isolated_sites: int = 0  # no neighbour within the interaction range
    edge_nm: float = 0.0  # total length of the features' edges
    judged_nm: float = 0.0  # length of the sites some check judged
    extra: dict = field(default_factory=dict)

    @property
    def coverage(self) -> float:
        """Share of the edge length some check judged (nan: no edges)."""
        return self.judged_nm / self.edge_nm if self.edge_nm > 0 else math.nan

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
            "edge_nm",
            "judged_nm",
        ):
            setattr(self, k, getattr(self, k) + times * getattr(other, k))
        for k, v in other.extra.items():
            self.extra[k] = self.extra.get(k, 0) + times * v


def find_sites(
    edges: Edges,
    min_run_nm: float,
    reach_nm: float,
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
    (default a third of the interaction range; dense arrays are settled there with few
    candidates), then within the full interaction range for the edges the first pass did
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
    stats.edge_nm = float(length.sum()) if region is None else length_in_region(a, b, region)
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
    frames = EdgeFrames(a, b, d, eps)
    w1 = min(reach_nm, first_window_nm if first_window_nm else reach_nm / 3.0)

    parts: list[Sites] = []
    complex_cands: list[tuple] = []  # per chunk: (i, side, lo, hi, dist, facing, j)
    complex_edges: list[np.ndarray] = []

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
        cand = edge_candidates(*frames.pairs(ids, nrm, w1), a, d, nrm, length, w1, eps)
        width, space, fw, fs, _, _ = nearest_if_simple(ids, *pick_nearest(cand), length, slack)
        done = fw & fs
        settled_sites(ids[done], width[done], space[done])
        # Pass 2: the full interaction range for the rest.
        rest = ids[~done]
        if len(rest) == 0:
            continue
        i, j, lo, hi, dist, side, facing = edge_candidates(
            *frames.pairs(rest, nrm, reach_nm), a, d, nrm, length, reach_nm, eps
        )
        width, space, fw, fs, hw, hs = nearest_if_simple(
            rest, i, lo, hi, dist, side, facing, length, slack
        )
        simple = (fw | ~hw) & (fs | ~hs)  # a side with nothing at all is settled (inf)
        settled_sites(rest[simple], width[simple], space[simple])
        hard = np.zeros(len(length), dtype=bool)
        hard[rest[~simple]] = True
        sel = hard[i]
        complex_cands.append((i[sel], side[sel], lo[sel], hi[sel], dist[sel], facing[sel], j[sel]))
        # Edges in order of their first candidate, then those with none.
        firsts = np.unique(i[sel], return_index=True)
        with_cands = firsts[0][np.argsort(firsts[1], kind="stable")]
        complex_edges.append(with_cands)
        complex_edges.append(np.setdiff1d(rest[~simple], with_cands, assume_unique=True))

    cands = tuple(np.concatenate(c) for c in zip(*complex_cands, strict=True))
    pieces, flat = (
        resolve_complex_arrays(np.concatenate(complex_edges), length, cands, min_run_nm, eps)
        if complex_edges
        else ((np.zeros(0, np.int64),) * 5, (np.zeros(0, np.int64),) * 3)
    )
    n_flat = len(flat[0])
    if region is not None and n_flat:
        e2, f0, f1 = flat
        p0 = a[e2] + d[e2] * f0[:, None]
        p1 = a[e2] + d[e2] * f1[:, None]
        n_flat = int(in_region(_lowest_left(p0, p1), region).sum())
    stats.pieces_2d = n_flat
    if len(pieces[0]):
        e_arr, p0, p1, pw, ps = pieces
        parts.append(
            Sites(
                edge=e_arr,
                feature=edges.feature[e_arr],
                u0=p0,
                u1=p1,
                origin=a[e_arr],
                direction=d[e_arr],
                width=pw,
                space=ps,
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


def length_in_region(a: np.ndarray, b: np.ndarray, region) -> float:
    """Total length of segments ``a``-``b`` inside ``region`` (x0, y0, x1, y1), taken
    as ``x0 <= x < x1``, ``y0 <= y < y1`` so the regions of a tiling add up."""
    x0, y0, x1, y1 = region
    hi_x, hi_y = np.nextafter(x1, -np.inf), np.nextafter(y1, -np.inf)
    d = b - a
    w0, w1 = np.zeros(len(a)), np.ones(len(a))
    miss = np.zeros(len(a), dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        for p, room in (
            (-d[:, 0], a[:, 0] - x0),
            (d[:, 0], hi_x - a[:, 0]),
            (-d[:, 1], a[:, 1] - y0),
            (d[:, 1], hi_y - a[:, 1]),
        ):
            r = room / p
            w0 = np.where(p < 0, np.maximum(w0, r), w0)
            w1 = np.where(p > 0, np.minimum(w1, r), w1)
            miss |= (p == 0) & (room < 0)
    keep = ~miss & (w1 > w0)
    return float((np.hypot(d[keep, 0], d[keep, 1]) * (w1[keep] - w0[keep])).sum())


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
