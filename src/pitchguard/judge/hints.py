"""Fix hints: the nearest pitch at which the finding's own cut, respaced, and
an ideal grating both pass; made once per distinct finding."""

from __future__ import annotations

import math
from functools import lru_cache
from typing import NamedTuple

from pitchguard.deck import LayerRule
from pitchguard.judge import hint_store
from pitchguard.judge.checks import Violation, violations
from pitchguard.judge.hint_store import JudgedGrating
from pitchguard.optics.orders import analyse_pitch

HINT_RANGE = (0.6, 2.0)
"""Pitches tried for a fix hint, as fractions of the flagged pitch."""


HINT_IMAGES = 16
"""At most this many candidate pitches are imaged per hint (nearest first)."""


HINT_CUTS = 8
"""At most this many respaced real cuts are imaged per hint (nearest first)."""


@lru_cache(maxsize=4096)
def grid_orders_pass(rule: LayerRule, pitch_q: int, angle_q: int, quantum: float) -> bool:
    """True when a grating of pitch ``pitch_q * quantum`` (wafer nm) at angle
    ``angle_q / 10`` degrees passes the order and k1 rules."""
    pitch, angle = pitch_q * quantum, angle_q / 10.0
    res = analyse_pitch(rule.exposure, pitch, (angle - 90.0) % 180.0)
    return not violations(rule, res, None, pitch)


def take_grating_passes() -> list[JudgedGrating]:
    """Ideal gratings judged here since the last call, to share with other
    processes (see :func:`give_grating_passes`)."""
    return hint_store.grid.take()


def give_grating_passes(rows: list[JudgedGrating]) -> None:
    """Take gratings another process judged (:func:`take_grating_passes`); a row
    serves only a rule equal to the one it was judged under."""
    hint_store.grid.give(rows)


def forget_grating_passes() -> None:
    """Drop every judged grating and hint text this process holds."""
    hint_store.forget()


def _grating_passes(rule: LayerRule, cd_q: int, pitch_q: int, angle_q: int, quantum: float):
    """True when an ideal grating of this CD and pitch (wafer nm) breaks no limit."""
    key = hint_store.grid_key(rule, cd_q, pitch_q, angle_q, quantum)
    given = hint_store.grid.get(key)
    if given is None:
        given = hint_store.grid.put(key, _judge_grating(rule, cd_q, pitch_q, angle_q, quantum))
    return given


def _judge_grating(rule: LayerRule, cd_q: int, pitch_q: int, angle_q: int, quantum: float):
    from pitchguard.optics.cut_images import grating_metrics

    if not grid_orders_pass(rule, pitch_q, angle_q, quantum):
        return False
    if not rule.image_checks:
        return True
    cd, pitch, angle = cd_q * quantum, pitch_q * quantum, angle_q / 10.0
    res = analyse_pitch(rule.exposure, pitch, (angle - 90.0) % 180.0)
    m, _, _ = grating_metrics(rule, pitch, cd, angle)
    return not violations(rule, res, m, pitch)


class RealCut(NamedTuple):
    """A finding's own cut, for checking a hint on it (drawn nm, plain values)."""

    bounds: tuple[float, ...]
    reach: float
    source_angle: float  # the source turn the cut is imaged with (degrees)
    space: float  # the flagged site's space
    tol: float  # spaces within this of ``space`` are the flagged ones


def respaced_cut(real: RealCut, cd_w: float, pitch_w: float, scale: float):
    """``real`` with its flagged spaces set to ``pitch_w - cd_w`` (wafer nm)."""
    from pitchguard.geometry.cuts import Cut, respaced

    return respaced(Cut(real.bounds, real.reach), real.space, (pitch_w - cd_w) / scale, real.tol)


def _cut_passes(
    rule: LayerRule, real: RealCut, cd_w: float, pitch_w: float, angle: float, scale: float
) -> bool:
    """True when ``real`` with its flagged spaces set to ``pitch_w - cd_w`` (wafer
    nm) breaks no limit at that pitch."""
    from pitchguard.optics.cut_images import measure_cuts

    res = analyse_pitch(rule.exposure, pitch_w, (angle - 90.0) % 180.0)
    cut = respaced_cut(real, cd_w, pitch_w, scale)
    (m,) = measure_cuts([cut], [real.source_angle], rule, scale)
    return not violations(rule, res, m, pitch_w)


def exact_orders_verdict(rule: LayerRule, pitch_nm: float, angle_deg: float):
    """The order and k1 verdict of an ideal grating: False when it breaks a limit
    already, else its :class:`OrderResult` (images still to be judged)."""
    res = analyse_pitch(rule.exposure, pitch_nm, (angle_deg - 90.0) % 180.0)
    return False if violations(rule, res, None, pitch_nm) else res


