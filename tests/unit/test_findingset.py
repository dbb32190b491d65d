"""FindingSet: findings stored as distinct findings plus offsets read exactly
like the list of findings made at each place.

The reference is the plain list: each item is compared with the finding
built by ``dataclasses.replace`` at that place, and sorting, counting and the
exit code with their results on that list.
"""

from __future__ import annotations

import dataclasses
import math
import random

import numpy as np
import pytest

from decks import DEMO_DECK, SAMPLE_GDS
from pitchguard.deck import SEVERITIES, load_deck
from pitchguard.judge.findings import FIELDS, FindingSet, replaced
from pitchguard.judge.findings import placed as placed_copy
from pitchguard.judge.order import sort_findings, sort_findings_plain
from pitchguard.outputs.verdict import exit_code, severity_counts
from pitchguard.run.scan import scan_layout


@pytest.fixture(scope="module")
def demo():
    return list(scan_layout(SAMPLE_GDS, load_deck(DEMO_DECK)).findings)


def _placed(f, dx, dy):
    x0, y0, x1, y1 = f.bbox_nm
    return dataclasses.replace(
        f,
        bbox_nm=(x0 + dx, y0 + dy, x1 + dx, y1 + dy),
        outline_nm=tuple((x + dx, y + dy) for x, y in f.outline_nm),
        cut_origin_nm=(f.cut_origin_nm[0] + dx, f.cut_origin_nm[1] + dy),
    )


@pytest.fixture(scope="module")
def placed(demo):
    rng = random.Random(5)
    n = 400
    which = np.array([rng.randrange(len(demo)) for _ in range(n)])
    # Tile-like offsets (whole nm) and arbitrary ones, plus some at the original place.
    off = np.array(
        [
            (rng.choice([0, 30000, -60000]), rng.choice([0, 45000]))
            if k % 2
            else (rng.uniform(-1e6, 1e6), rng.uniform(-1e6, 1e6))
            for k in range(n)
        ]
    )
    expected = [_placed(demo[w], dx, dy) for w, (dx, dy) in zip(which, off.tolist(), strict=True)]
    return FindingSet(demo, which, off), expected


def test_items_equal_the_findings_made_at_each_place(placed):
    fs, expected = placed
    assert len(fs) == len(expected)
    assert list(fs) == expected
    assert fs[7] == expected[7] and fs[-1] == expected[-1]
    assert fs == expected and expected == fs  # both ways, as lists compare
    assert fs != expected[:-1]
    # A slice is a FindingSet of those items.
    assert isinstance(fs[10:20], FindingSet) and list(fs[10:20]) == expected[10:20]


def test_fast_copies_equal_dataclasses_replace(demo):
    """``replaced`` and ``placed`` (positional copies) against the library's
    ``dataclasses.replace`` on every field, one at a time and all at once."""
    rng = random.Random(11)
    for f in demo:
        for name in FIELDS:
            value = getattr(demo[rng.randrange(len(demo))], name)
            assert replaced(f, **{name: value}) == dataclasses.replace(f, **{name: value})
        other = demo[rng.randrange(len(demo))]
        every = {name: getattr(other, name) for name in FIELDS}
        assert replaced(f, **every) == dataclasses.replace(f, **every) == other
        dx, dy = rng.uniform(-1e5, 1e5), rng.uniform(-1e5, 1e5)
        assert placed_copy(f, dx, dy) == _placed(f, dx, dy)
        assert placed_copy(f, dx, dy) != f


def test_an_item_at_its_own_place_is_the_distinct_finding_itself(demo):
    fs = FindingSet.of(demo)
    assert all(a is b for a, b in zip(fs, demo, strict=True))


def test_sorting_without_making_items_equals_sorting_the_list(placed):
    fs, expected = placed
    got = sort_findings(fs)
    assert isinstance(got, FindingSet)
    assert list(got) == sort_findings(expected)


def test_box_pairs_hold_the_boxes_bit_for_bit(placed):
    fs, expected = placed
    pairs = fs.box_pairs()
    box = np.array([f.bbox_nm for f in expected])
    assert np.array_equal(pairs[0].real, box[:, 0]) and np.array_equal(pairs[0].imag, box[:, 1])
    assert np.array_equal(pairs[1].real, box[:, 2]) and np.array_equal(pairs[1].imag, box[:, 3])
    assert np.array_equal(fs.boxes(), box)


