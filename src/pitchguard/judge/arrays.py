"""Arrays of compact features in a scan: each distinct lattice judged once -> findings.

An array's interior is judged on its periodic unit cell (2-D orders of its
lattice, the 2-D image of the supercell through the deck's focus range); one
finding per array that breaks a limit.  Arrays of the same lattice, feature
and source turn share one judgement.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pitchguard.deck import SEVERITIES, LayerRule
from pitchguard.geometry.lattice import NONE, ROW, LatticeArrays
from pitchguard.geometry.spatial import build_rtree, query_pairs
from pitchguard.judge.array_checks import array_violations
from pitchguard.judge.checks import Violation
from pitchguard.judge.findings import ArrayShape, Finding, replaced
from pitchguard.optics.aerial2d import source_angle
from pitchguard.optics.cells2d import Cell, lattice_cell
from pitchguard.optics.lattice_orders import LatticeOrders, lattice_orders
from pitchguard.optics.resist2d import Metrics2D, cell_metrics

BASIS_DECIMALS = 3
"""Wafer bases are rounded to 0.001 nm before they key a judgement."""


@dataclass
class ArrayVerdicts:
    """What judging one layer's arrays gave."""

    findings: list[Finding]
    judged_nm: float = 0.0  # drawn edge length of the members of judged arrays
    arrays: int = 0
    members: int = 0
    isolated: int = 0  # compact features in no array: not judged here
    orders_only: int = 0  # arrays whose image could not be set up (no rectangular cell)
    distinct: int = 0  # distinct judgements made
    array_rank: np.ndarray | None = None  # per array: its finding's severity rank (none: ok)


@dataclass(frozen=True)
class ArrayJudgement:
    """One distinct lattice's verdict (wafer nm)."""

    orders: LatticeOrders
    metrics: Metrics2D | None
    violations: tuple[Violation, ...]
    imaged: bool


def _turned(v: np.ndarray, angle_deg: float) -> np.ndarray:
    """``v`` in a frame turned by ``angle_deg`` (its coordinates rotated by -angle)."""
    t = math.radians(angle_deg)
    c, s = math.cos(t), math.sin(t)
    return np.array([c * v[0] + s * v[1], -s * v[0] + c * v[1]])


def _snapped(v: np.ndarray, tol: float) -> tuple[float, float]:
    """Components within ``tol`` of zero set to zero, the rest rounded (cache keys, and the
    supercell search of :func:`lattice_cell` needs exact axes)."""
    out = np.where(np.abs(v) <= tol, 0.0, np.round(v, BASIS_DECIMALS)) + 0.0
    return float(out[0]), float(out[1])


def row_partner(a1: np.ndarray, feature_nm, lambda_over_na_nm: float) -> np.ndarray:
    """A second lattice vector for a row (features in a line): normal to ``a1``,
    as long as the features' extent plus ``lambda / NA`` of clear space each side,
    so that the copies it makes across the row are optically apart."""
    n = np.array([-a1[1], a1[0]]) / float(np.hypot(*a1))
    return n * (float(max(feature_nm)) + 2.0 * lambda_over_na_nm)


def unit_cell(a1, a2, feature_nm, feature_angle_deg: float, tol_nm: float) -> Cell | None:
    """The periodic cell of a lattice (wafer nm, layout frame) in the features' frame
    (the image is taken with the source turned by ``feature_angle_deg``); None when
    it has no rectangular supercell within reach."""
    a1f = _snapped(_turned(np.asarray(a1, float), feature_angle_deg), tol_nm)
    a2f = _snapped(_turned(np.asarray(a2, float), feature_angle_deg), tol_nm)
    try:
        return lattice_cell(a1f, a2f, *feature_nm)
    except ValueError:
        return None


