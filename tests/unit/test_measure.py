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
from pitchguard import measure
from pitchguard.cuts import Cut
from pitchguard.deck import parse_deck

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
    fresh = measure._measure(cuts, angles, r, scale)
    measure.clear_cut_cache()
    first = measure.measure_cuts(cuts, angles, r, scale)
    assert measure.cut_cache_info() == {"hits": 0, "misses": 3, "size": 3}
    # Again, in another order and with one new cut: only the new one is imaged.
    again = measure.measure_cuts([ALONE, DENSE, OUTER, OUTER], [90.0, 0.0, 0.0, 90.0], r, scale)
    assert measure.cut_cache_info() == {"hits": 3, "misses": 4, "size": 4}  # counts add up
    assert all(_same(a, b) for a, b in zip(first, fresh, strict=True))
    assert _same(again[0], fresh[2]) and _same(again[1], fresh[0]) and _same(again[2], fresh[1])
    assert _same(again[3], measure._measure([OUTER], [90.0], r, scale)[0])
    # The three cuts image differently, so a mix-up of keys could not pass unseen.
    assert len({round(m.nils, 6) for m in fresh}) == 3


def test_cache_keys_on_the_layer_limits_and_scale(rule):
    r, scale = rule
    measure.clear_cut_cache()
    measure.measure_cuts([DENSE], [0.0], r, scale)
    measure.measure_cuts([DENSE], [0.0], r, scale * 2.0)  # another mask scale: imaged apart
    assert measure.cut_cache_info()["misses"] == 2


def test_cache_is_emptied_past_its_size(rule, monkeypatch):
    r, scale = rule
    measure.clear_cut_cache()
    monkeypatch.setattr(measure, "CUT_CACHE_MAX", 2)
    measure.measure_cuts([DENSE, OUTER], [0.0, 0.0], r, scale)
    measure.measure_cuts([ALONE], [0.0], r, scale)
    assert measure.cut_cache_info()["size"] == 1
    measure.clear_cut_cache()


def test_cuts_imaged_in_one_process_serve_another(rule):
    """What a tile worker hands on (take_imaged) is read back (give_imaged) as if
    imaged there: no image is made again and the metrics are the same."""
    r, scale = rule
    measure.clear_cut_cache()
    mine = measure.measure_cuts([DENSE, ALONE], [0.0, 0.0], r, scale)
    rows = measure.take_imaged()
    assert [row[0] for row in rows] == [r.name, r.name]
    assert measure.take_imaged() == []  # handed on once
    measure.clear_cut_cache()  # "another process"
    measure.give_imaged(rows, {r.name: r}, scale)
    theirs = measure.measure_cuts([ALONE, DENSE], [0.0, 0.0], r, scale)
    assert measure.cut_cache_info()["misses"] == 0
    assert _same(theirs[0], mine[1]) and _same(theirs[1], mine[0])
    # Rows of a layer this deck does not have, or of another scale, are not used.
    measure.clear_cut_cache()
    measure.give_imaged(rows, {"other": r}, scale)
    measure.give_imaged(rows, {r.name: r}, scale * 4.0)
    measure.measure_cuts([DENSE], [0.0], r, scale)
    assert measure.cut_cache_info()["misses"] == 1
    measure.clear_cut_cache()
