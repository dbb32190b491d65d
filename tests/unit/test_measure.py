"""The image stage's per-process cache of cut metrics (pitchguard.measure).

The cache must not show in the results: a cut's metrics are the same whether
imaged fresh or read back, and cuts that differ in profile, source turn or
layer limits are imaged apart.  The reference here is the uncached
computation itself (the image values are checked against published optics
in test_image.py).
"""

from __future__ import annotations

import dataclasses
import math

import pytest

from decks import DEMO_DECK  # tests/ is on sys.path (conftest)
from pitchguard.deck import parse_deck
from pitchguard.geometry.cuts import Cut
from pitchguard.optics import cut_images as cut_images

# Three cuts (drawn nm, relative to the feature centre): the middle of a dense
# array of 50 nm lines at pitch 100, its last line, and a lone line.
DENSE = Cut((-225.0, -175.0, -125.0, -75.0, -25.0, 25.0, 75.0, 125.0, 175.0, 225.0), 300.0)
OUTER = Cut((-225.0, -175.0, -125.0, -75.0, -25.0, 25.0), 300.0)
ALONE = Cut((-25.0, 25.0), 300.0)


@pytest.fixture()
def rule():
    deck = parse_deck(DEMO_DECK.read_text(), DEMO_DECK)
    return next(r for r in deck.layers if r.image_checks), deck.scale_to_wafer


def _same(a, b) -> bool:
    """Field by field, nan equal to nan."""
    for x, y in zip(dataclasses.astuple(a), dataclasses.astuple(b), strict=True):
        if not (x == y or (isinstance(x, float) and math.isnan(x) and math.isnan(y))):
            return False
    return True


def test_cached_metrics_equal_fresh_ones_and_each_cut_is_imaged_once(rule):
    r, scale = rule
    cuts, angles = [DENSE, OUTER, ALONE], [0.0, 0.0, 90.0]
    fresh = cut_images.measure_one(cuts, angles, r, scale)
    cut_images.clear_cut_cache()
    first = cut_images.measure_cuts(cuts, angles, r, scale)
    assert cut_images.cut_cache_info() == {"hits": 0, "misses": 3, "size": 3}
    # Again, in another order and with one new cut: only the new one is imaged.
    again = cut_images.measure_cuts([ALONE, DENSE, OUTER, OUTER], [90.0, 0.0, 0.0, 90.0], r, scale)
    assert cut_images.cut_cache_info() == {"hits": 3, "misses": 4, "size": 4}  # counts add up
    assert all(_same(a, b) for a, b in zip(first, fresh, strict=True))
    assert _same(again[0], fresh[2]) and _same(again[1], fresh[0]) and _same(again[2], fresh[1])
    assert _same(again[3], cut_images.measure_one([OUTER], [90.0], r, scale)[0])
    # The three cuts image differently, so a mix-up of keys could not pass unseen.
    assert len({round(m.nils, 6) for m in fresh}) == 3


def test_cache_keys_on_the_layer_limits_and_scale(rule):
    r, scale = rule
    cut_images.clear_cut_cache()
    cut_images.measure_cuts([DENSE], [0.0], r, scale)
    cut_images.measure_cuts([DENSE], [0.0], r, scale * 2.0)  # another mask scale: imaged apart
    assert cut_images.cut_cache_info()["misses"] == 2


def test_cache_is_emptied_past_its_size(rule, monkeypatch):
    r, scale = rule
    cut_images.clear_cut_cache()
    monkeypatch.setattr(cut_images, "CUT_CACHE_MAX", 2)
    cut_images.measure_cuts([DENSE, OUTER], [0.0, 0.0], r, scale)
    cut_images.measure_cuts([ALONE], [0.0], r, scale)
    assert cut_images.cut_cache_info()["size"] == 1
    cut_images.clear_cut_cache()


def test_cuts_imaged_in_one_process_serve_another(rule):
    """What a tile worker hands on (take_imaged) is read back (give_imaged) as if
    imaged there: no image is made again and the metrics are the same."""
    r, scale = rule
    cut_images.clear_cut_cache()
    mine = cut_images.measure_cuts([DENSE, ALONE], [0.0, 0.0], r, scale)
    rows = cut_images.take_imaged()
    assert len(rows) == 2
    assert cut_images.take_imaged() == []  # handed on once
    cut_images.clear_cut_cache()  # "another process"
    cut_images.give_imaged(rows)
    theirs = cut_images.measure_cuts([ALONE, DENSE], [0.0, 0.0], r, scale)
    assert cut_images.cut_cache_info()["misses"] == 0
    assert _same(theirs[0], mine[1]) and _same(theirs[1], mine[0])
    cut_images.clear_cut_cache()


def test_cuts_handed_on_serve_only_an_equal_rule(rule):
    """A layer of the same name in another deck (other limits), or another mask
    scale, images its own cuts: rows are keyed by the rule's values, not its name."""
    r, scale = rule
    cut_images.clear_cut_cache()
    cut_images.measure_cuts([DENSE], [0.0], r, scale)
    rows = cut_images.take_imaged()
    line = f'name = "{r.name}"'
    other = parse_deck(DEMO_DECK.read_text().replace(line, line + "\ncd_tolerance_pct = 3.0", 1))
    r2 = next(x for x in other.layers if x.name == r.name)
    assert r2.cd_tolerance_pct != r.cd_tolerance_pct
    cut_images.clear_cut_cache()
    cut_images.give_imaged(rows)
    cut_images.measure_cuts([DENSE], [0.0], r2, scale)
    cut_images.measure_cuts([DENSE], [0.0], r, scale * 4.0)
    assert cut_images.cut_cache_info()["misses"] == 2
    cut_images.measure_cuts([DENSE], [0.0], r, scale)  # the equal rule: served
    assert cut_images.cut_cache_info()["misses"] == 2
    cut_images.clear_cut_cache()


def test_gratings_judged_for_hints_serve_another_process(rule, monkeypatch):
    """The pitch search behind a fix hint, handed on (take/give_grating_passes): an
    equal rule finds the same pitch without judging a grating again; a rule of the
    same name with other limits judges its own."""
    from pitchguard.judge import hints as hints

    r, _ = rule
    hints.forget_grating_passes()
    p = r.exposure.lambda_over_na_nm  # near the limit: candidate pitches get imaged
    want = hints.passing_pitch(r, p / 2, p, 0.0)
    rows = hints.take_grating_passes()
    assert rows
    hints.forget_grating_passes()  # "another process"
    hints.give_grating_passes(rows)

    def judged(*a):
        raise AssertionError("judged again")

    monkeypatch.setattr(hints, "_judge_grating", judged)
    got = hints.passing_pitch(r, p / 2, p, 0.0)
    assert got == want or (math.isnan(got) and math.isnan(want))
    line = f'name = "{r.name}"'
    other = parse_deck(DEMO_DECK.read_text().replace(line, line + "\ncd_tolerance_pct = 3.0", 1))
    r2 = next(x for x in other.layers if x.name == r.name)
    with pytest.raises(AssertionError, match="judged again"):
        hints.passing_pitch(r2, p / 2, p, 0.0)
    hints.forget_grating_passes()