def finding_cell(rule: LayerRule, f: Finding, scale: float, tol_nm: float) -> Cell | None:
    """The unit cell an array finding was judged on (for pictures)."""
    a = f.array
    a1 = np.array(a.a1_nm) * scale
    w, h = a.feature_nm[0] * scale, a.feature_nm[1] * scale
    if a.lattice == "row":
        a2 = row_partner(a1, (w, h), rule.exposure.lambda_over_na_nm)
    else:
        a2 = np.array(a.a2_nm) * scale
    return unit_cell(a1, a2, (w, h), a.feature_angle_deg, tol_nm)


def image_fields(m: Metrics2D | None) -> dict:
    """A compact feature's image metrics as Finding fields (nan where not judged: not
    imaged, or missing or merged)."""
    if m is None:
        return {"contrast": math.nan}
    good = not (m.missing or m.merged)
    errors = [e for e in (m.size_error_x_pct, m.size_error_y_pct) if math.isfinite(e)]
    nan = math.nan
    return {
        "contrast": round(m.contrast, 4),
        "nils": round(min(m.nils_x, m.nils_y), 3) if good else nan,
        "cd_nm": round(m.size_x_nm, 2) if good and math.isfinite(m.size_x_nm) else nan,
        "cd_error_pct": round(max(errors, key=abs), 2) if errors else nan,
        "el_pct": round(m.el_pct, 2) if good else nan,
        "dof_nm": round(m.dof_nm, 1) if good else nan,
    }


def judge_lattice(
    rule: LayerRule,
    a1: np.ndarray,
    a2: np.ndarray,
    feature_nm: tuple[float, float],
    feature_angle_deg: float,
    tol_nm: float,
) -> ArrayJudgement:
    """Judge a lattice (wafer nm, layout frame) of ``w x h`` rectangles turned by
    ``feature_angle_deg``: orders in the layout frame, the image in the
    features' frame (the source turned to match)."""
    lo = lattice_orders(rule.exposure, tuple(a1), tuple(a2))
    m = None
    imaged = False
    if rule.image_checks:
        cell = unit_cell(a1, a2, feature_nm, feature_angle_deg, tol_nm)
        if cell is not None:
            m = cell_metrics(rule, cell, angle_deg=feature_angle_deg)[0]
            imaged = True
    vs = array_violations(rule, lo, m)
    return ArrayJudgement(lo, m, tuple(vs), imaged or not rule.image_checks)


def array_hint(rule: LayerRule, j: ArrayJudgement, a1: np.ndarray, a2: np.ndarray) -> str:
    """What to change, in wafer nm."""
    top = j.violations[0]
    p1, p2 = float(np.hypot(*a1)), float(np.hypot(*a2))
    if top.check == "unresolvable-pitch":
        lo, hi = 1.0, 2.0
        while lattice_orders(rule.exposure, tuple(hi * a1), tuple(hi * a2)).rank < 2:
            hi *= 2.0
            if hi > 64.0:
                return "this exposure images no 2-D pattern in this orientation: turn the array"
        while hi - lo > 1e-3:
            mid = 0.5 * (lo + hi)
            ok = lattice_orders(rule.exposure, tuple(mid * a1), tuple(mid * a2)).rank == 2
            lo, hi = (lo, mid) if ok else (mid, hi)
        return (
            f"space the features at least {math.ceil(p1 * hi):.0f} x {math.ceil(p2 * hi):.0f} nm "
            "(wafer) apart, so that the pupil passes first orders in both directions"
        )
    if top.check == "feature-not-printed":
        return "enlarge the feature or its pitch; a denser or brighter neighbourhood helps it print"
    if top.check == "features-bridged":
        return "shrink the feature or increase its pitch so that the spaces between print open"
    if top.check == "cd-error":
        return "bias the drawn size (OPC), or check the deck's anchor for this layer"
    return "increase the lattice pitch, or print this layer with a stronger exposure"


