"""Hints made together (pitchguard.judge.hint_batch) against hints made one at a
time (pitchguard.judge.hints.hint_text, the plain twin), and the batched ideal
gratings behind them against the plain grating metrics.

The texts must be the same word for word: a hint asks for the same gratings
and cuts in the same order either way, only imaged in batches.  The reference
for the metrics themselves is the plain path (checked against published optics
in test_image.py).
"""

from __future__ import annotations

import dataclasses
import math

import pytest

from decks import DEMO_DECK  # tests/ is on sys.path (conftest)
from pitchguard.deck import parse_deck
from pitchguard.judge import hints
from pitchguard.judge.hint_batch import hint_texts
from pitchguard.optics import cut_images


def _grating_cut(cd, p, left, right):
    """A line of width ``cd`` with ``left`` and ``right`` neighbours at pitch ``p``."""
    return tuple(
        round(v, 3) for k in range(-left, right + 1) for v in (k * p - cd / 2, k * p + cd / 2)
    )


# A 50 nm line among lines at 100 nm pitch, meant for a wider line: its
# neighbourhood fails at any nearby pitch.
MISMATCHED = (-225.0, -175.0, -125.0, -75.0, -25.0, 25.0, 75.0, 125.0, 175.0, 225.0)


@pytest.fixture()
def rule():
    deck = parse_deck(DEMO_DECK.read_text(), DEMO_DECK)
    return next(r for r in deck.layers if r.image_checks), deck.scale_to_wafer


def _forget():
    hints.forget_grating_passes()
    cut_images.clear_cut_cache()


def _key(checks, *rest):
    vs = [hints.Violation(c, "fail", 0.0, 0.0, "") for c in checks]
    return hints.hint_key(vs, *rest)


def _keys(r, scale):
    out = []
    lim = r.exposure.lambda_over_na_nm
    for f in (0.55, 0.75, 0.8, 0.85, 0.95, 1.2, 1.6):
        p = f * lim
        for cd in (0.5 * p, 0.6 * p, 0.7 * p):
            for angle in (0.0, 90.0):
                for left, right in ((1, 1), (1, 0), (2, 1)):
                    real = hints.RealCut(
                        _grating_cut(cd, p, left, right), 300.0, angle, p - cd, 2.0
                    )
                    out.append(_key(("low-nils",), 0.5 * lim, cd, p, angle, scale, real))
                bad = hints.RealCut(MISMATCHED, 300.0, angle, 50.0, 2.0)
                out.append(_key(("low-nils", "low-k1"), 0.5 * lim, cd, p, angle, scale, bad))
                out.append(_key(("low-k1",), 0.5 * lim, cd, p, angle, scale, None))
                out.append(_key(("low-nils",), 0.5 * lim, cd, p, angle, scale, None))
    out.append(_key(("unresolvable-pitch",), 0.5 * lim, 40.0, 60.0, 0.0, scale, None))
    out.append(_key(("low-nils",), 0.5 * lim, math.nan, math.inf, 0.0, scale, None))
    return out


def test_hints_made_together_read_as_hints_made_one_by_one(rule):
    r, scale = rule
    keys = _keys(r, scale)
    _forget()
    together = hint_texts([(r, k) for k in keys])
    _forget()
    alone = [hints.hint_text(r, k) for k in keys]
    _forget()
    assert together == alone
    # Every kind of hint is among them, so the comparison covers each path,
    # and respaced cuts pass at several pitches (several rounds of cuts).
    starts = {t[:40] for t in alone if not t.startswith("at this")}
    assert len(starts) == 6, starts
    assert len({t for t in alone if t.startswith("at this line width, pitch")}) >= 4


def test_gratings_imaged_together_measure_as_one_at_a_time(rule):
    r, _ = rule
    p = 1.2 * r.exposure.lambda_over_na_nm
    cds = [0.25 * p, 0.4 * p, 0.5 * p, 0.65 * p]
    for angle in (0.0, 90.0):
        got = cut_images.grating_metrics_batch(r, p, cds, angle)
        for cd, have in zip(cds, got, strict=True):
            want, _, _ = cut_images.grating_metrics(r, p, cd, angle)
            for f in dataclasses.fields(want):
                a, b = getattr(have, f.name), getattr(want, f.name)
                if isinstance(b, float) and math.isnan(b):
                    assert math.isnan(a), f.name
                else:
                    assert a == pytest.approx(b, rel=1e-9, abs=1e-12), f.name
