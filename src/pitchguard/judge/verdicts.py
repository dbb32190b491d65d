"""Sites + order analysis + image metrics -> Finding records, one per region."""

from __future__ import annotations

import dataclasses
import math
from typing import NamedTuple

import numpy as np

from pitchguard.deck import SEVERITIES, LayerRule
from pitchguard.geometry.sites import Sites
from pitchguard.judge.checks import IMAGE_CHECKS, OK, violations, worst_severity_code
from pitchguard.judge.findings import Finding
from pitchguard.judge.hint_batch import hint_texts
from pitchguard.judge.hints import RealCut, hint_key
from pitchguard.judge.regions import (
    SNAP_PITCH_SPREAD,
    Region,
    canonical_normal,
    convex_hull,
    count_lines,
    line_points_of,
    periodicity_class,
    region_labels,
    site_rows,
    sites_near_border,
)
from pitchguard.optics.orders import OrderResult, analyse_pitch
from pitchguard.optics.resist import Metrics


class SiteVerdicts(NamedTuple):
    """Sites judged: ``results[which[k]]`` is the order analysis of site ``k``
    (identical pitch/orientation pairs are analysed once) and
    ``found[(which[k], which_cut[k])]`` its violations, worst first."""

    severity: np.ndarray  # code per site: an index into SEVERITIES, or OK
    results: list[OrderResult]
    which: np.ndarray
    found: dict


def judge_sites(
    sites: Sites,
    rule: LayerRule,
    scale_to_wafer: float,
    metrics: list[Metrics] | None = None,
    which_cut: np.ndarray | None = None,
) -> SiteVerdicts:
    """Severity code per site, with the analyses behind it (:class:`SiteVerdicts`)."""
    n = len(sites)
    if n == 0:
        return SiteVerdicts(np.zeros(0, dtype=np.int8), [], np.zeros(0, dtype=np.int64), {})
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
        codes[k] = worst_severity_code(vs)
    return SiteVerdicts(codes[inv.ravel()], results, which, found)