def _exact_grating_passes(rule: LayerRule, cd_nm: float, pitch_nm: float, angle_deg: float) -> bool:
    """True when the ideal grating of exactly this CD and pitch (wafer nm) breaks no limit."""
    from pitchguard.optics.cut_images import grating_metrics

    key = (rule, cd_nm, pitch_nm, angle_deg)
    passes = hint_store.exact.get(key)
    if passes is None:
        res = exact_orders_verdict(rule, pitch_nm, angle_deg)
        passes = res is not False
        if passes and rule.image_checks:
            m, _, _ = grating_metrics(rule, pitch_nm, cd_nm, angle_deg % 180.0)
            passes = not violations(rule, res, m, pitch_nm)
        hint_store.exact.put(key, passes)
    return passes


@lru_cache(maxsize=65536)
def _candidates(rule: LayerRule, cd_nm: float, pitch_nm: float, angle_deg: float) -> tuple:
    """``(cd_q, angle_q, quantum, pitches_q)``: the pitches a hint tries, nearest
    first, those the order and k1 rules let through, at most ``HINT_IMAGES``."""
    quantum = rule.exposure.lambda_over_na_nm / 20.0
    cd_q = int(round(cd_nm / quantum))
    angle_q = int(round((angle_deg % 180.0) * 10))
    lo = max(int(math.ceil(HINT_RANGE[0] * pitch_nm / quantum)), int(cd_q * 1.05) + 1)
    hi = int(HINT_RANGE[1] * pitch_nm / quantum)
    here = pitch_nm / quantum
    out = []
    for q in sorted(range(lo, hi + 1), key=lambda q: (abs(q - here), q)):
        if grid_orders_pass(rule, q, angle_q, quantum):
            out.append(q)
            if len(out) >= HINT_IMAGES:
                break
    return cd_q, angle_q, quantum, tuple(out)


# A hint is worked out by a generator that yields what it needs judged and is
# sent the verdict: ("exact", rule, cd, pitch, angle) for an ideal grating of
# exactly that CD and pitch, ("grid", rule, cd_q, pitch_q, angle_q, quantum) for
# one on the search grid, ("cut", rule, real, cd, pitch, angle, scale) for a
# finding's cut respaced.  hint_text answers each at once; hint_texts answers
# those of many hints together, in batches (judge/hint_batch.py).


def _pitch_search(rule, cd_nm, pitch_nm, angle_deg, real=None, scale=1.0):
    cd_q, angle_q, quantum, cands = _candidates(rule, cd_nm, pitch_nm, angle_deg)
    cuts = 0
    for q in cands:
        if not (yield ("grid", rule, cd_q, q, angle_q, quantum)):
            continue
        if real is None or not rule.image_checks:
            return q * quantum
        if (yield ("cut", rule, real, cd_nm, q * quantum, angle_deg, scale)):
            return q * quantum
        cuts += 1
        if cuts >= HINT_CUTS:
            break
    return math.nan


def answer(request: tuple) -> bool:
    """The verdict a hint generator asks for, judged on its own."""
    kind, *args = request
    if kind == "exact":
        return _exact_grating_passes(*args)
    if kind == "grid":
        return _grating_passes(*args)
    return _cut_passes(*args)


def drive(steps):
    """Run a hint generator to its end, answering each request at once."""
    try:
        request = next(steps)
        while True:
            request = steps.send(answer(request))
    except StopIteration as done:
        return done.value


def passing_pitch(
    rule: LayerRule,
    cd_nm: float,
    pitch_nm: float,
    angle_deg: float,
    real: RealCut | None = None,
    scale: float = 1.0,
) -> float:
    """Nearest pitch (wafer nm) at this CD whose ideal grating breaks no limit, or nan.

    ``angle_deg`` is the pitch direction.  Pitches on a grid of lambda/NA / 20
    between 0.6x and 2x the flagged pitch are tried nearest first; those that
    pass the order and k1 rules are imaged, at most ``HINT_IMAGES`` of them.
    With ``real`` (drawn nm, ``scale`` to wafer) a pitch must also pass on
    that cut respaced to it (:func:`pitchguard.geometry.cuts.respaced`), at
    most ``HINT_CUTS`` of which are imaged.
    """
    return drive(_pitch_search(rule, cd_nm, pitch_nm, angle_deg, real, scale))


