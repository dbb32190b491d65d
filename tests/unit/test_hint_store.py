"""The bounded stores behind the fix hints (judge/hint_store.py)."""

from __future__ import annotations

from pitchguard.judge import hint_store


def test_store_is_emptied_when_full_and_keeps_the_new_entry():
    s = hint_store.Store(limit=3)
    for k in range(3):
        s.put(k, k * 10)
    assert len(s) == 3 and s.get(2) == 20
    assert s.put("new", True) is True
    assert len(s) == 1 and "new" in s and s.get(0) is None


def test_grid_store_hands_on_only_its_own_verdicts_once():
    mine, theirs = hint_store.GridStore(), hint_store.GridStore()
    key = (("rule",), 10, 20, 0, 2.5)
    mine.put(key, True)
    rows = mine.take()
    assert [r.key for r in rows] == [key] and rows[0].passes is True
    assert mine.take() == []  # taken once
    theirs.give(rows)
    assert theirs.get(key) is True
    assert theirs.take() == []  # given verdicts are not handed on again