def test_sorted_order_equals_python_sorted_on_the_documented_key(placed):
    """Reference: Python's stable ``sorted`` on (severity rank, k1, layer, box), the
    order sort_findings documents.  Duplicated places make exact ties (stable
    order kept) and a box with -0.0 must rank as 0.0, as Python compares them."""
    fs, expected = placed
    rank = {s: k for k, s in enumerate(SEVERITIES)}
    items = expected + expected[:50]  # exact ties
    items += [
        dataclasses.replace(
            f, bbox_nm=tuple(-0.0 if v == 0 else v for v in (0.0, f.bbox_nm[1], 0.0, f.bbox_nm[3]))
        )
        for f in expected[:20]
    ]
    items += [dataclasses.replace(f, bbox_nm=(0.0, *f.bbox_nm[1:])) for f in expected[:20]]
    # Boxes tied on the leading coordinates, whose later ones disagree in order.
    for f in expected[:10]:
        items += [
            dataclasses.replace(f, bbox_nm=b)
            for b in (
                (5.0, 0.0, 10.0, 30.0),
                (5.0, 5.0, 10.0, 20.0),
                (5.0, 5.0, 9.0, 40.0),
                (5.0, 5.0, 9.0, 35.0),
                (4.0, 9.0, 1.0, 1.0),
            )
        ]
    # Line ends have no k1 (NaN): after every k1 of their severity.
    items += [dataclasses.replace(f, k1=math.nan) for f in expected[:15:3]]

    def k1(f):
        return f.k1 if f.k1 == f.k1 else math.inf

    want = sorted(items, key=lambda f: (rank[f.severity], k1(f), f.layer, f.bbox_nm))
    got = sort_findings(items)
    assert [id(f) for f in got] == [id(f) for f in want]
    assert [id(f) for f in sort_findings_plain(items)] == [id(f) for f in want]
    # A FindingSet is sorted on its columns: the same order as the plain sort.
    got_set = sort_findings(fs)
    assert list(got_set) == sort_findings_plain(list(fs))


def test_counts_and_exit_code_from_columns_equal_those_of_the_list(placed):
    fs, expected = placed
    sub = fs.select(np.arange(0, len(fs), 3))  # a subset: some distinct findings absent
    for s, lst in ((fs, expected), (sub, list(sub)), (fs[:0], [])):
        assert severity_counts(s) == severity_counts(lst)
        for layer in {f.layer for f in expected} | {"no-such-layer"}:
            assert severity_counts(s, layer) == severity_counts(
                [f for f in lst if f.layer == layer]
            )
        for fail_on in (*SEVERITIES, "never"):
            assert exit_code(s, fail_on) == exit_code(lst, fail_on)
    assert sum(severity_counts(fs).values()) == len(fs)


def test_html_groups_of_a_set_equal_those_of_the_list(placed):
    """Reference: grouping the plain list one finding at a time."""
    from pitchguard.outputs.html.groups import group_findings

    fs, expected = placed
    fs = sort_findings(fs)
    lst = list(fs)
    got, want = group_findings(fs), group_findings(lst)
    assert [g.key for g in got] == [g.key for g in want]
    assert [list(g.findings) for g in got] == [g.findings for g in want]
    assert len(got) > 1 and any(len(g.findings) > 1 for g in got)


def test_reports_of_a_tiled_scan_equal_those_of_its_findings_as_a_list():
    """A tiled scan returns a FindingSet; every CI report written from it must equal
    the report of the same findings as a plain list (the in-memory writers)."""
    import dataclasses as dc

    from pitchguard.outputs.json_report import to_json
    from pitchguard.outputs.junit import to_junit
    from pitchguard.outputs.sarif import to_sarif
    from pitchguard.run.tiled import scan_tiled

    deck = load_deck(DEMO_DECK)
    tiled = scan_tiled(SAMPLE_GDS, deck, tile_um=10, jobs=2)
    assert isinstance(tiled.findings, FindingSet) and len(tiled.findings) > 5
    plain = dc.replace(tiled, findings=list(tiled.findings))
    for fail_on in ("fail", "risk", "never"):
        assert to_junit(tiled, deck, fail_on) == to_junit(plain, deck, fail_on)
        assert to_json(tiled, deck, fail_on) == to_json(plain, deck, fail_on)
        assert to_sarif(tiled, deck, SAMPLE_GDS, fail_on) == to_sarif(
            plain, deck, SAMPLE_GDS, fail_on
        )


def test_sarif_fingerprints_number_equal_findings_by_place(placed):
    """Reference: the documented rule, written plainly: equal base hashes numbered
    1, 2, ... in order of (lower-left corner x, y, upper-right x, y, severity),
    ties in the findings' order."""
    from collections import defaultdict

    from pitchguard.judge.per_cell import each_alone
    from pitchguard.outputs.sarif import entry_fingerprints, fingerprint_base

    def fingerprints(findings):
        return entry_fingerprints(each_alone(findings))

    fs, expected = placed
    groups = defaultdict(list)
    for i, f in enumerate(expected):
        groups[fingerprint_base(f)].append(i)
    want = [""] * len(expected)
    for b, idx in groups.items():
        idx.sort(key=lambda i: (expected[i].bbox_nm, expected[i].severity_rank))
        for n, i in enumerate(idx, 1):
            want[i] = f"{b}:{n}"
    assert fingerprints(fs) == want == fingerprints(expected)
    assert max(int(w.rsplit(":", 1)[1]) for w in want) > 1  # equal findings do occur
