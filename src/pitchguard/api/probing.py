"""``pitchguard.probe``: one pitch of one deck layer explained, as a record.

The command line's ``probe`` prints what :func:`probe` returns; its
``--json`` is :meth:`ProbeResult.to_dict`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pitchguard.api.records import CheckRecord
from pitchguard.api.scanning import as_deck
from pitchguard.deck import Deck, LayerRule


def _dof_limited(dof, span) -> bool:
    from pitchguard.outputs.texts import dof_limited

    return dof_limited(dof, span)


def grating_dict(r, rule: LayerRule) -> dict:
    """A grating's orders, metrics and verdict as the JSON reports give them."""
    from pitchguard.outputs.json_report import clean_json, violation_to_dict

    m = r.metrics
    return clean_json(
        {
            "pitch_nm": r.pitch_nm,
            "cd_nm": r.cd_nm,
            "orientation_deg": r.orientation_deg,
            "k1": r.orders.k1,
            "orders": list(r.orders.orders),
            "orders_on_axis": list(r.orders.orders_on_axis),
            "two_beam_fraction": r.orders.two_beam_fraction,
            "cutoff_pitch_nm": r.orders.cutoff_pitch_nm,
            "contrast": m.contrast if m else None,
            "nils": m.nils if m else None,
            "printed_cd_nm": m.cd_nm if m else None,
            "cd_error_pct": m.cd_error_pct if m else None,
            "exposure_latitude_pct": m.el_pct if m else None,
            "depth_of_focus_nm": m.dof_nm if m else None,
            "depth_of_focus_at_least": _dof_limited(m.dof_nm if m else None, rule.focus_span_nm),
            "polarization": rule.exposure.polarization,
            "image_index": rule.exposure.image_index,
            "edge_placement_nm": m.epe_nm if m else None,
            "sizing": rule.sizing,
            "bias_nm": m.bias_nm if m and m.sizing else None,
            "threshold": m.threshold if m else None,
            "dose_to_size": m.dose_to_size if m else None,
            "severity": r.severity,
            "checks": [violation_to_dict(v) for v in r.violations],
        }
    )


