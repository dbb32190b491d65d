"""Line ends judged on 2-D clips: a tip whose gap prints closed (``line-end-bridged``)
or whose printed end falls short (``line-end-pullback``).

Each line end that faces a shape within GAP_MAX_LAMBDA_NA lambda/NA
(:mod:`pitchguard.geometry.line_ends`) gets a clip: the layer's shapes around
the tip and the gap, turned into the tip's frame and cut into rectangles
(:mod:`pitchguard.optics.tips`).  Identical clips are imaged once per process.
A tip-to-tip gap is judged once, from the end with the lower edge number.
Ends whose clip holds a shape that is not Manhattan in the tip's frame, and
ends with no shape in front within reach, are counted, not judged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.geometry.features import Edges
from pitchguard.geometry.lattice.compact import points_on_features
from pitchguard.geometry.lattice.records import FeatureColumns
from pitchguard.geometry.line_ends import LineEnds, facing, find_line_ends
from pitchguard.geometry.rectangles import (
    clip_neighbourhoods,
    frame_rectangles,
    neighbourhood_groups,
)
from pitchguard.geometry.sites import in_region
from pitchguard.judge.caches import layer_cache
from pitchguard.judge.checks import Violation, violation_order
from pitchguard.judge.findings import Finding, TipShape
from pitchguard.layout.polygons import PolygonSet
from pitchguard.optics.aerial2d import source_angle
from pitchguard.optics.tips import GAP_MAX_LAMBDA_NA, TipMetrics, tip_metrics, tip_window

KEY_DECIMALS = 2
"""Clip rectangles are compared to 0.01 nm (drawn)."""


@dataclass
class TipVerdicts:
    """What judging one layer's line ends gave."""

    findings: list[Finding] = field(default_factory=list)
    ends: int = 0  # line ends found (owned by this region)
    judged: int = 0  # imaged on a clip
    judged_nm: float = 0.0  # drawn length of the tips judged
    open_by_distance: int = 0  # nothing in front within reach: not judged
    not_manhattan: int = 0  # clip not made of rectangles: not judged


_CACHES: dict = {}
"""Judgements per deck layer, for the life of the process (see judge.caches)."""


def judge_line_ends(
    edges: Edges,
    ps: PolygonSet,
    rule: LayerRule,
    scale: float,
    grid_nm: float,
    region=None,
    compact: FeatureColumns | None = None,
) -> TipVerdicts:
    """Judge the line ends of one layer (drawn nm; ``scale`` to the wafer).

    ``ps`` must hold every shape within reach of the ends judged; only ends in
    ``region`` (a tile's own) are judged, and none on ``compact`` features
    (judged as 2-D patterns of their own).  Nothing is judged when the layer's
    image checks are off."""
    out = TipVerdicts()
    if not rule.image_checks:
        return out
    lam_na = rule.exposure.lambda_over_na_nm / scale
    ends = find_line_ends(edges, rule.compact_max_nm / scale, grid_nm)
    if len(ends) and compact is not None and len(compact):
        inward = ends.mid - ends.normal * (0.25 * grid_nm)
        ends = ends.take(np.flatnonzero(~points_on_features(inward, compact, 0.5 * grid_nm)))
    ends = facing(ends, edges, GAP_MAX_LAMBDA_NA * lam_na, grid_nm)
    mine = np.ones(len(ends), dtype=bool) if region is None else in_region(ends.mid, region)
    out.ends = int(mine.sum())
    # A tip-to-tip gap once: from the end with the lower edge number.
    pair = ends.facing_end >= 0
    second = pair & (ends.edge > ends.edge[np.maximum(ends.facing_end, 0)])
    todo = mine & np.isfinite(ends.gap) & ~second
    out.open_by_distance = int((mine & ~np.isfinite(ends.gap)).sum())
    if not todo.any():
        return out
    (cx, _), (hx, hy) = tip_window(rule)
    cx, hx, hy = cx / scale, hx / scale, hy / scale
    window = (cx - hx, -hy, cx + hx, hy)
    idx = np.flatnonzero(todo)
    angles = ends.angle_deg[idx]
    cache = layer_cache(_CACHES, rule)
    # The shapes around each tip (the turned window's circumscribed square) and
    # their hash: ends with equal neighbourhoods, sizes and turn are judged once.
    step = 10.0**-KEY_DECIMALS
    hit, bounds, around = clip_neighbourhoods(
        ps, ends.mid[idx] + ends.normal[idx] * cx, math.hypot(hx, hy), ends.mid[idx], step
    )
    first, group = neighbourhood_groups(
        around,
        bounds,
        np.stack(
            [ends.width[idx], ends.gap[idx], np.minimum(ends.side[idx], lam_na), angles], axis=1
        ),
        step,
    )
    verdicts = []
    for j in first.tolist():
        k = int(idx[j])
        angle = float(angles[j])
        w, gap = float(ends.width[k]), float(ends.gap[k])
        side = min(float(ends.side[k]), lam_na)  # only the first lambda/NA matters
        near = hit[bounds[j] : bounds[j + 1]]
        rects = frame_rectangles(
            ps, near, ends.mid[k], angle, window, 1.01 * grid_nm, cache, KEY_DECIMALS
        )
        m, vs = None, []
        if rects is not None:
            key = (
                np.round(rects, KEY_DECIMALS).tobytes(),
                round(w, KEY_DECIMALS),
                round(gap, KEY_DECIMALS),
                round(side, KEY_DECIMALS),
                source_angle(rule.exposure, angle),
            )
            m = cache.get(key)
            if m is None:
                m = tip_metrics(rule, rects * scale, w * scale, gap * scale, side * scale, angle)
                cache[key] = m
            vs = tip_violations(rule, m, gap * scale)
        verdicts.append((rects, m, vs))
    manhattan = np.array([v[0] is not None for v in verdicts], dtype=bool)[group]
    out.not_manhattan = int((~manhattan).sum())
    out.judged = int(manhattan.sum())
    out.judged_nm = float(ends.width[idx][manhattan].sum())
    flagged = np.array([bool(v[2]) for v in verdicts], dtype=bool)[group]
    for j in np.flatnonzero(flagged).tolist():
        rects, m, vs = verdicts[group[j]]
        k = int(idx[j])
        tip_to_tip = ends.facing_end[k] >= 0
        out.findings.append(_finding(rule, vs, m, ends, k, tip_to_tip, rects))
    return out


