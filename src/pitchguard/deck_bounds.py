"""Bounds on every number of a rule deck, each with the reason it holds.

A value outside them is refused with the key and the reason: what the
physics allows (an NA no lens has, a ring narrower than the source sampling
resolves) or what the machine can image (windows and grids are sized in
lambda/NA, so lengths are bounded by multiples of it).  Absolute bounds are
checked as each key is read (:func:`bounded`); bounds relative to a layer's
exposure once its limits are resolved (:func:`rule_problems`).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from pydantic import AfterValidator

from pitchguard.deck_messages import resist_index_message

if TYPE_CHECKING:
    from pitchguard.deck import Limits
    from pitchguard.layer_rule import LayerRule

MIN_NA = 0.05
"""Smallest NA: projection lenses for lithography start near 0.1 (from memory),
and every window imaged is sized in lambda/NA."""

MIN_SOURCE_WIDTH = 0.05
"""Narrowest source extent (sigma units): disc radius, ring width, pole arc.
The source is sampled over the whole pupil in cells of an eighth of it
(``optics.orders.cell_step``): 0.05 gives about 10^5 cells, narrower ones
grow as the inverse square."""

MAX_ANGLE_DEG = 360.0
"""Angles are refused beyond a full turn rather than reduced: a huge angle
has no precision left in its remainder."""

MIN_LENGTH_NM = 1e-3
"""Shortest length a key may give: a picometre, below any layout's database unit."""

MAX_LENGTH_NM = 1e7
"""Longest length a key may give before the exposure is known: 1 cm, beyond any field."""

MAX_DENSE_LINES = 1000
"""Most lines ``dense_min_lines`` may ask for: more would leave no array dense."""

# Multiples of lambda/NA that bound a layer's lengths (see rule_problems).
MIN_RUN_MAX_LAMBDA_NA = 10.0
RANGE_MIN_LAMBDA_NA = 0.5
RANGE_MAX_LAMBDA_NA = 10.0
COMPACT_MAX_LAMBDA_NA = 4.0
PULLBACK_MAX_LAMBDA_NA = 1.0
PITCH_TOLERANCE_MAX_LAMBDA_NA = 1.0
BIAS_MAX_LAMBDA_NA = 1.0
ANCHOR_PITCH_MAX_LAMBDA_NA = 50.0
FOCUS_MAX_QUARTER_WAVES = 25.0
"""Widest focus half range, in quarter-wave focus: the image is gone long before."""


def bounded(
    lo: float | None = None,
    hi: float | None = None,
    *,
    why: str,
    lo_open: bool = False,
    hi_open: bool = False,
) -> AfterValidator:
    """A validator refusing values outside ``lo``..``hi`` with the reason ``why``."""

    def check(v):
        low = lo is not None and (v <= lo if lo_open else v < lo)
        high = hi is not None and (v >= hi if hi_open else v > hi)
        if low or high:
            raise ValueError(f"{v!r} {range_text(lo, hi, lo_open, hi_open)}: {why}")
        return v

    return AfterValidator(check)


def range_text(lo, hi, lo_open: bool = False, hi_open: bool = False) -> str:
    """``must be above 0 and at most 1`` and the like."""
    parts = []
    if lo is not None:
        parts.append(f"{'above' if lo_open else 'at least'} {lo:g}")
    if hi is not None:
        parts.append(f"{'below' if hi_open else 'at most'} {hi:g}")
    return "must be " + " and ".join(parts)


LENGTH_WHY = (
    "a length in nm at wafer scale, from a picometre (below any layout's database unit) "
    "to a centimetre (beyond any exposure field)"
)


def length(why: str = LENGTH_WHY, lo_open: bool = False) -> AfterValidator:
    """A length key: at least a picometre (or above 0), at most 1 cm."""
    lo = 0.0 if lo_open else MIN_LENGTH_NM
    return bounded(lo, MAX_LENGTH_NM, why=why, lo_open=lo_open)


def source_width_problem(what: str, width: float) -> str | None:
    """Why a source extent of ``width`` (sigma) cannot be sampled, or None."""
    if width >= MIN_SOURCE_WIDTH * (1 - 1e-9):  # 0.85 - 0.8 is a hair under 0.05
        return None
    return (
        f"{what} is {width:.3g} wide (sigma units); the source sampling, cells of an "
        f"eighth of it over the whole pupil, resolves {MIN_SOURCE_WIDTH:g} and more"
    )


def _quarter_wave(rule: LayerRule) -> float:
    from pitchguard.layer_rule import quarter_wave_focus_nm

    return quarter_wave_focus_nm(rule.exposure)