def classify_layer(
    sites: Sites,
    rule: LayerRule,
    scale_to_wafer: float,
    grid_nm: float = 1.0,
    metrics: list[Metrics] | None = None,
    which_cut: np.ndarray | None = None,
    cuts: list | None = None,
    cut_angles: list[float] | None = None,
    tile_nm: tuple[float, float, float, float] | None = None,
    defer_hints: bool = False,
) -> list[Region]:
    """Regions, each with its finding, for the sites of one layer.

    ``metrics[which_cut[k]]`` are the image metrics of site ``k`` (-1: not
    imaged), ``cuts[which_cut[k]]`` its cut, imaged with the source turned
    by ``cut_angles[which_cut[k]]``.  Sites merge into a region when their pitches differ by at most
    ``max(pitch_tolerance_nm, SNAP_PITCH_SPREAD * grid_nm)`` (drawn nm).
    With ``tile_nm`` (a tile of a tiled scan) each region keeps its sites
    that sites of other tiles could touch (:attr:`Region.border_sites`).
    With ``defer_hints`` findings get an empty hint and the region the key to
    make it from (:attr:`Region.hint_key`, see :func:`pitchguard.judge.hints.hint_text`).
    """
    severity, results, which, found = judge_sites(sites, rule, scale_to_wafer, metrics, which_cut)
    flagged = np.flatnonzero(severity < OK)
    if len(flagged) == 0:
        return []
    fs = sites.take(flagged)
    sev = severity[flagged]
    cut_of = which_cut[flagged] if which_cut is not None else np.full(len(flagged), -1)
    tol = max(rule.pitch_tolerance_nm / scale_to_wafer, SNAP_PITCH_SPREAD * grid_nm)
    labels = region_labels(fs, sev, tol)
    order = np.argsort(labels, kind="stable")
    bounds = np.flatnonzero(np.diff(labels[order])) + 1
    corners_all = fs.corners()
    pitch_all = fs.pitch
    angle_all = fs.orientation_deg
    normal_all = fs.normal
    mid_all = fs.midpoints()
    near_border = None
    if tile_nm is not None:
        reach = rule.interaction_range_nm / scale_to_wafer + 2.0 * grid_nm
        near_border = sites_near_border(corners_all, tile_nm, reach)
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
        line_points = line_points_of(fs, normal_all, members)
        lines = count_lines(line_points, canonical_normal(normal_all[worst]), grid_nm)
        pitch_drawn = float(pitch_all[worst])
        width_drawn = float(fs.width[worst])
        top = vs[0]
        pitch_angle = math.degrees(math.atan2(normal_all[worst][1], normal_all[worst][0]))
        limit = f"{top.check}: {top.value:.4g} against {top.limit:.4g}"
        context = cuts[c_idx].context if (cuts and c_idx >= 0) else ""
        cut = cuts[c_idx] if (cuts and c_idx >= 0) else None
        real = None
        if cut is not None and cut_angles is not None:
            space = float(fs.space[worst])
            real = RealCut(cut.bounds, cut.reach, cut_angles[c_idx], space, tol)
        key = hint_key(
            vs,
            res.cutoff_pitch_nm,
            width_drawn * scale_to_wafer,
            pitch_drawn * scale_to_wafer,
            pitch_angle,
            scale_to_wafer,
            real,
            # Only an edge-placement hint reads it: other keys stay shared.
            (round(m.shift_nm, 2), round(m.epe_nm, 2)) if top.check == "edge-placement" else None,
        )
        mid = mid_all[worst]
        border = (
            None
            if near_border is None
            else site_rows(corners_all, angle_all, pitch_all, members[near_border[members]])
        )
        message = top.message
        if context == "outer" and top.check in IMAGE_CHECKS:
            message += " (at the last line of the array)"
        elif context == "alone" and top.check in IMAGE_CHECKS:
            message += " (isolated line)"
        finding = Finding(
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
            periodicity=periodicity_class(lines, rule.dense_min_lines),
            sites=len(members),
            run_nm=round(float(u1 - u0), 3),
            bbox_nm=bbox,
            outline_nm=outline,
            limit=limit,
            message=message,
            hint="",
            contrast=round(m.contrast, 4) if m else math.nan,
            nils=round(m.nils, 3) if m else math.nan,
            cd_nm=round(m.cd_nm, 2) if m and math.isfinite(m.cd_nm) else math.nan,
            cd_error_pct=round(m.cd_error_pct, 2) if m else math.nan,
            el_pct=round(m.el_pct, 2) if m else math.nan,
            dof_nm=round(m.dof_nm, 1) if m else math.nan,
            shift_nm=round(m.shift_nm, 2) if m else math.nan,
            epe_nm=round(m.epe_nm, 2) if m else math.nan,
            bias_nm=round(m.bias_nm, 2) if m and m.sizing else math.nan,
            violations=tuple(vs),
            context=context,
            cut_bounds_nm=tuple(round(b * scale_to_wafer, 3) for b in cut.bounds) if cut else (),
            cut_angle_deg=round(pitch_angle % 360.0, 3),
            cut_origin_nm=(float(mid[0]), float(mid[1])),
            threshold=round(m.threshold, 5) if m else math.nan,
        )
        extent = None
        if border is not None and len(border):
            extent = convex_hull(corners_all[members].reshape(-1, 2))
        out.append(Region(finding, line_points, border, extent, key))
    if not defer_hints:  # made together: the gratings they judge are imaged in batches
        texts = hint_texts([(rule, r.hint_key) for r in out])
        out = [
            r._replace(finding=dataclasses.replace(r.finding, hint=t), hint_key=None)
            for r, t in zip(out, texts, strict=True)
        ]
    out.sort(key=lambda r: (r.finding.severity_rank, r.finding.k1, r.finding.bbox_nm))
    return out