def tip_violations(rule: LayerRule, m: TipMetrics, gap_nm: float) -> list[Violation]:
    """Every limit a line end breaks, worst first (wafer nm)."""
    out: list[Violation] = []
    if not m.body_printed:
        return out  # the line itself does not print: the line checks say so
    if m.closed_at_best:
        out.append(
            Violation(
                "line-end-bridged",
                "fail",
                gap_nm,
                math.nan,
                f"the {gap_nm:.1f} nm gap in front of the line end does not print open at "
                "best focus and nominal dose: the line runs into what it faces",
            )
        )
        return out
    if math.isfinite(m.closes_at_focus_nm):
        out.append(
            Violation(
                "line-end-bridged",
                "risk",
                m.closes_at_focus_nm,
                rule.focus_half_range_nm,
                f"the {gap_nm:.1f} nm gap in front of the line end closes at "
                f"{m.closes_at_focus_nm:.0f} nm defocus (focus range +-"
                f"{rule.focus_half_range_nm:.0f} nm)",
            )
        )
    if m.pullback_nm > rule.line_end_pullback_max_nm:
        out.append(
            Violation(
                "line-end-pullback",
                "risk",
                m.pullback_nm,
                rule.line_end_pullback_max_nm,
                f"the printed line end falls {m.pullback_nm:.1f} nm short of the drawn one "
                f"(limit {rule.line_end_pullback_max_nm:.1f} nm, line_end_pullback_max_nm)",
            )
        )
    out.sort(key=violation_order)
    return out


def _finding(rule, vs, m: TipMetrics, ends: LineEnds, k: int, tip_to_tip: bool, rects) -> Finding:
    top = vs[0]
    w, gap = float(ends.width[k]), float(ends.gap[k])
    n = ends.normal[k]
    t = np.array([-n[1], n[0]])
    mid = ends.mid[k]
    # The gap and the tip behind it: from half a width back to the facing edge.
    back, front = mid - n * (0.5 * w), mid + n * gap
    outline = tuple(
        (float(p[0]), float(p[1]))
        for p in (back - t * 0.5 * w, front - t * 0.5 * w, front + t * 0.5 * w, back + t * 0.5 * w)
    )
    xs, ys = [p[0] for p in outline], [p[1] for p in outline]
    kind = "tip-to-tip" if tip_to_tip else "tip-to-side"
    run_deg = (math.degrees(math.atan2(n[1], n[0]))) % 180.0
    return Finding(
        layer=rule.name,
        source=rule.source,
        exposure=rule.exposure_name,
        check=top.check,
        severity=top.severity,
        pitch_nm=math.nan,
        pitch_max_nm=math.nan,
        width_nm=round(w, 3),
        space_nm=round(gap, 3),
        wafer_pitch_nm=math.nan,
        k1=math.nan,
        orientation_deg=round(run_deg, 3),
        orders=(),
        orders_on_axis=(),
        two_beam_fraction=math.nan,
        cutoff_pitch_nm=math.nan,
        lines=2 if tip_to_tip else 1,
        periodicity=kind,
        sites=1,
        run_nm=round(float(ends.side[k]), 3),
        bbox_nm=(min(xs), min(ys), max(xs), max(ys)),
        outline_nm=outline,
        limit=f"{top.check}: {top.value:.4g} against {top.limit:.4g}",
        message=top.message,
        hint=_hint(top.check, kind),
        contrast=round(m.contrast, 4),
        nils=round(m.nils, 3),
        violations=tuple(vs),
        context="line-end",
        threshold=round(m.threshold, 5),
        # The tip's middle (finite, so the finding moves with its placement); no
        # 1-D cut: the angle stays NaN.
        cut_origin_nm=(float(mid[0]), float(mid[1])),
        tip=TipShape(
            kind=kind,
            pullback_nm=round(m.pullback_nm, 2),
            gap_printed_nm=round(m.gap_printed_nm, 2),
            closes_at_focus_nm=round(m.closes_at_focus_nm, 1),
            angle_deg=round(float(ends.angle_deg[k]), 3),
            rects_nm=tuple(tuple(round(float(v), 3) for v in r) for r in rects),
        ),
    )


def _hint(check: str, kind: str) -> str:
    if check == "line-end-bridged":
        other = "the other line end" if kind == "tip-to-tip" else "the shape it faces"
        return f"widen the gap to {other}, or shorten the line (OPC cannot open a closed gap)"
    return "extend the drawn line end, or leave room for an OPC extension (hammerhead)"