def rule_problems(rule: LayerRule) -> list[tuple[str, str]]:
    """``(key, what is wrong)`` for each of a resolved layer's lengths outside the
    bounds its exposure sets (keys as in the deck; ``anchor.pitch_nm`` for the anchor)."""
    lam_na = rule.exposure.lambda_over_na_nm
    on = f"on exposure {rule.exposure_name!r}"
    out: list[tuple[str, str]] = []

    def within(key: str, value: float, factor: float, why: str, low=None) -> None:
        """``value`` at most ``factor`` lambda/NA; ``low``: (nm, what it is, why below)."""
        hi = factor * lam_na
        if value > hi:
            out.append(
                (
                    key,
                    f"{value:g} nm must be at most {factor:g} lambda/NA ({hi:.4g} nm {on}): {why}",
                )
            )
        elif low is not None and value < low[0]:
            lo, name, why_low = low
            out.append((key, f"{value:g} nm must be at least {name} ({lo:.4g} nm {on}): {why_low}"))

    within(
        "min_run_nm",
        rule.min_run_nm,
        MIN_RUN_MAX_LAMBDA_NA,
        "an edge that long images as an endless line",
    )
    within(
        "interaction_range_nm",
        rule.interaction_range_nm,
        RANGE_MAX_LAMBDA_NA,
        "each cut is imaged over twice the range, and farther neighbours change no image",
        (
            RANGE_MIN_LAMBDA_NA * lam_na,
            f"{RANGE_MIN_LAMBDA_NA:g} lambda/NA",
            "a neighbour nearer than the finest pitch imaged, lambda/(2 NA), always "
            "shapes the image",
        ),
    )
    within(
        "compact_max_nm",
        rule.compact_max_nm,
        COMPACT_MAX_LAMBDA_NA,
        "compact features are imaged on 2-D clips that grow with it, and larger ones "
        "image as lines",
    )
    within(
        "line_end_pullback_max_nm",
        rule.line_end_pullback_max_nm,
        PULLBACK_MAX_LAMBDA_NA,
        "a line end's clip reaches lambda/NA behind the tip: no larger pullback is measured",
    )
    within(
        "pitch_tolerance_nm",
        rule.pitch_tolerance_nm,
        PITCH_TOLERANCE_MAX_LAMBDA_NA,
        "pitches that far apart image differently and cannot share a region",
    )
    within(
        "bias_max_nm",
        rule.bias_max_nm,
        BIAS_MAX_LAMBDA_NA,
        "a bias that large per edge draws another feature, not a correction",
    )
    if rule.anchor is not None:
        within(
            "anchor.pitch_nm",
            rule.anchor.pitch_nm,
            ANCHOR_PITCH_MAX_LAMBDA_NA,
            "the anchor is imaged as a grating, and gratings are probed up to that pitch",
            (
                rule.exposure.cutoff_pitch_nm,
                "the cutoff pitch lambda/(NA (1 + sigma_max))",
                "a finer grating forms no image, so no dose prints it on size",
            ),
        )
    top = FOCUS_MAX_QUARTER_WAVES * _quarter_wave(rule)
    for key, value, limit, times in (
        ("focus_half_range_nm", rule.focus_half_range_nm, top, FOCUS_MAX_QUARTER_WAVES),
        ("dof_min_nm", rule.dof_min_nm, 2 * top, 2 * FOCUS_MAX_QUARTER_WAVES),
    ):
        if value > limit:
            out.append(
                (
                    key,
                    f"{value:g} nm must be at most {times:g} quarter-wave focus, "
                    f"lambda/(4 (n - sqrt(n^2 - NA^2))) ({limit:.4g} nm {on}): defocus that "
                    "large leaves no image to judge",
                )
            )
    return out


def layer_problems(
    i: int, rule: LayerRule, entry: Limits, defaults: Limits
) -> list[tuple[str, str]]:
    """``(key, what is wrong)`` for the limits of layer ``i`` that only make sense
    together or against its exposure; the key names where the value was set."""

    def key(name: str) -> str:
        head = name.split(".")[0]
        if getattr(entry, head) is not None:
            return f"layers[{i}].{name}"
        return f"layer_defaults.{name}" if getattr(defaults, head) is not None else ""

    out = []
    layer = f"layer {rule.name!r}"
    if rule.k1_risk_below > rule.k1_marginal_below:
        own = entry.k1_risk_below is not None or entry.k1_marginal_below is not None
        out.append(
            (
                f"{f'layers[{i}]' if own else 'layer_defaults'}.k1_risk_below",
                f"{rule.k1_risk_below} must not exceed k1_marginal_below "
                f"({rule.k1_marginal_below}) for {layer}",
            )
        )
    if rule.sizing == "retarget" and rule.anchor is None:
        out.append(
            (
                key("sizing"),
                '"retarget" sizes each feature to print on size at the anchored dose; '
                f"{layer} has no anchor",
            )
        )
    index = rule.exposure.resist_index
    if index is not None and rule.exposure.na >= index:
        out.append(
            (key("resist_index"), f"{resist_index_message(index, rule.exposure.na)} ({layer})")
        )
    if rule.image_checks and rule.dof_min_nm > rule.focus_span_nm * (1 + 1e-9):
        out.append(
            (
                key("dof_min_nm") or f"layers[{i}].dof_min_nm",
                f"{rule.dof_min_nm:g} nm cannot be measured on {layer}: its focus samples "
                f"span {rule.focus_span_nm:g} nm (focus_half_range_nm "
                f"{rule.focus_half_range_nm:g} x 2, focus_steps {rule.focus_steps}); widen "
                "the range or lower the floor",
            )
        )
    for name, what in rule_problems(rule):
        where = key(name)
        if where:  # the defaults made from lambda/NA are inside every bound
            out.append((where, f"{what} ({layer})"))
    return [(k or f"layers[{i}]", what) for k, what in out]


MAX_NESTING = 8
"""Deepest nesting of tables and arrays a deck may have (it needs four)."""
