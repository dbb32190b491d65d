"""Report rows of a tiled scan: the templated fast path against the plain one.

A tiled scan's findings are distinct findings plus offsets; JSON and SARIF
rows are written from one text template per distinct finding with the
place-dependent values filled in (``PlacedRows.texts``).  The plain path
makes every placed finding and dumps its row.  Both must give the same text,
byte for byte, also for names and texts that contain JSON's special
characters.
"""

from __future__ import annotations

import dataclasses
import json

import pytest

from chips import build_bench_chip
from decks import BENCH_DECK
from pitchguard.deck import load_deck
from pitchguard.judge.findings import FindingSet, replaced
from pitchguard.outputs.json_report import finding_rows
from pitchguard.outputs.rows import PlacedRows
from pitchguard.outputs.sarif import to_sarif
from pitchguard.run.tiled import scan_tiled


def _one(v) -> str:  # as the JSON writer dumps a row
    return json.dumps(v, ensure_ascii=True, allow_nan=False)


@pytest.fixture(scope="module")
def tiled(tmp_path_factory):
    """A chip of repeated blocks (tests/chips.py): most findings are placed copies."""
    folder = tmp_path_factory.mktemp("chip")
    chip, deck_path = folder / "chip.oas", folder / "deck.toml"
    build_bench_chip(chip, 1e5)
    deck_path.write_text(BENCH_DECK)
    deck = load_deck(deck_path)
    result = scan_tiled(chip, deck, jobs=1)
    fs = result.findings
    assert isinstance(fs, FindingSet) and (fs.offset != 0).any()  # placed copies exist
    return result, deck


def _awkward(fs: FindingSet) -> FindingSet:
    """The same set with quotes, backslashes, control and non-ASCII characters in
    every text a layout or deck can put into a row."""
    odd = 'a"b\\c\x01\u00b5\u2028'
    distinct = [
        replaced(f, layer=f.layer + odd, exposure=odd, hint=f.hint + odd, message=odd)
        for f in fs.distinct
    ]
    return FindingSet(distinct, fs.which, fs.offset)


@pytest.mark.slow
@pytest.mark.parametrize("awkward", [False, True])
def test_json_rows_from_templates_equal_the_plain_rows(tiled, awkward):
    result, _ = tiled
    fs = _awkward(result.findings) if awkward else result.findings
    rows = finding_rows(fs)
    assert isinstance(rows, PlacedRows)
    fast = list(rows.texts(_one))
    plain = [_one(row) for row in rows]  # each placed finding made and dumped
    assert len(fast) == len(fs) and fast == plain


@pytest.mark.slow
@pytest.mark.parametrize("awkward", [False, True])
def test_sarif_results_from_templates_equal_the_plain_results(tiled, awkward):
    result, deck = tiled
    if awkward:
        result = dataclasses.replace(result, findings=_awkward(result.findings))
    rows = to_sarif(result, deck, result.layout.path, "fail", lazy=True)["runs"][0]["results"]
    assert isinstance(rows, PlacedRows)
    fast = list(rows.texts(_one))
    plain = [_one(row) for row in rows]
    assert len(fast) == len(result.findings) and fast == plain
    # The plain path is the list of placed findings as a FindingSet-free scan would have.
    listed = dataclasses.replace(result, findings=list(result.findings))
    from_list = to_sarif(listed, deck, result.layout.path, "fail")["runs"][0]["results"]
    assert plain == [_one(r) for r in from_list]
