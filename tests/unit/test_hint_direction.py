"""Hints say which way to resize a feature (judge/hints.py): narrower when it
runs into its neighbour, wider when it does not print.  The rule follows from
the checks' definitions: a bridge is a feature printing too wide for its
space, a lost feature one printing too narrow to cross the threshold."""

from __future__ import annotations

import math

import pytest

from decks import DEMO_DECK
from pitchguard.deck import load_deck
from pitchguard.judge.hints import hint_text, width_advice


@pytest.mark.parametrize(
    ("checks", "word"),
    [
        (("features-bridged", "low-k1"), "narrow the line"),
        (("feature-not-printed",), "widen the line"),
        (("low-nils",), "resize the line"),
    ],
)
def test_the_advice_follows_the_failure(checks, word):
    assert width_advice(checks, "line").startswith(word)


def test_a_hint_of_a_bridged_feature_never_says_widen_it():
    rule = next(r for r in load_deck(DEMO_DECK).layers if r.name == "metal1")
    # A feature with no regular neighbour (no finite pitch): the hint's own branch.
    key = (("features-bridged",), 73.3, math.inf, math.inf, 0.0, 1.0, None)
    text = hint_text(rule, key)
    assert "narrow the opening" in text and "widen the opening" not in text
    key = (("feature-not-printed",), 73.3, math.inf, math.inf, 0.0, 1.0, None)
    assert hint_text(rule, key).startswith("widen the opening")
