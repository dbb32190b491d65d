"""Arrays of compact features (holes, posts): 2-D orders + 2-D image metrics -> Violations.

The same check identifiers and deck limits as lines (judge.checks), read
for a lattice: a direction the pupil does not image is ``unresolvable-pitch``
(the holes merge into lines along it, or vanish), k1 comes from the finest
lattice spacing, NILS is the smaller of the two directions'.
"""

from __future__ import annotations

import math

from pitchguard.deck import LayerRule
from pitchguard.judge.checks import (
    K1_BANDS,
    NILS_BANDS,
    Violation,
    band_violation,
    printing_violations,
    violation_order,
    window_violations,
)
from pitchguard.optics.lattice_orders import LatticeOrders
from pitchguard.optics.resist2d import Metrics2D


def array_violations(
    rule: LayerRule, lo: LatticeOrders | None, m: Metrics2D | None
) -> list[Violation]:
    """Every limit an array of compact features breaks, worst first (wafer nm);
    ``lo`` None: a feature on its own, judged by its clip's image alone."""
    out: list[Violation] = []
    lost = [d for d in lo.first if not d.resolved] if lo is not None else []
    if lost and not lo.resolved:
        # The coarsest direction lost tells most: finer ones are lost with it.
        d = max(lost, key=lambda d: d.pitch_nm)
        out.append(
            Violation(
                "unresolvable-pitch",
                "fail",
                d.pitch_nm,
                d.cutoff_pitch_nm,
                f"lattice spacing {d.pitch_nm:.1f} nm (wafer) at {d.angle_deg:.0f} degrees is "
                f"below the {d.cutoff_pitch_nm:.1f} nm this exposure can image there: the "
                + ("features do not print" if lo.rank == 0 else "features merge into lines"),
            )
        )
    if m is not None:
        out.extend(printing_violations(m.missing, m.merged, m.contrast, "joins its neighbours"))
    if lo is not None:
        v = band_violation(
            rule,
            "low-k1",
            lo.k1,
            K1_BANDS,
            lambda limit, key: (
                f"k1 {lo.k1:.3f} is below {limit:g} ({key}) at lattice spacing "
                f"{lo.pitch_min_nm:.1f} nm (wafer)"
            ),
        )
        if v is not None:
            out.append(v)
    if m is not None and not (m.missing or m.merged):
        nils = min(m.nils_x, m.nils_y)
        v = band_violation(
            rule,
            "low-nils",
            nils,
            NILS_BANDS,
            lambda limit, key: (
                f"NILS {nils:.2f} at the drawn edges (x {m.nils_x:.2f}, y {m.nils_y:.2f}) "
                f"is below {limit:g} ({key})"
            ),
        )
        if v is not None:
            out.append(v)
        out.extend(window_violations(rule, m.el_pct, m.dof_nm, "both sizes"))
        errors = [e for e in (m.size_error_x_pct, m.size_error_y_pct) if math.isfinite(e)]
        worst = max(errors, key=abs, default=math.nan)
        if math.isfinite(worst) and abs(worst) > rule.cd_tolerance_pct:
            out.append(
                Violation(
                    "cd-error",
                    "risk",
                    worst,
                    rule.cd_tolerance_pct,
                    f"printed size {m.size_x_nm:.1f} x {m.size_y_nm:.1f} nm is {worst:+.1f} % off "
                    f"drawn at the anchored dose (tolerance +-{rule.cd_tolerance_pct:g} %)",
                )
            )
    out.sort(key=violation_order)
    return out
