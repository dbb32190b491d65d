"""The default pitches of `pitchguard sweep` are round: a step of 1, 2, 2.5 or 5
times a power of ten, at multiples of it, covering from just below the
cutoff to 4 lambda/NA (judge/gratings.py)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from decks import DEMO_DECK
from pitchguard.deck import load_deck
from pitchguard.judge.gratings import default_pitches, round_step


@pytest.mark.parametrize(
    ("raw", "step"), [(7.15, 5.0), (10.4, 10.0), (2.3, 2.0), (0.27, 0.25), (1.0, 1.0)]
)
def test_round_steps(raw, step):
    assert round_step(raw) == pytest.approx(step)


@pytest.mark.parametrize("layer", ["active", "poly", "metal1", "via1"])
def test_default_pitches_are_round_and_cover_the_range(layer):
    rule = next(r for r in load_deck(DEMO_DECK).layers if r.name == layer)
    cd = 0.5 * rule.exposure.cutoff_pitch_nm
    p = default_pitches(rule, cd)
    lam_na = rule.exposure.lambda_over_na_nm
    step = float(p[1] - p[0])
    assert np.allclose(np.diff(p), step)
    assert np.allclose(p / step, np.round(p / step))  # multiples of the step
    mantissa = step / 10.0 ** math.floor(math.log10(step))
    assert min(abs(mantissa - m) for m in (1.0, 2.0, 2.5, 5.0)) < 1e-9
    assert lam_na / 20.0 / 2.5 < step <= lam_na / 20.0
    assert p[0] <= max(1.2 * cd, 0.9 * rule.exposure.cutoff_pitch_nm)
    assert p[-1] >= 4.0 * lam_na
