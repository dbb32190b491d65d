"""Check identifiers and the rules that turn an order analysis and image metrics into violations."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

from pitchguard.deck import SEVERITIES, LayerRule
from pitchguard.optics.orders import OrderResult
from pitchguard.optics.resist import SIZED, UNSIZED, Metrics

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
    "low-nils": "The normalised image log-slope at the printed edges (the drawn ones of 2-D "
    "patterns) is below the layer's NILS band.",
    "low-exposure-latitude": "The dose range holding CD within tolerance is below el_min_pct.",
    "low-depth-of-focus": "The focus range holding CD within tolerance with el_min_pct "
    "exposure latitude is below dof_min_nm.",
    "cd-error": "At the anchored dose the printed CD is off the drawn CD by more than "
    "cd_tolerance_pct.",
    "edge-placement": "At best focus and nominal dose a printed edge sits further from the "
    "drawn one than edge_placement_max_pct of the drawn CD: the feature prints shifted "
    "or sized.",
    "sizing-bias": 'Judged as OPC would size it (sizing = "retarget"): the mask bias that '
    "prints the feature on size at the anchored dose exceeds bias_max_nm (risk), or no "
    "bias does before a space closes or the feature vanishes (fail).",
    "side-lobe-printing": "The image prints in the space beside a feature, apart from any "
    "feature: at nominal dose and best focus (fail) or within the focus and dose window "
    "(risk).",
    "line-end-bridged": "The gap in front of a line end (to another line end or a line "
    "side) does not print open: at best focus (fail) or within the focus range (risk).",
    "line-end-pullback": "The printed line end falls short of the drawn one by more than "
    "line_end_pullback_max_nm.",
}
"""Check identifiers and one-line descriptions (stable: baselines refer to them)."""


@dataclass(frozen=True)
class Violation:
    """One limit a site breaks: which check, how bad, the value against the limit."""

    check: str
    severity: str
    value: float
    limit: float
    message: str


K1_BANDS = (("risk", "k1_risk_below"), ("marginal", "k1_marginal_below"))
"""k1 bands, worst first: severity and the deck key of its limit."""


NILS_BANDS = (
    ("fail", "nils_fail_below"),
    ("risk", "nils_risk_below"),
    ("marginal", "nils_marginal_below"),
)
"""NILS bands, worst first."""


def _fmt(x: float) -> str:
    return f"{x:.1f}"


def band_violation(
    rule: LayerRule,
    check: str,
    value: float,
    bands: tuple[tuple[str, str], ...],
    words: Callable[[float, str], str],
) -> Violation | None:
    """The first band, worst first, that ``value`` falls below: ``bands`` pairs a
    severity with the rule's key of its limit; ``words(limit, key)`` is the
    message."""
    for severity, key in bands:
        limit = getattr(rule, key)
        if value < limit:
            return Violation(check, severity, value, limit, words(limit, key))
    return None


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
        out.extend(printing_violations(m.lost, m.bridged, m.contrast, "runs into its neighbour"))
        v = sizing_violation(rule, m)
        if v is not None:
            out.append(v)
        if m.side_lobe:
            out.append(side_lobe_violation(m))
    if math.isfinite(pitch_wafer):
        v = band_violation(
            rule,
            "low-k1",
            res.k1,
            K1_BANDS,
            lambda limit, key: (
                f"k1 {res.k1:.3f} is below {limit:g} ({key}) at pitch "
                f"{_fmt(pitch_wafer)} nm (wafer)"
            ),
        )
        if v is not None:
            out.append(v)
    if m is not None and not (m.lost or m.bridged):
        v = band_violation(
            rule,
            "low-nils",
            m.nils,
            NILS_BANDS,
            lambda limit, key: f"NILS {m.nils:.2f} at the printed edges is below {limit:g} ({key})",
        )
        if v is not None:
            out.append(v)
        v = edge_placement_violation(rule, m)
        if v is not None:
            out.append(v)
        out.extend(window_violations(rule, m.el_pct, m.dof_nm, "CD"))
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
    out.sort(key=violation_order)
    return out


OVER_LIMIT = (
    "edge-placement",
    "cd-error",
    "side-lobe-printing",
    "line-end-pullback",
    "sizing-bias",
)
"""Checks whose value breaks its limit by exceeding it (the others by falling below)."""


def excess(v: Violation) -> float:
    """How many times over its limit a violation is (inf for the yes/no fails)."""
    value, limit = abs(v.value), abs(v.limit)
    if v.check in OVER_LIMIT:
        return value / limit if limit > 0 else math.inf
    if v.check in ("low-k1", "low-nils", "low-exposure-latitude", "low-depth-of-focus"):
        return limit / value if value > 0 else math.inf
    return math.inf


def violation_order(v: Violation) -> tuple[int, float]:
    """Worst first: by severity, then the limit broken furthest (a feature printed
    20 nm off place leads with that, not with a NILS just under its band)."""
    return SEVERITIES.index(v.severity), -excess(v)


def sizing_violation(rule: LayerRule, m: Metrics) -> Violation | None:
    """The mask bias a feature judged as sized needs (optics.sizing): none reaches
    size (fail), or more than the layer allows (risk)."""
    if m.sizing == UNSIZED:
        return Violation(
            "sizing-bias",
            "fail",
            abs(m.bias_nm),
            rule.bias_max_nm,
            f"no bias of the mask prints the drawn CD at the anchored dose before a space "
            f"closes or the feature vanishes (stopped at {m.bias_nm:+.1f} nm per edge)",
        )
    if m.sizing == SIZED and abs(m.bias_nm) > rule.bias_max_nm:
        return Violation(
            "sizing-bias",
            "risk",
            abs(m.bias_nm),
            rule.bias_max_nm,
            f"the mask needs {m.bias_nm:+.1f} nm per edge to print on size at the anchored "
            f"dose, beyond bias_max_nm ({rule.bias_max_nm:.1f} nm)",
        )
    return None


def edge_placement_violation(rule: LayerRule, m: Metrics) -> Violation | None:
    """A printed edge further from the drawn one than the layer allows (risk: OPC
    moves edges routinely, but this one needs it)."""
    epe = m.epe_nm
    if not math.isfinite(epe):
        return None
    cd = m.cd_nm - (m.epe_right_nm - m.epe_left_nm)  # the drawn CD
    limit = rule.edge_placement_max_pct / 100.0 * cd
    if abs(epe) <= limit:
        return None
    shift = m.shift_nm
    how = (
        f"the printed feature is shifted {abs(shift):.1f} nm along the cut"
        if abs(shift) >= 0.5 * abs(epe)
        else f"the printed CD is {m.cd_nm - cd:+.1f} nm off drawn"
    )
    return Violation(
        "edge-placement",
        "risk",
        abs(epe),
        limit,
        f"a printed edge sits {abs(epe):.1f} nm {'outside' if epe > 0 else 'inside'} the drawn "
        f"one (limit {limit:.1f} nm, {rule.edge_placement_max_pct:g} % of the CD): {how}",
    )


def side_lobe_violation(m: Metrics) -> Violation:
    """A spurious feature printing beside the drawn one (optics.side_lobes)."""
    nominal = m.side_lobe == 2
    where = (
        "at nominal dose and best focus"
        if nominal
        else "within the focus range at the edge of the dose window"
    )
    return Violation(
        "side-lobe-printing",
        "fail" if nominal else "risk",
        m.side_lobe_depth,
        1.0,
        f"a side lobe prints in the space beside the feature {where} (image "
        f"{m.side_lobe_depth:.2f} x the threshold, counted the way that prints)",
    )


def printing_violations(lost: bool, joined: bool, contrast: float, how: str) -> list[Violation]:
    """The fails of a feature that does not print (``lost``) or prints into its
    neighbour (``joined``: the printed feature ``how``), at best focus and nominal dose."""
    if lost:
        return [
            Violation(
                "feature-not-printed",
                "fail",
                contrast,
                0.0,
                f"the feature does not print at best focus and nominal dose "
                f"(image contrast {contrast:.3f})",
            )
        ]
    if joined:
        return [
            Violation(
                "features-bridged",
                "fail",
                contrast,
                0.0,
                f"the printed feature {how} at best focus and nominal dose",
            )
        ]
    return []


def window_violations(rule: LayerRule, el_pct: float, dof_nm: float, sized: str) -> list[Violation]:
    """Exposure latitude and depth of focus below the layer's floors; ``sized``
    names what the tolerance holds ("CD", "both sizes")."""
    out = []
    if el_pct < rule.el_min_pct:
        out.append(
            Violation(
                "low-exposure-latitude",
                "risk",
                el_pct,
                rule.el_min_pct,
                f"exposure latitude {el_pct:.1f} % is below {rule.el_min_pct:g} % "
                f"({sized} within +-{rule.cd_tolerance_pct:g} %)",
            )
        )
    if dof_nm < rule.dof_min_nm:
        out.append(
            Violation(
                "low-depth-of-focus",
                "risk",
                dof_nm,
                rule.dof_min_nm,
                f"depth of focus {dof_nm:.0f} nm is below {rule.dof_min_nm:.0f} nm "
                f"(at {rule.el_min_pct:g} % exposure latitude)",
            )
        )
    return out


def worst_severity_code(vs: list[Violation]) -> int:
    return SEVERITIES.index(vs[0].severity) if vs else OK


IMAGE_CHECKS = (
    "feature-not-printed",
    "features-bridged",
    "side-lobe-printing",
    "low-nils",
    "edge-placement",
    "sizing-bias",
    "low-exposure-latitude",
    "low-depth-of-focus",
    "cd-error",
)
