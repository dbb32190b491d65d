"""Judge sites against a layer's rules and merge them into regions (findings).

Checks (stable identifiers; see "Checks" in README.md):

``unresolvable-pitch`` (severity ``fail``)
    No source point sends the 0th and a 1st diffraction order through the
    pupil for this pitch and direction: the image is uniform, nothing prints.
``low-k1`` (severity ``risk`` or ``marginal``)
    k1 = (p / 2) NA / lambda lies below the layer's ``k1_risk_below`` or
    ``k1_marginal_below`` band.

Adjacent sites of one layer with the same orientation, pitch class (within
``pitch_tolerance_nm``) and severity are merged into one region; one finding
per region.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from pitchguard.deck import SEVERITIES, LayerRule
from pitchguard.extract import Sites, _query_pairs, _rtree
from pitchguard.orders import OrderResult, analyse_pitch

OK = len(SEVERITIES)
"""Severity code of a site that passes (codes 0.. are indexes into SEVERITIES)."""

CHECKS = {
    "unresolvable-pitch": "No source point sends the 0th and a 1st diffraction order "
    "through the pupil: the pitch cannot image.",
    "low-k1": "k1 = (pitch/2) NA / lambda is below the layer's k1 band.",
}
"""Check identifiers and one-line descriptions (stable: baselines refer to them)."""

ORIENTATION_TOL_DEG = 0.5
"""Sites whose lines differ in direction by less than this may share a region (grid
snapping tilts the edges of rotated geometry by a few hundredths of a degree)."""


@dataclass(frozen=True)
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

    @property
    def bbox_um(self) -> tuple[float, float, float, float]:
        return tuple(round(v / 1000.0, 6) for v in self.bbox_nm)

    @property
    def centre_um(self) -> tuple[float, float]:
        x0, y0, x1, y1 = self.bbox_um
        return (round((x0 + x1) / 2, 4), round((y0 + y1) / 2, 4))

    @property
    def severity_rank(self) -> int:
        return SEVERITIES.index(self.severity)


def _judge(rule: LayerRule, res: OrderResult) -> int:
    if not res.resolvable:
        return 0
    if res.k1 < rule.k1_risk_below:
        return 1
    if res.k1 < rule.k1_marginal_below:
        return 2
    return OK


def judge_sites(
    sites: Sites, rule: LayerRule, scale_to_wafer: float
) -> tuple[np.ndarray, list[OrderResult], np.ndarray]:
    """Severity code per site, plus the order analysis of each unique pitch.

    Returns ``(severity, results, which)`` where ``results[which[k]]`` is the
    analysis of site ``k`` (identical pitch/orientation pairs are analysed once).
    """
    n = len(sites)
    if n == 0:
        return np.zeros(0, dtype=np.int8), [], np.zeros(0, dtype=np.int64)
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
    results = []
    codes = np.empty(len(uniq), dtype=np.int8)
    for k, (p, ang) in enumerate(uniq):
        res = analyse_pitch(rule.exposure, p if p > 0 else math.inf, float(ang))
        results.append(res)
        codes[k] = _judge(rule, res) if p > 0 else OK
    return codes[which], results, which


def _periodicity(lines: int, dense_min: int) -> str:
    if lines >= dense_min:
        return "dense"
    if lines >= 2:
        return "semi-isolated"
    return "isolated"


def _regions(sites: Sites, severity: np.ndarray, pitch_tol: float) -> np.ndarray:
    """Region label per flagged site (adjacent, same severity, orientation and pitch class)."""
    n = len(sites)
    corners = sites.corners()
    mins = corners.min(axis=1)
    maxs = corners.max(axis=1)
    index = _rtree(mins, maxs)
    qi, qj = _query_pairs(index, mins, maxs)
    keep = qi < qj
    qi, qj = qi[keep], qj[keep]
    ang = sites.orientation_deg
    dang = np.abs(ang[qi] - ang[qj])
    dang = np.minimum(dang, 180.0 - dang)
    pitch = sites.pitch
    ok = (severity[qi] == severity[qj]) & (dang < ORIENTATION_TOL_DEG)
    ok &= np.abs(pitch[qi] - pitch[qj]) <= pitch_tol
    qi, qj = qi[ok], qj[ok]
    # Exact overlap test in the frame of site qi (both rectangles share it).
    d = sites.direction[qi]
    nrm = np.stack([d[:, 1], -d[:, 0]], axis=1)
    ci, cj = corners[qi], corners[qj]
    eps = 1e-6
    touch = np.ones(len(qi), dtype=bool)
    for axis in (d, nrm):
        pi = np.einsum("ikj,ij->ik", ci, axis)
        pj = np.einsum("ikj,ij->ik", cj, axis)
        touch &= (pi.min(axis=1) <= pj.max(axis=1) + eps) & (pj.min(axis=1) <= pi.max(axis=1) + eps)
    qi, qj = qi[touch], qj[touch]
    graph = coo_matrix((np.ones(len(qi), dtype=np.int8), (qi, qj)), shape=(n, n))
    _, labels = connected_components(graph, directed=False)
    return labels


def _fmt(x: float) -> str:
    return f"{x:.1f}"


def _explain(rule: LayerRule, code: int, res: OrderResult, pitch_drawn: float, scale: float):
    """(check, limit, message, hint) for a flagged site; hint pitches are as drawn."""
    lam, na = rule.exposure.wavelength_nm, rule.exposure.na
    pitch_w = pitch_drawn * scale
    if code == 0:
        need = res.cutoff_pitch_nm / scale
        return (
            "unresolvable-pitch",
            f"cutoff {res.cutoff_pitch_nm:.1f} nm (wafer)",
            f"pitch {_fmt(pitch_drawn)} nm is below the {_fmt(need)} nm this exposure can "
            f"image in this direction: no source point sends a 1st order through the pupil",
            f"widen the pitch to at least {math.ceil(need * 10) / 10:.1f} nm, or use "
            "illumination that reaches further along the pitch direction",
        )
    band = rule.k1_risk_below if code == 1 else rule.k1_marginal_below
    key = "k1_risk_below" if code == 1 else "k1_marginal_below"
    clear = rule.k1_marginal_below
    need = 2.0 * clear * lam / na / scale
    return (
        "low-k1",
        f"{key} = {band:g}",
        f"k1 {res.k1:.3f} is below {band:g} ({key}) at pitch {_fmt(pitch_drawn)} nm "
        f"({_fmt(pitch_w)} nm on the wafer)",
        f"a pitch of at least {math.ceil(need * 10) / 10:.1f} nm reaches k1 {clear:g}",
    )


SNAP_PITCH_SPREAD = 2.0 * math.sqrt(2.0)
"""Two sites of one array may differ in pitch by up to this many grid steps once
rotated geometry is snapped to the grid (each of the two edges that bound a
pitch moves by up to 0.5 (|cos| + |sin|) <= 0.71 grid)."""


def classify_layer(
    sites: Sites, rule: LayerRule, scale_to_wafer: float, grid_nm: float = 1.0
) -> list[Finding]:
    """Findings (one per region) for the sites of one layer.

    Sites merge into a region when their pitches differ by at most
    ``max(pitch_tolerance_nm, SNAP_PITCH_SPREAD * grid_nm)`` (drawn nm).
    """
    severity, results, which = judge_sites(sites, rule, scale_to_wafer)
    flagged = np.flatnonzero(severity < OK)
    if len(flagged) == 0:
        return []
    fs = sites.take(flagged)
    sev = severity[flagged]
    tol = max(rule.pitch_tolerance_nm / scale_to_wafer, SNAP_PITCH_SPREAD * grid_nm)
    labels = _regions(fs, sev, tol)
    order = np.argsort(labels, kind="stable")
    bounds = np.flatnonzero(np.diff(labels[order])) + 1
    corners_all = fs.corners()
    pitch_all = fs.pitch
    angle_all = fs.orientation_deg
    run_all = fs.run
    out = []
    for members in np.split(order, bounds):
        worst = members[np.argmin(pitch_all[members])]
        code = int(sev[worst])
        res = results[which[flagged[worst]]]
        d = fs.direction[worst]
        nrm = np.array([d[1], -d[0]])
        pts = corners_all[members].reshape(-1, 2)
        pu, pv = pts @ d, pts @ nrm
        u0, u1, v0, v1 = pu.min(), pu.max(), pv.min(), pv.max()
        outline = tuple(
            (float(x), float(y))
            for x, y in (d * u0 + nrm * v0, d * u1 + nrm * v0, d * u1 + nrm * v1,
                         d * u0 + nrm * v1)  # fmt: skip
        )
        bbox = (
            float(pts[:, 0].min()), float(pts[:, 1].min()),
            float(pts[:, 0].max()), float(pts[:, 1].max()),
        )  # fmt: skip
        lines = len(np.unique(fs.feature[members]))
        pitch_drawn = float(pitch_all[worst])
        check, limit, message, hint = _explain(rule, code, res, pitch_drawn, scale_to_wafer)
        out.append(
            Finding(
                layer=rule.name,
                source=rule.source,
                exposure=rule.exposure_name,
                check=check,
                severity=SEVERITIES[code],
                pitch_nm=round(pitch_drawn, 3),
                pitch_max_nm=round(float(pitch_all[members].max()), 3),
                width_nm=round(float(fs.width[worst]), 3),
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
                run_nm=round(float(run_all[members].max()), 3),
                bbox_nm=bbox,
                outline_nm=outline,
                limit=limit,
                message=message,
                hint=hint,
            )
        )
    out.sort(key=lambda f: (f.severity_rank, f.k1, f.bbox_nm))
    return out
