"""Regions: flagged sites of one direction and pitch class that touch, their lines and extent."""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from pitchguard.geometry.sites import Sites
from pitchguard.geometry.spatial import build_rtree, components, query_pairs_batched
from pitchguard.judge.findings import Finding

ORIENTATION_TOL_DEG = 0.5
"""Sites whose lines differ in direction by less than this may share a region (grid
snapping tilts the edges of rotated geometry by a few hundredths of a degree)."""


class Region(NamedTuple):
    """A flagged region: its finding and the geometry behind it (drawn nm).

    ``line_points``: one point on the axis of each line, as seen from each
    long edge of the region (k, 2); lines are counted from them, exactly also
    when a region cut by tile borders is merged.  A region of a tile of a
    tiled scan also keeps ``border_sites``, rows (4 corners x, y;
    orientation; pitch) of its sites near the tile's border, through which
    regions of neighbouring tiles join, with ``extent_nm``, the convex hull
    of all its sites' corners; and ``hint_key``, when its hint is left to the
    caller (see :func:`pitchguard.judge.hints.hint_text`).
    """

    finding: Finding
    line_points: np.ndarray | None = None
    border_sites: np.ndarray | None = None
    extent_nm: np.ndarray | None = None
    hint_key: tuple | None = None

    @property
    def on_border(self) -> bool:
        """Has sites near its tile's border (it may join regions of other tiles)."""
        return self.border_sites is not None and len(self.border_sites) > 0

    def finished(self) -> Region:
        """The region without what only a merge needs (its hint key stays)."""
        return Region(self.finding, hint_key=self.hint_key)


LINE_GAP_NM = 4.0
"""Line positions closer than this (or three database grid steps) are one line."""


def canonical_normal(normal: np.ndarray) -> np.ndarray:
    """The normal flipped, where needed, to point at an angle in [0, 180) degrees."""
    ang = np.degrees(np.arctan2(normal[..., 1], normal[..., 0]))
    flip = (ang < -1e-9) | (ang >= 180.0 - 1e-9)
    return np.where(flip[..., None], -normal, normal)


def line_points_of(fs: Sites, normal: np.ndarray, members: np.ndarray) -> np.ndarray:
    """Points (nm, 0.1 nm) on the members' line axes, one per long edge.

    Taken at the start of each site's edge (every piece of an edge gives the
    same point), half the line's width inside.  ``normal``: ``fs.normal``.
    """
    n = normal[members]
    w = np.where(np.isfinite(fs.width[members]), fs.width[members], 0.0)
    centre = fs.origin[members] - n * (0.5 * w)[:, None]
    return unique_rows(np.round(centre, 1))


def unique_rows(a: np.ndarray) -> np.ndarray:
    """``np.unique(a, axis=0)`` of an ``(n, 2)`` float array (sorted by the first
    column, then the second), without its general machinery: a region's few
    points are deduplicated per finding."""
    if len(a) < 2:
        return a.copy()
    order = np.lexsort((a[:, 1], a[:, 0]))
    s = a[order]
    keep = np.ones(len(s), dtype=bool)
    keep[1:] = (s[1:, 0] != s[:-1, 0]) | (s[1:, 1] != s[:-1, 1])
    return s[keep]


def count_lines(points: np.ndarray, normal: np.ndarray, grid_nm: float) -> int:
    """Lines among line-axis points: clusters of their positions along ``normal``
    (the region's worst site's canonical normal) more than LINE_GAP_NM apart."""
    if points is None or len(points) == 0:
        return 0
    gap = max(LINE_GAP_NM, 3.0 * grid_nm)
    pos = np.sort(np.asarray(points) @ normal)
    return 1 + int(np.sum(np.diff(pos) > gap))


HULL_FLAT = 1e-9
"""Points whose spread across their widest direction is below this share of
their extent count as collinear: all come back (the extremes are among them)."""

HULL_THIN = 1e-3
"""Points whose spread across their widest direction is below this share of their
extent are hulled exactly in Python (geometry.lattice.common.convex_hull), not by
Qhull: Qhull prints a precision warning on stderr for so narrow an initial hull
(its narrowness bound is an angle of about 1.4e-4 rad), and stops on collinear
points."""


def convex_hull(points: np.ndarray) -> np.ndarray:
    """The convex hull's vertices, in no set order (all points when they are
    collinear: the extremes are among them).

    gdstk's hull (the layout reader, loaded in every tile worker already; it
    runs Qhull), not scipy.spatial's, whose import in every tile worker would
    cost more than the hulls.  Thin or collinear sets go to an exact monotone
    chain instead (see HULL_THIN): a sliver's sites would make Qhull warn.
    """
    import gdstk

    from pitchguard.geometry.lattice.common import convex_hull as exact_hull

    pts = np.unique(points, axis=0)
    if len(pts) < 3:
        return pts
    c = pts.mean(axis=0)
    rel = pts - c
    far = rel[np.argmax(np.einsum("ij,ij->i", rel, rel))]
    span = float(np.hypot(*far))
    across = np.abs(rel[:, 0] * far[1] - rel[:, 1] * far[0]) / max(span, 1e-300)
    if span == 0.0 or across.max() <= HULL_FLAT * span:
        return pts
    if across.max() <= HULL_THIN * span:
        return exact_hull(pts)
    cell = gdstk.Cell("hull")
    cell.add(gdstk.Polygon(pts))
    return np.asarray(cell.convex_hull(), dtype=np.float64)