def hint_key(
    vs: list[Violation] | tuple,
    cutoff_pitch_nm: float,
    cd_w: float,
    pitch_w: float,
    angle: float,
    scale: float,
    real: RealCut | None = None,
    placement: tuple[float, float] | None = None,
) -> tuple:
    """All a finding's hint depends on, besides its layer's rule (plain values);
    ``placement`` is ``(shift, epe)`` of the printed feature (wafer nm, see
    :class:`~pitchguard.judge.findings.Finding`)."""
    checks = tuple(v.check for v in vs)
    return (checks, cutoff_pitch_nm, cd_w, pitch_w, angle, scale, real, placement)


def direction_text(angle_deg: float) -> str:
    """A layout direction: ``+x``, ``-y``, ... on the axes, else its angle."""
    a = angle_deg % 360.0
    for axis, name in ((0.0, "+x"), (90.0, "+y"), (180.0, "-x"), (270.0, "-y"), (360.0, "+x")):
        if abs(a - axis) < 0.5:
            return name
    return f"{a:.0f}°"


def placement_advice(feature: str, angle: float, scale: float, placement) -> str:
    """Which way to move (or resize) a feature that prints off its drawn edges."""
    shift, epe = placement
    if abs(shift) >= 0.5 * abs(epe):
        towards = direction_text(angle if shift > 0 else angle + 180.0)
        back = direction_text(angle + 180.0 if shift > 0 else angle)
        d = abs(shift) / scale
        return (
            f"the worst {feature} prints {d:.1f} nm off its drawn place, towards {towards}: "
            f"move its drawn edges {d:.1f} nm towards {back} (the edge bias OPC would give "
            f"it), or make its neighbourhood symmetric (at the end of an array: a dummy "
            f"{feature} beyond the last one)"
        )
    way = "narrow" if epe > 0 else "widen"
    return f"{way} the drawn {feature} by {2 * abs(epe) / scale:.1f} nm: it prints off its size"


def hint_text(rule: LayerRule, key: tuple) -> str:
    """What to change, in drawn nm (kept per process: hints recur)."""
    text = hint_store.texts.get((rule, key))
    if text is None:
        text = hint_store.texts.put((rule, key), drive(hint_steps(rule, key)))
    return text


def width_advice(checks: tuple[str, ...], feature: str) -> str:
    """Which way to resize the feature: narrower when it runs into its neighbour,
    wider when it does not print, otherwise either way the deck's limits ask."""
    if "features-bridged" in checks:
        return f"narrow the {feature} (widen the space)"
    if "feature-not-printed" in checks:
        return f"widen the {feature}"
    return f"resize the {feature} (try `pitchguard probe` on both sides of this width)"


def hint_steps(rule: LayerRule, key: tuple):
    """The generator that works out the hint of ``key`` (see :func:`drive`)."""
    checks, cutoff_pitch_nm, cd_w, pitch_w, angle, scale, real, *more = key
    first = checks[0]
    feature = "line" if rule.field == "clear" else "opening"
    placement = more[0] if more else None
    if first == "edge-placement" and placement is not None:
        return placement_advice(feature, angle, scale, placement)
    if first == "sizing-bias":
        return (
            f"move the pitch or the {feature} width towards the layer's anchor geometry, "
            "where the mask needs less bias; or check with the fab's OPC whether this bias "
            "is allowed (bias_max_nm)"
        )
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
        return f"{width_advice(checks, feature)} or give it neighbours at a regular pitch"
    if (yield ("exact", rule, cd_w, pitch_w, angle)):
        # The ideal grating passes at this pitch: the real neighbourhood fails.
        return (
            f"an even grating of this {feature} width and pitch passes every limit: "
            "what fails here is the neighbourhood (unequal spaces, an open side or the "
            f"last {feature} of an array); make the spacing regular, or add a dummy "
            f"{feature} beyond the last one"
        )
    ok = ideal = yield from _pitch_search(rule, cd_w, pitch_w, angle)
    if real is not None and not math.isnan(ok):
        ok = yield from _pitch_search(rule, cd_w, pitch_w, angle, real, scale)
    if math.isnan(ok) and not math.isnan(ideal):
        return (
            f"an even grating of this {feature} width passes at pitch {ideal / scale:.1f} nm, "
            f"but with this neighbourhood no nearby pitch passes: "
            f"{width_advice(checks, feature)}, or "
            "change the exposure (try `pitchguard sweep` for this layer and width)"
        )
    if math.isnan(ok):
        return (
            f"no nearby pitch passes at this {feature} width: "
            f"{width_advice(checks, feature)}, or "
            "change the exposure (try `pitchguard sweep` for this layer and width)"
        )
    p_d, s_d = ok / scale, (ok - cd_w) / scale
    where = ", here and in an even grating" if real is not None and rule.image_checks else ""
    return (
        f"at this {feature} width, pitch {p_d:.1f} nm (space {s_d:.1f} nm) passes every "
        f"limit{where}"
    )
