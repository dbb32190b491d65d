"""Judge sites against a layer's rules and merge them into regions (findings).

Checks (stable identifiers; see "Checks" in README.md):

``unresolvable-pitch`` (severity ``fail``)
    No source point sends the 0th and a 1st diffraction order through the
    pupil for this pitch and direction: the image is uniform, nothing prints.
``low-k1`` (severity ``risk`` or ``marginal``)
    k1 = (p / 2) NA / lambda lies below the layer's ``k1_risk_below`` or
    ``k1_marginal_below`` band.
``feature-not-printed`` / ``features-bridged`` (``fail``)
    In the aerial image of the site's real cut, at best focus and nominal
    dose, the feature has no threshold crossing, or it runs into its
    neighbour.
``low-nils`` (``fail`` / ``risk`` / ``marginal``), ``low-exposure-latitude``,
``low-depth-of-focus``, ``cd-error`` (``risk``)
    Image metrics below the layer's limits (see printing.py).

Adjacent sites of one layer with the same orientation, pitch class (within
``pitch_tolerance_nm``) and severity are merged into one region; one finding
per region.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from pitchguard.deck import SEVERITIES, LayerRule
from pitchguard.extract import Sites, _query_pairs_batched, _rtree, components
from pitchguard.orders import OrderResult, analyse_pitch
from pitchguard.printing import Metrics

OK = len(SEVERITIES)
"""Severity code of a site that passes (codes 0.. are indexes into SEVERITIES)."""

CHECKS = {
    "unresolvable-pitch": "No source point sends the 0th and a 1st diffraction order "
    "through the pupil: the pitch cannot image.",
    "feature-not-printed": "At best focus and nominal dose the feature's image never "
    "crosses the threshold: it does not print.",
    "features-bridged": "At best focus and nominal dose the printed feature runs into "
    "its neighbour.",
    "low-k1": "k1 = (pitch/2) NA / lambda is below the layer's k1 band.",
    "low-nils": "The normalised image log-slope at the drawn edges is below the layer's NILS band.",
    "low-exposure-latitude": "The dose range holding CD within tolerance is below el_min_pct.",
    "low-depth-of-focus": "The focus range holding CD within tolerance with el_min_pct "
    "exposure latitude is below dof_min_nm.",
    "cd-error": "At the anchored dose the printed CD is off the drawn CD by more than "
    "cd_tolerance_pct.",
}
"""Check identifiers and one-line descriptions (stable: baselines refer to them)."""

ORIENTATION_TOL_DEG = 0.5
"""Sites whose lines differ in direction by less than this may share a region (grid
snapping tilts the edges of rotated geometry by a few hundredths of a degree)."""


@dataclass(frozen=True)
class Violation:
    """One limit a site breaks: which check, how bad, the value against the limit."""

    check: str
    severity: str
    value: float
    limit: float
    message: str


@dataclass(frozen=True, slots=True)
class Finding:
    """One region of one layer that breaks a check.  Every report renders this."""

    layer: str
    source: str  # "L/D" in the layout
    exposure: str
    check: str
    severity: str
    pitch_nm: float  # smallest pitch in the region, as drawn
    pitch_max_nm: float
    width_nm: float  # of the worst site, as drawn (line, or opening on a dark field)
    space_nm: float
    wafer_pitch_nm: float
    k1: float
    orientation_deg: float  # direction the lines run, 0 = along x
    orders: tuple[int, ...]
    orders_on_axis: tuple[int, ...]
    two_beam_fraction: float
    cutoff_pitch_nm: float  # wafer scale
    lines: int
    periodicity: str  # dense | semi-isolated | isolated
    sites: int
    run_nm: float  # longest run length among the region's sites, as drawn
    bbox_nm: tuple[float, float, float, float]
    outline_nm: tuple[tuple[float, float], ...]  # oriented rectangle, 4 corners
    limit: str
    message: str
    hint: str
    # Image metrics of the worst site (nan when not imaged); CDs in wafer nm.
    contrast: float = math.nan
    nils: float = math.nan
    cd_nm: float = math.nan
    cd_error_pct: float = math.nan
    el_pct: float = math.nan
    dof_nm: float = math.nan
    violations: tuple[Violation, ...] = ()
    context: str = ""  # worst site's line: interior | outer (last line of an array) | alone
    # The worst site's cut, for pictures: material boundaries (wafer nm, relative
    # to the feature centre), the pitch direction of the cut in the layout
    # (degrees), where the cut crosses the worst edge (drawn nm), and the
    # nominal threshold.
    # Until regions are final (scans drop them then): one point (nm, 0.1 nm) on the
    # axis of each line, as seen from each long edge of the region, (k, 2).  Counts
    # lines, and lets regions cut by tile borders be merged exactly.
    line_points: np.ndarray | None = field(default=None, compare=False, repr=False)
    cut_bounds_nm: tuple[float, ...] = ()
    cut_angle_deg: float = math.nan
    cut_origin_nm: tuple[float, float] = (math.nan, math.nan)
    threshold: float = math.nan
    # Tiled scans only, until tiles are merged: the region's sites near its tile's
    # border, rows (4 corners x, y; orientation; pitch), drawn nm.  Regions of
    # neighbouring tiles are merged exactly where such sites touch.
    border_sites: np.ndarray | None = field(default=None, compare=False, repr=False)
    # ... and the convex hull (k, 2) of all its sites' corners: the region's extent
    # in any frame, for the outline of a merged region.
    extent_nm: np.ndarray | None = field(default=None, compare=False, repr=False)
    # Tiled scans only, until hints are made: what the hint is made from (see
    # hint_key); the scan makes each distinct hint once, spread over its workers.
    hint_key: tuple | None = field(default=None, compare=False, repr=False)

    @property
    def bbox_um(self) -> tuple[float, float, float, float]:
        return box_um(self.bbox_nm)

    @property
    def centre_um(self) -> tuple[float, float]:
        return centre_um(self.bbox_um)

    @property
    def severity_rank(self) -> int:
        return SEVERITIES.index(self.severity)


def box_um(bbox_nm) -> tuple[float, float, float, float]:
    """A box in nm as reports give it: um, to the 0.001 nm the layout can hold."""
    return tuple(round(v / 1000.0, 6) for v in bbox_nm)


def centre_um(bbox_um) -> tuple[float, float]:
    """The centre of a box in um (:func:`box_um`), as reports give it."""
    x0, y0, x1, y1 = bbox_um
    return (round((x0 + x1) / 2, 4), round((y0 + y1) / 2, 4))


def finding_copier(changed: tuple[str, ...]):
    """``copier(f, *values)``: a copy of finding ``f`` with the fields ``changed`` set.

    Straight-line code, generated the way :mod:`dataclasses` generates
    ``__init__``, that sets each slot through its descriptor: 2.0 us a copy
    against 4.8 us for a loop over the fields and about 15 us for
    ``dataclasses.replace`` (measured on the development machine).  Tiled
    scans of a chip read 10^5-10^6 copies of a few hundred findings.
    """
    env = {"_new": object.__new__, "_cls": Finding}
    body = ["def copier(f, " + ", ".join(changed) + "):", "    g = _new(_cls)"]
    for name in Finding.__slots__:
        env["_set_" + name] = getattr(Finding, name).__set__
        body.append(f"    _set_{name}(g, {name if name in changed else 'f.' + name})")
    body.append("    return g")
    exec("\n".join(body), env)  # noqa: S102 - code built above from the slot names only
    return env["copier"]


_placer = finding_copier(("bbox_nm", "outline_nm", "cut_origin_nm"))


class FindingSet(Sequence):
    """Findings stored as distinct findings and the offsets they recur at.

    A layout repeats itself: a tiled scan of a chip finds 10^5-10^6 regions
    that are copies of a few hundred, moved.  Item ``k`` is
    ``distinct[which[k]]`` moved by ``offset[k]`` (nm); it is made when it is
    read (about 2-3 us) and is equal, field for field, to a finding made at
    that place.  Counting, sorting and gating work on the columns without
    making the items.  Reads as a list of :class:`Finding` (and compares
    equal to one with the same items).
    """

    __slots__ = ("distinct", "which", "offset")

    def __init__(self, distinct: list[Finding], which: np.ndarray, offset: np.ndarray):
        self.distinct = distinct
        self.which = np.asarray(which, dtype=np.int64)
        self.offset = np.asarray(offset, dtype=np.float64).reshape(-1, 2)
        if len(self.which) != len(self.offset):
            raise ValueError("which and offset differ in length")

    @classmethod
    def of(cls, findings: Sequence[Finding]) -> FindingSet:
        """``findings`` as a set, each its own distinct finding."""
        if isinstance(findings, FindingSet):
            return findings
        n = len(findings)
        return cls(list(findings), np.arange(n), np.zeros((n, 2)))

    def __len__(self) -> int:
        return len(self.which)

    def _item(self, d: int, dx: float, dy: float) -> Finding:
        f = self.distinct[d]
        if dx == 0.0 and dy == 0.0:
            return f
        x0, y0, x1, y1 = f.bbox_nm
        cx, cy = f.cut_origin_nm
        return _placer(
            f,
            (x0 + dx, y0 + dy, x1 + dx, y1 + dy),
            tuple([(x + dx, y + dy) for x, y in f.outline_nm]),
            (cx + dx, cy + dy),
        )

    def __getitem__(self, k):
        if isinstance(k, slice):
            return FindingSet(self.distinct, self.which[k], self.offset[k])
        dx, dy = self.offset[k].tolist()
        return self._item(int(self.which[k]), dx, dy)

    def __iter__(self) -> Iterator[Finding]:
        chunk = 4096
        for c in range(0, len(self.which), chunk):
            which = self.which[c : c + chunk].tolist()
            for d, (dx, dy) in zip(which, self.offset[c : c + chunk].tolist(), strict=True):
                yield self._item(d, dx, dy)

    def __eq__(self, other) -> bool:
        if not isinstance(other, Sequence) or isinstance(other, str):
            return NotImplemented
        return len(self) == len(other) and all(a == b for a, b in zip(self, other, strict=True))

    __hash__ = None  # mutable container semantics, as a list

    def __repr__(self) -> str:
        return f"FindingSet({len(self)} findings, {len(self.distinct)} distinct)"

    def counts(self) -> np.ndarray:
        """How many items each distinct finding has (0 for those not among them)."""
        return np.bincount(self.which, minlength=len(self.distinct))

    def boxes(self) -> np.ndarray:
        """Per item: ``bbox_nm`` (n, 4)."""
        base = np.array([f.bbox_nm for f in self.distinct], dtype=np.float64).reshape(-1, 4)
        return base[self.which] + np.tile(self.offset, 2)

    def box_pairs(self) -> np.ndarray:
        """Per item: ``bbox_nm`` as two complex numbers, ``x0 + i y0`` and
        ``x1 + i y1`` (2, n); the same sums as :meth:`boxes`, made in place (a
        chip's million findings: a third of the memory to touch)."""
        base = np.array([f.bbox_nm for f in self.distinct], dtype=np.float64).reshape(-1, 4)
        pairs = np.empty((2, len(self.which)), dtype=np.complex128)
        for k, (part, c) in enumerate(
            ((pairs[0].real, 0), (pairs[0].imag, 1), (pairs[1].real, 2), (pairs[1].imag, 3))
        ):
            np.add(base[:, c][self.which], self.offset[:, k % 2], out=part)
        return pairs

    def select(self, keep) -> FindingSet:
        """The items picked by a boolean mask or an index array, in that order."""
        return FindingSet(self.distinct, self.which[keep], self.offset[keep])


def sort_findings(findings: Sequence[Finding]) -> Sequence[Finding]:
    """Worst first: by severity, k1, layer, then position (the order every report uses).

    The same order as ``sorted`` on ``(severity_rank, k1, layer, bbox_nm)``, worked
    out with numpy: a scan of a chip may hold 10^5 to 10^6 findings.  A
    :class:`FindingSet` is sorted without making its items.
    """
    if len(findings) < 2:
        return findings[:] if isinstance(findings, FindingSet) else list(findings)
    if isinstance(findings, FindingSet):
        # (severity, k1, layer) ranked once per distinct finding, then each item by
        # that rank and its box.
        rank = _severity_k1_layer_ranks(findings.distinct)[findings.which]
        return findings.select(_box_order(rank, findings.box_pairs()))
    box = np.array([f.bbox_nm for f in findings], dtype=np.float64).reshape(-1, 4)
    pairs = np.empty((2, len(box)), dtype=np.complex128)
    pairs.real = box[:, [0, 2]].T
    pairs.imag = box[:, [1, 3]].T
    order = _box_order(_severity_k1_layer_ranks(findings), pairs)
    return [findings[k] for k in order.tolist()]


def _severity_k1_layer_ranks(findings: Sequence[Finding]) -> np.ndarray:
    """Dense ranks of ``(severity rank, k1, layer)``: equal keys, equal rank."""
    rank = {s: k for k, s in enumerate(SEVERITIES)}
    sev = np.array([rank[f.severity] for f in findings], dtype=np.float64)
    k1 = np.array([f.k1 for f in findings], dtype=np.float64)
    _, layer = np.unique([f.layer for f in findings], return_inverse=True)
    key = np.stack([sev, k1, layer.reshape(-1).astype(np.float64)], 1)
    _, dense = np.unique(key, axis=0, return_inverse=True)
    dense = dense.reshape(-1)
    # 16 bits when they suffice: numpy sorts those by radix, and the per-item
    # copies of a chip's findings take a quarter of the memory.
    return dense.astype(np.int16) if dense.max(initial=0) < 2**15 else dense


def _box_order(rank: np.ndarray, pairs: np.ndarray) -> np.ndarray:
    """Stable order by ``rank``, then box ``(x0, y0, x1, y1)``, given as the
    complex pairs ``(x0 + i y0, x1 + i y1)`` (see :meth:`FindingSet.box_pairs`).

    Equal to ``np.lexsort`` on the five keys, in fewer passes: each pair of
    coordinates is one complex key (numpy orders complex numbers by real,
    then imaginary part).
    """
    return np.lexsort((pairs[1], pairs[0], rank))


def _fmt(x: float) -> str:
    return f"{x:.1f}"


def violations(
    rule: LayerRule, res: OrderResult, metrics: Metrics | None, pitch_wafer: float
) -> list[Violation]:
    """Every limit a site breaks, worst first."""
    out: list[Violation] = []
    if math.isfinite(pitch_wafer) and not res.resolvable:
        out.append(
            Violation(
                "unresolvable-pitch",
                "fail",
                pitch_wafer,
                res.cutoff_pitch_nm,
                f"pitch {_fmt(pitch_wafer)} nm (wafer) is below the {_fmt(res.cutoff_pitch_nm)} nm "
                "this exposure can image in this direction: no source point sends a 1st order "
                "through the pupil",
            )
        )
    m = metrics
    if m is not None:
        if m.lost:
            out.append(
                Violation(
                    "feature-not-printed",
                    "fail",
                    m.contrast,
                    0.0,
                    f"the feature does not print at best focus and nominal dose "
                    f"(image contrast {m.contrast:.3f})",
                )
            )
        elif m.bridged:
            out.append(
                Violation(
                    "features-bridged",
                    "fail",
                    m.contrast,
                    0.0,
                    "the printed feature runs into its neighbour at best focus and nominal dose",
                )
            )
    if math.isfinite(pitch_wafer):
        k1_bands = (
            ("risk", rule.k1_risk_below, "k1_risk_below"),
            ("marginal", rule.k1_marginal_below, "k1_marginal_below"),
        )
        for sev, band, key in k1_bands:
            if res.k1 < band:
                out.append(
                    Violation(
                        "low-k1",
                        sev,
                        res.k1,
                        band,
                        f"k1 {res.k1:.3f} is below {band:g} ({key}) at pitch "
                        f"{_fmt(pitch_wafer)} nm (wafer)",
                    )
                )
                break
    if m is not None and not (m.lost or m.bridged):
        nils_bands = (
            ("fail", rule.nils_fail_below, "nils_fail_below"),
            ("risk", rule.nils_risk_below, "nils_risk_below"),
            ("marginal", rule.nils_marginal_below, "nils_marginal_below"),
        )
        for sev, band, key in nils_bands:
            if m.nils < band:
                out.append(
                    Violation(
                        "low-nils",
                        sev,
                        m.nils,
                        band,
                        f"NILS {m.nils:.2f} at the drawn edges is below {band:g} ({key})",
                    )
                )
                break
        if m.el_pct < rule.el_min_pct:
            out.append(
                Violation(
                    "low-exposure-latitude",
                    "risk",
                    m.el_pct,
                    rule.el_min_pct,
                    f"exposure latitude {m.el_pct:.1f} % is below {rule.el_min_pct:g} % "
                    f"(CD within +-{rule.cd_tolerance_pct:g} %)",
                )
            )
        if m.dof_nm < rule.dof_min_nm:
            out.append(
                Violation(
                    "low-depth-of-focus",
                    "risk",
                    m.dof_nm,
                    rule.dof_min_nm,
                    f"depth of focus {m.dof_nm:.0f} nm is below {rule.dof_min_nm:.0f} nm "
                    f"(at {rule.el_min_pct:g} % exposure latitude)",
                )
            )
        if math.isfinite(m.cd_error_pct) and abs(m.cd_error_pct) > rule.cd_tolerance_pct:
            out.append(
                Violation(
                    "cd-error",
                    "risk",
                    m.cd_error_pct,
                    rule.cd_tolerance_pct,
                    f"printed CD {m.cd_nm:.1f} nm is {m.cd_error_pct:+.1f} % off drawn at the "
                    f"anchored dose (tolerance +-{rule.cd_tolerance_pct:g} %)",
                )
            )
    out.sort(key=lambda v: SEVERITIES.index(v.severity))
    return out


def _code(vs: list[Violation]) -> int:
    return SEVERITIES.index(vs[0].severity) if vs else OK


def judge_sites(
    sites: Sites,
    rule: LayerRule,
    scale_to_wafer: float,
    metrics: list[Metrics] | None = None,
    which_cut: np.ndarray | None = None,
) -> tuple[np.ndarray, list[OrderResult], np.ndarray, dict]:
    """Severity code per site, with the analyses behind it.

    Returns ``(severity, results, which, found)``: ``results[which[k]]`` is
    the order analysis of site ``k`` (identical pitch/orientation pairs are
    analysed once) and ``found[(which[k], which_cut[k])]`` its violations.
    """
    n = len(sites)
    if n == 0:
        return np.zeros(0, dtype=np.int8), [], np.zeros(0, dtype=np.int64), {}
    pitch = sites.pitch * scale_to_wafer
    finite = np.isfinite(pitch)
    key = np.stack(
        [
            np.where(finite, np.round(pitch, 2), -1.0),
            np.round(sites.orientation_deg, 2) % 180.0,
        ],
        axis=1,
    )
    uniq, which = np.unique(key, axis=0, return_inverse=True)
    which = which.ravel()
    results = [
        analyse_pitch(rule.exposure, p if p > 0 else math.inf, float(ang)) for p, ang in uniq
    ]
    if which_cut is None:
        which_cut = np.full(n, -1, dtype=np.int64)
    pair = which.astype(np.int64) * (len(metrics or []) + 1) + (which_cut + 1)
    upair, inv = np.unique(pair, return_inverse=True)
    found: dict = {}
    codes = np.empty(len(upair), dtype=np.int8)
    for k, pv in enumerate(upair.tolist()):
        w, c = divmod(pv, len(metrics or []) + 1)
        p = uniq[w][0]
        m = metrics[c - 1] if (metrics and c > 0) else None
        vs = violations(rule, results[w], m, p if p > 0 else math.inf)
        found[(w, c - 1)] = vs
        codes[k] = _code(vs)
    return codes[inv.ravel()], results, which, found


LINE_GAP_NM = 4.0
"""Line positions closer than this (or three database grid steps) are one line."""


def canonical_normal(normal: np.ndarray) -> np.ndarray:
    """The normal flipped, where needed, to point at an angle in [0, 180) degrees."""
    ang = np.degrees(np.arctan2(normal[..., 1], normal[..., 0]))
    flip = (ang < -1e-9) | (ang >= 180.0 - 1e-9)
    return np.where(flip[..., None], -normal, normal)


def _line_points(fs: Sites, normal: np.ndarray, members: np.ndarray) -> np.ndarray:
    """Points (nm, 0.1 nm) on the members' line axes, one per long edge.

    Taken at the start of each site's edge (every piece of an edge gives the
    same point), half the line's width inside.  ``normal``: ``fs.normal``.
    """
    n = normal[members]
    w = np.where(np.isfinite(fs.width[members]), fs.width[members], 0.0)
    centre = fs.origin[members] - n * (0.5 * w)[:, None]
    return np.unique(np.round(centre, 1), axis=0)


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
their extent count as collinear (see :func:`_hull`)."""


def _hull(points: np.ndarray) -> np.ndarray:
    """The convex hull's vertices, in no set order (all points when they are
    collinear: the extremes are among them).

    gdstk's hull (the layout reader, loaded in every tile worker already; it
    runs Qhull), not scipy.spatial's: importing that took 0.32 s in every
    tile worker, for this alone (measured on the 10^7-shape benchmark chip).
    Qhull prints an error on collinear input, so that is caught first.
    """
    import gdstk

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
    cell = gdstk.Cell("hull")
    cell.add(gdstk.Polygon(pts))
    return np.asarray(cell.convex_hull(), dtype=np.float64)


def _periodicity(lines: int, dense_min: int) -> str:
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


def _regions(sites: Sites, severity: np.ndarray, pitch_tol: float) -> np.ndarray:
    """Region label per flagged site: adjacent sites of one orientation and pitch class.

    Severity does not split a region (the last lines of an array often image
    worse than its middle: one finding, with the worst severity).  A site with
    no neighbour within the ambit (infinite pitch: the outer side of an
    array's last line) joins whatever it touches.
    """
    del severity  # kept in the signature: callers pass it, regions ignore it
    n = len(sites)
    corners = sites.corners()
    mins = corners.min(axis=1)
    maxs = corners.max(axis=1)
    qi, qj = _query_pairs_batched(_rtree(mins, maxs), mins, maxs, mins, maxs)
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


IMAGE_CHECKS = (
    "feature-not-printed",
    "features-bridged",
    "low-nils",
    "low-exposure-latitude",
    "low-depth-of-focus",
    "cd-error",
)
HINT_RANGE = (0.6, 2.0)
"""Pitches tried for a fix hint, as fractions of the flagged pitch."""


HINT_IMAGES = 16
"""At most this many candidate pitches are imaged per hint (nearest first)."""


@lru_cache(maxsize=4096)
def _grating_orders_ok(rule: LayerRule, pitch_q: int, angle_q: int, quantum: float) -> bool:
    pitch, angle = pitch_q * quantum, angle_q / 10.0
    res = analyse_pitch(rule.exposure, pitch, (angle - 90.0) % 180.0)
    return not violations(rule, res, None, pitch)


_passes_given: dict[tuple, bool] = {}  # (rule values, cd_q, pitch_q, angle_q, quantum) -> passes
_passes_fresh: list[tuple] = []


def _rule_values(rule: LayerRule) -> tuple:
    """A layer rule by value (equal for equal exposures and limits, in any process)."""
    return tuple(getattr(rule, k) for k in type(rule).__slots__)


def take_grating_passes() -> list[tuple]:
    """Ideal gratings judged here since the last call, to share with other
    processes: rows ``(rule values, cd_q, pitch_q, angle_q, quantum, passes)``
    (see :func:`give_grating_passes`)."""
    rows = list(_passes_fresh)
    _passes_fresh.clear()
    return rows


def give_grating_passes(rows) -> None:
    """Take gratings another process judged (:func:`take_grating_passes`); a row
    serves only a rule equal to the one it was judged under."""
    if len(_passes_given) + len(rows) > 65536:
        _passes_given.clear()
    for *key, passes in rows:
        _passes_given[tuple(key)] = passes


@lru_cache(maxsize=4096)
def _grating_passes(rule: LayerRule, cd_q: int, pitch_q: int, angle_q: int, quantum: float):
    """True when an ideal grating of this CD and pitch (wafer nm) breaks no limit."""
    key = (_rule_values(rule), cd_q, pitch_q, angle_q, quantum)
    given = _passes_given.get(key)
    if given is not None:
        return given
    passes = _judge_grating(rule, cd_q, pitch_q, angle_q, quantum)
    _passes_fresh.append((*key, passes))
    return passes


def _judge_grating(rule: LayerRule, cd_q: int, pitch_q: int, angle_q: int, quantum: float):
    from pitchguard.measure import grating_metrics

    if not _grating_orders_ok(rule, pitch_q, angle_q, quantum):
        return False
    if not rule.image_checks:
        return True
    cd, pitch, angle = cd_q * quantum, pitch_q * quantum, angle_q / 10.0
    res = analyse_pitch(rule.exposure, pitch, (angle - 90.0) % 180.0)
    m, _, _ = grating_metrics(rule, pitch, cd, angle)
    return not violations(rule, res, m, pitch)


def passing_pitch(rule: LayerRule, cd_nm: float, pitch_nm: float, angle_deg: float) -> float:
    """Nearest pitch (wafer nm) at this CD whose ideal grating breaks no limit, or nan.

    ``angle_deg`` is the pitch direction.  Pitches on a grid of lambda/NA / 20
    between 0.6x and 2x the flagged pitch are tried nearest first; those that
    pass the order and k1 rules are imaged, at most ``HINT_IMAGES`` of them.
    """
    quantum = rule.exposure.lambda_over_na_nm / 20.0
    cd_q = int(round(cd_nm / quantum))
    angle_q = int(round((angle_deg % 180.0) * 10))
    lo = max(int(math.ceil(HINT_RANGE[0] * pitch_nm / quantum)), int(cd_q * 1.05) + 1)
    hi = int(HINT_RANGE[1] * pitch_nm / quantum)
    here = pitch_nm / quantum
    imaged = 0
    for q in sorted(range(lo, hi + 1), key=lambda q: (abs(q - here), q)):
        if not _grating_orders_ok(rule, q, angle_q, quantum):
            continue
        if _grating_passes(rule, cd_q, q, angle_q, quantum):
            return q * quantum
        imaged += 1
        if imaged >= HINT_IMAGES:
            break
    return math.nan


def hint_key(
    vs: list[Violation] | tuple,
    cutoff_pitch_nm: float,
    cd_w: float,
    pitch_w: float,
    angle: float,
    scale: float,
) -> tuple:
    """All a finding's hint depends on, besides its layer's rule (plain values)."""
    return (tuple(v.check for v in vs), cutoff_pitch_nm, cd_w, pitch_w, angle, scale)


def hint_text(rule: LayerRule, key: tuple) -> str:
    """What to change, in drawn nm (kept per process: hints recur)."""
    return _hint_cached(rule, *key)


@lru_cache(maxsize=65536)
def _hint_cached(
    rule: LayerRule,
    checks: tuple[str, ...],
    cutoff_pitch_nm: float,
    cd_w: float,
    pitch_w: float,
    angle: float,
    scale: float,
) -> str:
    first = checks[0]
    feature = "line" if rule.field == "clear" else "opening"
    if first == "unresolvable-pitch":
        need = cutoff_pitch_nm / scale
        return (
            f"widen the pitch to at least {math.ceil(need * 10) / 10:.1f} nm, or use "
            "illumination that reaches further along the pitch direction"
        )
    if all(c == "low-k1" for c in checks):
        need = 2.0 * rule.k1_marginal_below * rule.exposure.lambda_over_na_nm / scale
        return (
            f"a pitch of at least {math.ceil(need * 10) / 10:.1f} nm reaches k1 "
            f"{rule.k1_marginal_below:g}"
        )
    if not math.isfinite(cd_w) or not math.isfinite(pitch_w):
        return f"widen the {feature} or give it neighbours at a regular pitch"
    ok = passing_pitch(rule, cd_w, pitch_w, angle)
    if math.isnan(ok):
        return (
            f"no nearby pitch passes at this {feature} width: widen the {feature}, or "
            "change the exposure (try `pitchguard sweep` for this layer and width)"
        )
    p_d, s_d = ok / scale, (ok - cd_w) / scale
    return f"at this {feature} width, pitch {p_d:.1f} nm (space {s_d:.1f} nm) passes every limit"


def _near_border(corners: np.ndarray, tile, reach: float) -> np.ndarray:
    """Sites of a tile that sites of other tiles may touch.

    A site's rectangle reaches at most its width or space from its edge
    piece, and the piece lies in the tile; widths and spaces are found within
    the ambit.  So a site of another tile can touch only sites whose rectangle
    comes within ``reach`` (the ambit, plus a margin) of the tile's border.
    """
    x0, y0, x1, y1 = tile
    lo, hi = corners.min(axis=1), corners.max(axis=1)
    return (
        (lo[:, 0] <= x0 + reach)
        | (lo[:, 1] <= y0 + reach)
        | (hi[:, 0] >= x1 - reach)
        | (hi[:, 1] >= y1 - reach)
    )


def _site_rows(
    corners: np.ndarray, angle: np.ndarray, pitch: np.ndarray, idx: np.ndarray
) -> np.ndarray:
    """Rows (4 corners x, y; orientation; pitch) of sites ``idx``."""
    return np.column_stack([corners[idx].reshape(len(idx), 8), angle[idx], pitch[idx]])


def classify_layer(
    sites: Sites,
    rule: LayerRule,
    scale_to_wafer: float,
    grid_nm: float = 1.0,
    metrics: list[Metrics] | None = None,
    which_cut: np.ndarray | None = None,
    cuts: list | None = None,
    tile_nm: tuple[float, float, float, float] | None = None,
    defer_hints: bool = False,
) -> list[Finding]:
    """Findings (one per region) for the sites of one layer.

    ``metrics[which_cut[k]]`` are the image metrics of site ``k`` (-1: not
    imaged).  Sites merge into a region when their pitches differ by at most
    ``max(pitch_tolerance_nm, SNAP_PITCH_SPREAD * grid_nm)`` (drawn nm).
    With ``tile_nm`` (a tile of a tiled scan) each finding keeps its sites
    that sites of other tiles could touch (:attr:`Finding.border_sites`).
    With ``defer_hints`` findings get an empty hint and the key to make it
    from (:attr:`Finding.hint_key`, see :func:`hint_text`).
    """
    severity, results, which, found = judge_sites(sites, rule, scale_to_wafer, metrics, which_cut)
    flagged = np.flatnonzero(severity < OK)
    if len(flagged) == 0:
        return []
    fs = sites.take(flagged)
    sev = severity[flagged]
    cut_of = which_cut[flagged] if which_cut is not None else np.full(len(flagged), -1)
    tol = max(rule.pitch_tolerance_nm / scale_to_wafer, SNAP_PITCH_SPREAD * grid_nm)
    labels = _regions(fs, sev, tol)
    order = np.argsort(labels, kind="stable")
    bounds = np.flatnonzero(np.diff(labels[order])) + 1
    corners_all = fs.corners()
    pitch_all = fs.pitch
    angle_all = fs.orientation_deg
    normal_all = fs.normal
    mid_all = fs.midpoints()
    near_border = None
    if tile_nm is not None:
        reach = rule.ambit_nm / scale_to_wafer + 2.0 * grid_nm
        near_border = _near_border(corners_all, tile_nm, reach)
    out = []
    for members in np.split(order, bounds):
        # The worst site: most severe, then smallest pitch (finite pitches first).
        # Ties broken by position, so the choice does not depend on site order.
        mids = mid_all[members]
        rank = np.lexsort(
            (
                np.round(mids[:, 0], 3),
                np.round(mids[:, 1], 3),
                np.round(pitch_all[members], 3),
                sev[members],
            )
        )
        worst = members[rank[0]]
        code = int(sev[worst])
        w_idx, c_idx = int(which[flagged[worst]]), int(cut_of[worst])
        res = results[w_idx]
        vs = found[(w_idx, c_idx)]
        m = metrics[c_idx] if (metrics and c_idx >= 0) else None
        d = fs.direction[worst]
        nrm = np.array([d[1], -d[0]])
        pts = corners_all[members].reshape(-1, 2)
        pu, pv = pts @ d, pts @ nrm
        u0, u1, v0, v1 = pu.min(), pu.max(), pv.min(), pv.max()
        outline = tuple(
            (float(x), float(y))
            for x, y in (d * u0 + nrm * v0, d * u1 + nrm * v0, d * u1 + nrm * v1, d * u0 + nrm * v1)
        )
        # The box of the outline (not of the sites): the same whether a region
        # was found whole or merged from tiles.
        ol = np.array(outline)
        bbox = (
            float(ol[:, 0].min()),
            float(ol[:, 1].min()),
            float(ol[:, 0].max()),
            float(ol[:, 1].max()),
        )
        line_points = _line_points(fs, normal_all, members)
        lines = count_lines(line_points, canonical_normal(normal_all[worst]), grid_nm)
        pitch_drawn = float(pitch_all[worst])
        width_drawn = float(fs.width[worst])
        top = vs[0]
        pitch_angle = math.degrees(math.atan2(normal_all[worst][1], normal_all[worst][0]))
        key = hint_key(
            vs,
            res.cutoff_pitch_nm,
            width_drawn * scale_to_wafer,
            pitch_drawn * scale_to_wafer,
            pitch_angle,
            scale_to_wafer,
        )
        hint = "" if defer_hints else hint_text(rule, key)
        limit = f"{top.check}: {top.value:.4g} against {top.limit:.4g}"
        context = cuts[c_idx].context if (cuts and c_idx >= 0) else ""
        cut = cuts[c_idx] if (cuts and c_idx >= 0) else None
        mid = mid_all[worst]
        border = (
            None
            if near_border is None
            else _site_rows(corners_all, angle_all, pitch_all, members[near_border[members]])
        )
        message = top.message
        if context == "outer" and top.check in IMAGE_CHECKS:
            message += " (at the last line of the array)"
        elif context == "alone" and top.check in IMAGE_CHECKS:
            message += " (isolated line)"
        out.append(
            Finding(
                layer=rule.name,
                source=rule.source,
                exposure=rule.exposure_name,
                check=top.check,
                severity=SEVERITIES[code],
                pitch_nm=round(pitch_drawn, 3),
                pitch_max_nm=round(float(pitch_all[members].max()), 3),
                width_nm=round(width_drawn, 3),
                space_nm=round(float(fs.space[worst]), 3),
                wafer_pitch_nm=round(pitch_drawn * scale_to_wafer, 3),
                k1=round(res.k1, 4),
                orientation_deg=round(float(angle_all[worst]), 3),
                orders=res.orders,
                orders_on_axis=res.orders_on_axis,
                two_beam_fraction=round(res.two_beam_fraction, 4),
                cutoff_pitch_nm=round(res.cutoff_pitch_nm, 3),
                lines=lines,
                periodicity=_periodicity(lines, rule.dense_min_lines),
                sites=len(members),
                run_nm=round(float(u1 - u0), 3),
                bbox_nm=bbox,
                outline_nm=outline,
                limit=limit,
                message=message,
                hint=hint,
                contrast=round(m.contrast, 4) if m else math.nan,
                nils=round(m.nils, 3) if m else math.nan,
                cd_nm=round(m.cd_nm, 2) if m and math.isfinite(m.cd_nm) else math.nan,
                cd_error_pct=round(m.cd_error_pct, 2) if m else math.nan,
                el_pct=round(m.el_pct, 2) if m else math.nan,
                dof_nm=round(m.dof_nm, 1) if m else math.nan,
                violations=tuple(vs),
                context=context,
                cut_bounds_nm=tuple(round(b * scale_to_wafer, 3) for b in cut.bounds)
                if cut
                else (),
                cut_angle_deg=round(pitch_angle % 360.0, 3),
                cut_origin_nm=(float(mid[0]), float(mid[1])),
                threshold=round(m.threshold, 5) if m else math.nan,
                line_points=line_points,
                border_sites=border,
                extent_nm=_hull(corners_all[members].reshape(-1, 2))
                if border is not None and len(border)
                else None,
                hint_key=key if defer_hints else None,
            )
        )
    out.sort(key=lambda f: (f.severity_rank, f.k1, f.bbox_nm))
    return out
