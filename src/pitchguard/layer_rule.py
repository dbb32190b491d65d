"""A deck layer resolved: its exposure and every limit as a number (``LayerRule``).

Defaults that do not depend on the exposure are in ``LIMIT_DEFAULTS``; the
others are multiples of the exposure's lambda/NA (``*_LAMBDA_NA``) or its
quarter-wave focus.
"""

from __future__ import annotations

import math
import re
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from pitchguard.deck import Exposure, LayerEntry, Limits

_LAYER_SPEC = re.compile(r"^\s*(\d+)\s*/\s*(\d+)\s*$")
_MAX_GDS_LAYER = 65535


def parse_layer_spec(text: str) -> tuple[int, int]:
    """Parse ``"L/D"`` into ``(layer, datatype)``; raise ValueError otherwise."""
    m = _LAYER_SPEC.match(text)
    if not m:
        raise ValueError(f'expected "LAYER/DATATYPE" such as "7/0", got {text!r}')
    layer, datatype = int(m.group(1)), int(m.group(2))
    if layer > _MAX_GDS_LAYER or datatype > _MAX_GDS_LAYER:
        raise ValueError(f"layer and datatype must be 0..{_MAX_GDS_LAYER}, got {text!r}")
    return layer, datatype


LIMIT_DEFAULTS = {
    "k1_risk_below": 0.30,
    "k1_marginal_below": 0.40,
    "pitch_tolerance_nm": 1.0,
    "dense_min_lines": 5,
    "image_checks": True,
    "nils_fail_below": 1.0,
    "nils_risk_below": 1.5,
    "nils_marginal_below": 2.0,
    "el_min_pct": 5.0,
    "cd_tolerance_pct": 10.0,
    "focus_steps": 9,
}
"""Limit defaults that do not depend on the exposure (single source of truth)."""

MIN_RUN_LAMBDA_NA = 0.5
INTERACTION_RANGE_LAMBDA_NA = 3.0
COMPACT_LAMBDA_NA = 1.0
PULLBACK_LAMBDA_NA = 0.25
BIAS_LAMBDA_NA = 0.1


def quarter_wave_focus_nm(exposure) -> float:
    """The defocus whose path difference at the pupil's edge, n z (1 - cos theta)
    with sin theta = NA / n, is a quarter wave: lambda / (4 (n - sqrt(n^2 - NA^2))).
    The default DOF floor and focus half range; 0.5 n lambda / NA^2 at low NA."""
    n, na = exposure.immersion_index, exposure.na
    # n - sqrt(n^2 - NA^2) written without cancellation at small NA.
    return exposure.wavelength_nm * (n + math.sqrt(n * n - na * na)) / (4.0 * na * na)


class LayerRule:
    """A deck layer with its exposure and every limit resolved to a number."""

    __slots__ = (
        "name",
        "layer",
        "datatype",
        "exposure_name",
        "exposure",
        "field",
        "k1_risk_below",
        "k1_marginal_below",
        "min_run_nm",
        "interaction_range_nm",
        "compact_max_nm",
        "line_end_pullback_max_nm",
        "pitch_tolerance_nm",
        "dense_min_lines",
        "image_checks",
        "nils_risk_below",
        "nils_marginal_below",
        "el_min_pct",
        "cd_tolerance_pct",
        "dof_min_nm",
        "focus_half_range_nm",
        "focus_steps",
        "resist_blur_nm",
        "edge_placement_max_pct",
        "sizing",
        "bias_max_nm",
        "anchor",
        "nils_fail_below",
        "optional",
    )

    def __init__(self, entry: LayerEntry, exposure: Exposure, defaults: Limits):
        self.name = entry.name
        self.layer, self.datatype = parse_layer_spec(entry.source)
        self.exposure_name = entry.exposure
        own_index = entry.resist_index if entry.resist_index is not None else defaults.resist_index
        if own_index is not None and own_index != exposure.resist_index:
            # Every image cache keys on the exposure: the layer's medium is part of it.
            exposure = exposure.model_copy(update={"resist_index": own_index})
        self.exposure = exposure
        self.field = entry.field
        self.optional = entry.optional

        def pick(key: str, fallback: float) -> float:
            own = getattr(entry, key)
            if own is not None:
                return own
            shared = getattr(defaults, key)
            return shared if shared is not None else fallback

        self.k1_risk_below = pick("k1_risk_below", LIMIT_DEFAULTS["k1_risk_below"])
        self.k1_marginal_below = pick("k1_marginal_below", LIMIT_DEFAULTS["k1_marginal_below"])
        self.min_run_nm = pick("min_run_nm", MIN_RUN_LAMBDA_NA * exposure.lambda_over_na_nm)
        self.interaction_range_nm = pick(
            "interaction_range_nm", INTERACTION_RANGE_LAMBDA_NA * exposure.lambda_over_na_nm
        )
        self.compact_max_nm = pick("compact_max_nm", COMPACT_LAMBDA_NA * exposure.lambda_over_na_nm)
        self.line_end_pullback_max_nm = pick(
            "line_end_pullback_max_nm", PULLBACK_LAMBDA_NA * exposure.lambda_over_na_nm
        )
        self.pitch_tolerance_nm = pick("pitch_tolerance_nm", LIMIT_DEFAULTS["pitch_tolerance_nm"])
        self.dense_min_lines = int(pick("dense_min_lines", LIMIT_DEFAULTS["dense_min_lines"]))
        for key in (
            "image_checks",
            "nils_fail_below",
            "nils_risk_below",
            "nils_marginal_below",
            "el_min_pct",
            "cd_tolerance_pct",
            "focus_steps",
        ):
            setattr(self, key, pick(key, LIMIT_DEFAULTS[key]))
        quarter_wave = quarter_wave_focus_nm(exposure)
        self.dof_min_nm = pick("dof_min_nm", quarter_wave)
        self.focus_half_range_nm = pick("focus_half_range_nm", quarter_wave)
        self.resist_blur_nm = float(pick("resist_blur_nm", 0.0))
        self.edge_placement_max_pct = float(
            pick("edge_placement_max_pct", self.cd_tolerance_pct / 2.0)
        )
        self.anchor = pick("anchor", None)
        self.sizing = pick("sizing", "drawn")
        self.bias_max_nm = float(pick("bias_max_nm", BIAS_LAMBDA_NA * exposure.lambda_over_na_nm))

    @property
    def focus_span_nm(self) -> float:
        """The widest depth of focus the sampled focus values can show."""
        return 0.0 if len(self.focus_nm) == 1 else 2.0 * self.focus_half_range_nm

    @property
    def focus_nm(self) -> tuple[float, ...]:
        """Focus values sampled for the image checks (nm, symmetric, includes 0)."""
        n = self.focus_steps
        if n == 1 or self.focus_half_range_nm == 0:
            return (0.0,)
        h = self.focus_half_range_nm
        return tuple(-h + 2 * h * k / (n - 1) for k in range(n))

    @property
    def source(self) -> str:
        return f"{self.layer}/{self.datatype}"

    def __repr__(self) -> str:
        return f"LayerRule({self.name!r}, {self.source}, exposure={self.exposure_name!r})"