def array_dict(r, rule: LayerRule) -> dict:
    """An array probe's lattice orders, metrics, verdict and images (JSON values)."""
    from pitchguard.outputs.json_report import clean_json, violation_to_dict

    m, shown, lo = r.metrics, r.shown, r.orders
    row = r.intensity[r.intensity.shape[0] // 2]  # the cut along x through the feature centre
    return clean_json(
        {
            "pitch_nm": r.pitch_nm[0],
            "pitch_y_nm": r.pitch_nm[1],
            "cd_nm": r.cd_nm[0],
            "cd_y_nm": r.cd_nm[1],
            "k1": lo.k1,
            "rank": lo.rank,
            "directions": [
                {
                    "order": list(d.order),
                    "pitch_nm": d.pitch_nm,
                    "angle_deg": d.angle_deg,
                    "cutoff_pitch_nm": d.cutoff_pitch_nm,
                    "resolved": d.resolved,
                    "two_beam_fraction": d.two_beam_fraction,
                }
                for d in lo.first
            ],
            "contrast": shown.contrast,
            "nils": shown.nils_x,
            "nils_y": shown.nils_y,
            "printed_nm": [m.size_x_nm, m.size_y_nm],
            "missing": m.missing,
            "merged": m.merged,
            "exposure_latitude_pct": m.el_pct,
            "depth_of_focus_nm": m.dof_nm,
            "depth_of_focus_at_least": _dof_limited(m.dof_nm, rule.focus_span_nm),
            "polarization": rule.exposure.polarization,
            "image_index": rule.exposure.image_index,
            "threshold": m.threshold,
            "severity": r.severity,
            "checks": [violation_to_dict(v) for v in r.violations],
            "focus_nm": r.focus_nm,
            "image": {"x_nm": r.x_nm.tolist(), "intensity": row.tolist()},
            "image_2d": {
                "x_nm": r.x_nm.tolist(),
                "y_nm": r.y_nm.tolist(),
                "intensity": r.intensity.tolist(),
            },
        }
    )


@dataclass(frozen=True)
class ProbeResult:
    """A probed pitch: ``kind`` is "grating" (lines) or "array" (compact
    features); ``severity`` and ``checks`` the verdict; ``data`` every figure
    as the JSON gives it.  ``as_drawn`` is the verdict without mask bias when
    the layer is judged as sized.  ``rule`` and ``raw`` (the engine's result)
    are what the plots draw."""

    kind: str
    layer: str
    severity: str
    checks: tuple[CheckRecord, ...]
    data: dict[str, Any] = field(repr=False)
    as_drawn: ProbeResult | None = field(default=None, repr=False)
    rule: Any = field(default=None, repr=False, compare=False)
    raw: Any = field(default=None, repr=False, compare=False)

    def to_dict(self) -> dict:
        """What ``probe --json`` prints."""
        from pitchguard.outputs.verdict import CAUTION

        out = dict(self.data)
        if self.as_drawn is not None:
            out["as_drawn"] = self.as_drawn.data
        out["caution"] = CAUTION
        return out


def as_drawn(rule: LayerRule) -> LayerRule | None:
    """The layer judged as drawn, when the deck judges it as sized; else None."""
    if rule.sizing != "retarget":
        return None
    import copy

    drawn = copy.copy(rule)
    drawn.sizing = "drawn"
    return drawn


def _result(kind, rule, r, data, as_drawn=None) -> ProbeResult:
    return ProbeResult(
        kind=kind,
        layer=rule.name,
        severity=r.severity,
        checks=tuple(CheckRecord(**c) for c in data["checks"]),
        data=data,
        as_drawn=as_drawn,
        rule=rule,
        raw=r,
    )


def probe(
    rules: str | Path | Deck,
    layer: str,
    pitch_nm: float,
    cd_nm: float,
    *,
    orientation_deg: float = 90.0,
    focus_nm: float = 0.0,
    pitch_y_nm: float | None = None,
    cd_y_nm: float | None = None,
) -> ProbeResult:
    """Judge lines of ``cd_nm`` at ``pitch_nm`` on deck layer ``layer`` (lines
    along ``orientation_deg``; the image shown at ``focus_nm``, the metrics over
    the deck's focus range).  With ``pitch_y_nm`` or ``cd_y_nm``: a rectangular
    array of compact features instead (the other defaults to its x twin)."""
    from pitchguard.option_bounds import ANGLE_DEG, FOCUS_NM, LENGTH_NM, checked

    pitch_nm = checked("pitch_nm", pitch_nm, LENGTH_NM)
    cd_nm = checked("cd_nm", cd_nm, LENGTH_NM)
    if pitch_y_nm is not None:
        pitch_y_nm = checked("pitch_y_nm", pitch_y_nm, LENGTH_NM)
    if cd_y_nm is not None:
        cd_y_nm = checked("cd_y_nm", cd_y_nm, LENGTH_NM)
    orientation_deg = checked("orientation_deg", orientation_deg, ANGLE_DEG)
    focus_nm = checked("focus_nm", focus_nm, FOCUS_NM)
    deck = as_deck(rules)
    rule = deck.layer(layer)
    if pitch_y_nm is not None or cd_y_nm is not None:
        from pitchguard.judge.gratings import array_probe

        py = pitch_nm if pitch_y_nm is None else pitch_y_nm
        cy = cd_nm if cd_y_nm is None else cd_y_nm
        r = array_probe(rule, pitch_nm, cd_nm, py, cy, focus_nm)
        return _result("array", rule, r, array_dict(r, rule))
    from pitchguard.judge.gratings import grating
    from pitchguard.outputs.json_report import clean_json

    r = grating(rule, pitch_nm, cd_nm, orientation_deg, focus_nm)
    data = grating_dict(r, rule)
    data["focus_nm"] = focus_nm
    # The image's own contrast and NILS, at the focus it was taken.
    data["contrast"], data["nils"] = clean_json([r.shown.contrast, r.shown.nils])
    data["image"] = clean_json({"x_nm": r.x_nm.tolist(), "intensity": r.intensity.tolist()})
    drawn = None
    drawn_rule = as_drawn(rule)
    if drawn_rule is not None:
        d = grating(drawn_rule, pitch_nm, cd_nm, orientation_deg)
        drawn = _result("grating", drawn_rule, d, grating_dict(d, drawn_rule))
    return _result("grating", rule, r, data, drawn)
