"""Fix hints of many findings at once: the same steps as :func:`hints.hint_text`,
with the gratings and cuts they ask to have judged imaged together.

Every hint is worked out by its generator (:func:`hints.hint_steps`).  Here all
of them advance in lockstep: each round gathers what the hints still waiting
ask for, judges the ideal gratings of one pitch in one batch
(:func:`cut_images.grating_metrics_batch`) and the respaced cuts of a layer in
one call to :func:`cut_images.measure_cuts`, and sends each hint its answer.
A hint asks for what it would ask for alone, in the same order, so the texts
are those of :func:`hints.hint_text` (the plain twin; the tests compare them).
Over a layer's hints the judged gratings form a table over CD and pitch on
the search grid, filled once and shared by every finding that meets it.
"""

from __future__ import annotations

from collections import defaultdict

from pitchguard.deck import LayerRule
from pitchguard.judge import hint_store, hints
from pitchguard.judge.checks import violations
from pitchguard.optics.orders import analyse_pitch


def hint_texts(items: list[tuple[LayerRule, tuple]]) -> list[str]:
    """The hint text of each ``(rule, hint key)`` (see :func:`hints.hint_key`)."""
    out: list[str | None] = [None] * len(items)
    live: dict[int, tuple] = {}  # item -> (generator, its pending request)
    for i, (rule, key) in enumerate(items):
        text = hint_store.texts.get((rule, key))
        if text is not None:
            out[i] = text
            continue
        steps = hints.hint_steps(rule, key)
        _step(i, steps, None, live, out, items)
    while live:
        answers = _answer_all([req for _, req in live.values()])
        for (i, (steps, _)), verdict in zip(list(live.items()), answers, strict=True):
            _step(i, steps, verdict, live, out, items)
    return out  # type: ignore[return-value]


def _step(i, steps, verdict, live, out, items) -> None:
    try:
        request = next(steps) if verdict is None else steps.send(verdict)
    except StopIteration as done:
        live.pop(i, None)
        out[i] = hint_store.texts.put(items[i], done.value)
        return
    live[i] = (steps, request)


def _answer_all(requests: list[tuple]) -> list[bool]:
    """The verdict of each request, those not known yet judged in batches."""
    _judge_exact([r[1:] for r in requests if r[0] == "exact"])
    _judge_grid([r[1:] for r in requests if r[0] == "grid"])
    cuts = _judge_cuts([r[1:] for r in requests if r[0] == "cut"])
    return [cuts[r[1:]] if r[0] == "cut" else hints.answer(r) for r in requests]


def _judge_exact(requests: list[tuple]) -> None:
    """Fill the exact-grating verdicts of ``(rule, cd, pitch, angle)``."""
    from pitchguard.optics.cut_images import grating_metrics_batch

    groups: dict[tuple, list[tuple]] = defaultdict(list)
    orders: dict[tuple, object] = {}  # group -> its order and k1 verdict
    for key in dict.fromkeys(requests):
        if key in hint_store.exact:
            continue
        rule, cd, pitch, angle = key
        res = hints.exact_orders_verdict(rule, pitch, angle)
        if res is False or not rule.image_checks:
            hint_store.exact.put(key, res is not False)
        else:
            group = (rule, pitch, angle % 180.0)
            groups[group].append(key)
            orders[group] = res
    for (rule, pitch, angle), keys in groups.items():
        res = orders[(rule, pitch, angle)]
        ms = grating_metrics_batch(rule, pitch, [k[1] for k in keys], angle)
        for key, m in zip(keys, ms, strict=True):
            hint_store.exact.put(key, not violations(rule, res, m, pitch))


def _judge_grid(requests: list[tuple]) -> None:
    """Fill the verdicts of gratings on the search grid, ``(rule, cd_q, pitch_q,
    angle_q, quantum)``: one batch per pitch."""
    from pitchguard.optics.cut_images import grating_metrics_batch

    groups: dict[tuple, list[int]] = defaultdict(list)
    for rule, cd_q, pitch_q, angle_q, quantum in dict.fromkeys(requests):
        key = hint_store.grid_key(rule, cd_q, pitch_q, angle_q, quantum)
        if key in hint_store.grid:
            continue
        if not hints.grid_orders_pass(rule, pitch_q, angle_q, quantum):
            hint_store.grid.put(key, False)
        elif not rule.image_checks:
            hint_store.grid.put(key, True)
        else:
            groups[(rule, pitch_q, angle_q, quantum)].append(cd_q)
    for (rule, pitch_q, angle_q, quantum), cds_q in groups.items():
        pitch, angle = pitch_q * quantum, angle_q / 10.0
        res = analyse_pitch(rule.exposure, pitch, (angle - 90.0) % 180.0)
        ms = grating_metrics_batch(rule, pitch, [c * quantum for c in cds_q], angle)
        for cd_q, m in zip(cds_q, ms, strict=True):
            key = hint_store.grid_key(rule, cd_q, pitch_q, angle_q, quantum)
            hint_store.grid.put(key, not violations(rule, res, m, pitch))


def _judge_cuts(requests: list[tuple]) -> dict[tuple, bool]:
    """Verdicts of respaced cuts, ``(rule, real, cd, pitch, angle, scale)``: the cuts
    of one layer and scale measured in one call."""
    from pitchguard.optics.cut_images import measure_cuts

    groups: dict[tuple, list[tuple]] = defaultdict(list)
    for req in dict.fromkeys(requests):
        groups[(req[0], req[5])].append(req)
    out: dict[tuple, bool] = {}
    for (rule, scale), reqs in groups.items():
        cuts = [hints.respaced_cut(real, cd, pitch, scale) for _, real, cd, pitch, _, _ in reqs]
        ms = measure_cuts(cuts, [r[1].source_angle for r in reqs], rule, scale)
        for req, m in zip(reqs, ms, strict=True):
            _, _, _, pitch, angle, _ = req
            res = analyse_pitch(rule.exposure, pitch, (angle - 90.0) % 180.0)
            out[req] = not violations(rule, res, m, pitch)
    return out