def clip_judged(sites, rule: LayerRule) -> np.ndarray:
    """Which compact features are judged on clips of their own (none when not
    imaged): those with no lattice, whose lattice no neighbour confirms, or in a
    row (pairs and rows end where a tile cannot see)."""
    if not rule.image_checks:
        return np.zeros(len(sites), dtype=bool)
    return (sites.lattice == NONE) | (sites.lattice == ROW) | ~sites.core


def member_arrays(centres: np.ndarray, arrays) -> np.ndarray:
    """Per point of ``centres``: the array whose member's centre it is, or -1."""
    out = np.full(len(centres), -1, dtype=np.int64)
    if not len(centres) or not len(arrays.array):
        return out
    f = arrays.sites.features
    tol = arrays.sites.tol_nm
    q, i = query_pairs(build_rtree(f.centre - tol, f.centre + tol), centres, centres)
    a = arrays.array[i]
    keep = a >= 0
    out[q[keep]] = a[keep]
    return out


def _badness(f: Finding) -> float:
    v = f.violations[0]
    return abs(v.value - v.limit) / abs(v.limit) if v.limit else abs(v.value)


def edge_findings(findings: list[Finding], array_ids: np.ndarray, v: ArrayVerdicts) -> list:
    """Clip findings on members of arrays (``array_ids``) once the arrays are known:
    dropped where the array's own finding is at least as severe (it says as much),
    else one per array, check and severity: the worst member's numbers, the box of
    them all, ``sites`` their count."""
    groups: dict = {}
    for f, a in zip(findings, array_ids.tolist(), strict=True):
        if v.array_rank[a] > f.severity_rank:
            groups.setdefault((a, f.check, f.severity), []).append(f)
    out = []
    for fs in groups.values():
        worst = min(fs, key=lambda f: (-_badness(f), f.bbox_nm))
        box = np.array([f.bbox_nm for f in fs], dtype=np.float64)
        x0, y0 = (float(c) for c in box[:, :2].min(axis=0))
        x1, y1 = (float(c) for c in box[:, 2:].max(axis=0))
        arr = worst.array._replace(features=len(fs)) if worst.array is not None else None
        out.append(
            replaced(
                worst,
                bbox_nm=(x0, y0, x1, y1),
                outline_nm=((x0, y0), (x1, y0), (x1, y1), (x0, y1)),
                sites=len(fs),
                lines=len(fs),
                array=arr,
                message=f"{worst.message}; {len(fs)} features at the array's edge",
            )
        )
    return out


def judge_arrays(arrays: LatticeArrays, rule: LayerRule, scale: float) -> ArrayVerdicts:
    """Findings for the arrays of one layer (nm as drawn; ``scale`` to the wafer).

    Every array is judged (rows on a unit cell with ``row_partner``); the
    edge length of their members counts as judged.  Compact features in no
    array are counted, not judged.
    """
    out = ArrayVerdicts([])
    out.arrays = len(arrays)
    in_array = arrays.array >= 0
    out.members = int(in_array.sum())
    # Features with no lattice, in rows, or whose lattice no neighbour confirms
    # (irregular groups, an array's ragged edge) are judged on clips of their
    # own (judge.compact_clips) when the layer is imaged; their edge length is
    # counted there.
    clipped = clip_judged(arrays.sites, rule)
    out.isolated = int((~in_array & ~clipped).sum())
    f = arrays.sites.features
    out.judged_nm = float(2.0 * f.size[in_array & ~clipped].sum())
    out.array_rank = np.full(len(arrays), len(SEVERITIES), dtype=np.int64)
    tol = arrays.sites.tol_nm * scale
    lam_na = rule.exposure.lambda_over_na_nm
    seen: dict = {}
    for k in range(len(arrays)):
        rec = arrays.record(k)
        a1 = np.array(rec.a1_nm) * scale
        fw, fh = rec.feature_nm[0] * scale, rec.feature_nm[1] * scale
        row = arrays.lattice[k] == ROW
        a2 = row_partner(a1, (fw, fh), lam_na) if row else np.array(rec.a2_nm) * scale
        key = (
            _snapped(a1, 0.0),
            _snapped(a2, 0.0),
            round(fw, BASIS_DECIMALS),
            round(fh, BASIS_DECIMALS),
            source_angle(rule.exposure, rec.feature_angle_deg),
        )
        j = seen.get(key)
        if j is None:
            j = seen[key] = judge_lattice(rule, a1, a2, (fw, fh), rec.feature_angle_deg, tol)
        if not j.imaged:
            out.orders_only += 1
        if j.violations:
            out.findings.append(_finding(rule, arrays, k, rec, j, a1, a2, scale))
            out.array_rank[k] = SEVERITIES.index(j.violations[0].severity)
    out.distinct = len(seen)
    out.findings.sort(key=lambda f: (f.severity_rank, f.k1, f.bbox_nm))
    return out