def periodicity_class(lines: int, dense_min: int) -> str:
    if lines >= dense_min:
        return "dense"
    if lines >= 2:
        return "semi-isolated"
    return "isolated"


def same_region_class(ang_i, ang_j, pitch_i, pitch_j, pitch_tol) -> np.ndarray:
    """Pairs of touching sites that may share a region: lines the same way (within
    ORIENTATION_TOL_DEG) and pitches within ``pitch_tol`` (or either infinite).
    The one rule for whole-layout regions and for parts joined across tiles."""
    dang = np.abs(ang_i - ang_j)
    ok = np.minimum(dang, 180.0 - dang) < ORIENTATION_TOL_DEG
    with np.errstate(invalid="ignore"):
        same_pitch = np.abs(pitch_i - pitch_j) <= pitch_tol
    return ok & (same_pitch | np.isinf(pitch_i) | np.isinf(pitch_j))


def rectangles_touch(ci: np.ndarray, cj: np.ndarray, d: np.ndarray, eps: float = 1e-6):
    """Site rectangles ``ci``, ``cj`` (k, 4, 2) overlap or touch (within ``eps``):
    their projections overlap on both axes of the frame of line direction ``d``
    (k, 2), which both share to within the orientation tolerance."""
    nrm = np.stack([d[:, 1], -d[:, 0]], axis=1)
    touch = np.ones(len(ci), dtype=bool)
    for axis in (d, nrm):
        pi = np.einsum("ikj,ij->ik", ci, axis)
        pj = np.einsum("ikj,ij->ik", cj, axis)
        touch &= (pi.min(axis=1) <= pj.max(axis=1) + eps) & (pj.min(axis=1) <= pi.max(axis=1) + eps)
    return touch


def region_labels(sites: Sites, severity: np.ndarray, pitch_tol: float) -> np.ndarray:
    """Region label per flagged site: adjacent sites of one orientation and pitch class.

    Severity does not split a region (the last lines of an array often image
    worse than its middle: one finding, with the worst severity).  A site with
    no neighbour within the interaction range (infinite pitch: the outer side of an
    array's last line) joins whatever it touches.
    """
    del severity  # kept in the signature: callers pass it, regions ignore it
    n = len(sites)
    corners = sites.corners()
    mins = corners.min(axis=1)
    maxs = corners.max(axis=1)
    qi, qj = query_pairs_batched(build_rtree(mins, maxs), mins, maxs, mins, maxs)
    keep = qi < qj
    qi, qj = qi[keep], qj[keep]
    ang, pitch = sites.orientation_deg, sites.pitch
    ok = same_region_class(ang[qi], ang[qj], pitch[qi], pitch[qj], pitch_tol)
    qi, qj = qi[ok], qj[ok]
    touch = rectangles_touch(corners[qi], corners[qj], sites.direction[qi])
    qi, qj = qi[touch], qj[touch]
    return components(n, qi, qj)[1]


SNAP_PITCH_SPREAD = 2.0 * math.sqrt(2.0)
"""Two sites of one array may differ in pitch by up to this many grid steps once
rotated geometry is snapped to the grid (each of the two edges that bound a
pitch moves by up to 0.5 (|cos| + |sin|) <= 0.71 grid)."""


def sites_near_border(corners: np.ndarray, tile, reach: float) -> np.ndarray:
    """Sites of a tile that sites of other tiles may touch.

    A site's rectangle reaches at most its width or space from its edge
    piece, and the piece lies in the tile; widths and spaces are found within
    the interaction range.  So a site of another tile can touch only sites whose rectangle
    comes within ``reach`` (the interaction range, plus a margin) of the tile's border.
    """
    x0, y0, x1, y1 = tile
    lo, hi = corners.min(axis=1), corners.max(axis=1)
    return (
        (lo[:, 0] <= x0 + reach)
        | (lo[:, 1] <= y0 + reach)
        | (hi[:, 0] >= x1 - reach)
        | (hi[:, 1] >= y1 - reach)
    )


def site_rows(
    corners: np.ndarray, angle: np.ndarray, pitch: np.ndarray, idx: np.ndarray
) -> np.ndarray:
    """Rows (4 corners x, y; orientation; pitch) of sites ``idx``."""
    return np.column_stack([corners[idx].reshape(len(idx), 8), angle[idx], pitch[idx]])