def _finding(rule, arrays, k, rec, j: ArrayJudgement, a1, a2, scale) -> Finding:
    lo, m, vs = j.orders, j.metrics, j.violations
    top = vs[0]
    worst = min(lo.first, key=lambda d: (d.resolved, -d.pitch_nm if not d.resolved else d.pitch_nm))
    p1 = rec.pitch_nm[0]
    row = rec.lattice == "row"
    # The space along a1: the pitch less the feature's extent in that direction.
    t = math.radians(math.degrees(math.atan2(rec.a1_nm[1], rec.a1_nm[0])) - rec.feature_angle_deg)
    w, h = rec.feature_nm
    space = p1 - (w * abs(math.cos(t)) + h * abs(math.sin(t)))
    hull = arrays.hull(k)
    outline = tuple((float(x), float(y)) for x, y in hull)
    bbox = tuple(float(v) for v in rec.bbox_nm)
    return Finding(
        layer=rule.name,
        source=rule.source,
        exposure=rule.exposure_name,
        check=top.check,
        severity=top.severity,
        pitch_nm=round(p1, 3),
        pitch_max_nm=round(p1 if row else rec.pitch_nm[1], 3),
        width_nm=round(w, 3),
        space_nm=round(space, 3),
        wafer_pitch_nm=round(p1 * scale, 3),
        k1=round(lo.k1, 4),
        orientation_deg=round(math.degrees(math.atan2(rec.a1_nm[1], rec.a1_nm[0])) % 180.0, 3),
        orders=(),
        orders_on_axis=(),
        two_beam_fraction=round(worst.two_beam_fraction, 4),
        cutoff_pitch_nm=round(worst.cutoff_pitch_nm, 3),
        lines=rec.count,
        periodicity=f"{rec.lattice} array" if not row else "row",
        sites=rec.count,
        run_nm=round(max(w, h), 3),
        bbox_nm=bbox,
        outline_nm=outline,
        limit=f"{top.check}: {top.value:.4g} against {top.limit:.4g}",
        message=top.message,
        hint=array_hint(rule, j, a1, a2),
        **image_fields(m),
        violations=vs,
        context="interior",
        threshold=round(m.threshold, 5) if m else math.nan,
        # The box's centre (finite, so the finding moves with its placement); no
        # 1-D cut: the angle stays NaN.
        cut_origin_nm=(0.5 * (bbox[0] + bbox[2]), 0.5 * (bbox[1] + bbox[3])),
        array=ArrayShape(
            lattice=rec.lattice,
            a1_nm=tuple(round(v, 3) for v in rec.a1_nm),
            a2_nm=tuple(round(v, 3) for v in rec.a2_nm),
            feature_nm=(round(w, 3), round(h, 3)),
            feature_angle_deg=round(rec.feature_angle_deg, 3),
            features=rec.count,
            columns=rec.columns,
            rows=rec.rows,
            orders=lo.orders,
            worst_angle_deg=round(worst.angle_deg, 3),
        ),
    )
