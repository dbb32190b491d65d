"""Streaming writers: the files they write hold exactly what the in-memory
reports hold.

References: the Python standard library's ``json`` module (parsing the
streamed text back) and ``xml.etree.ElementTree`` (the unstreamed JUnit text
it serialises); SARIF files are also checked against the official schema in
test_ci_formats.py.
"""

from __future__ import annotations

import io
import json
import math

import pytest

from decks import DEMO_DECK, SAMPLE_GDS
from pitchguard.deck import load_deck
from pitchguard.outputs.json_report import dump_json, to_json, write_json
from pitchguard.outputs.junit import to_junit, write_junit
from pitchguard.outputs.rows import Rows
from pitchguard.outputs.sarif import to_sarif, write_sarif
from pitchguard.run.scan import scan_layout


@pytest.fixture(scope="module")
def demo():
    deck = load_deck(DEMO_DECK)
    return scan_layout(SAMPLE_GDS, deck), deck


PAYLOADS = [
    {},
    [],
    {"a": [], "b": {}, "c": [1, 2.5, None, True, "x"], "d": [{"k": 1}], "e": [[1], [2, 3]]},
    {"rows": [{"x": 1, "y": [1, 2]}, {"x": 2, "y": []}], "nested": {"deep": [{"z": {"w": 1}}]}},
    {"text": 'µm ✓ "quoted" \\ back\nslash', "one": [[{"a": 1}]], "t": (1, 2)},
    [{"only": {"one": [1]}}],
    "plain",
    3.25,
]


@pytest.mark.parametrize("payload", PAYLOADS)
@pytest.mark.parametrize("ascii_only", [True, False])
def test_streamed_json_parses_to_the_same_value(payload, ascii_only):
    fh = io.StringIO()
    dump_json(payload, fh, ensure_ascii=ascii_only)
    assert json.loads(fh.getvalue()) == json.loads(json.dumps(payload))


def test_streamed_json_refuses_nan_like_the_json_module():
    with pytest.raises(ValueError):
        dump_json({"rows": [{"v": math.nan}, {"v": 1}]}, io.StringIO())


def test_rows_read_like_a_list():
    rows = Rows([1, 2, 3], lambda x: {"v": 10 * x})
    assert len(rows) == 3 and rows[1] == {"v": 20} and rows[-1] == {"v": 30}
    assert rows[:2] == [{"v": 10}, {"v": 20}] and list(rows) == [{"v": 10}, {"v": 20}, {"v": 30}]


def test_json_report_file_equals_the_report(demo, tmp_path):
    result, deck = demo
    out = tmp_path / "r.json"
    write_json(out, to_json(result, deck, "fail", lazy=True), [])
    assert json.loads(out.read_text()) == json.loads(json.dumps(to_json(result, deck, "fail")))
    # One finding per line: a diff of two reports shows whole findings.
    lines = [ln for ln in out.read_text().splitlines() if ln.lstrip().startswith('{"layer"')]
    assert len(lines) == len(result.findings) > 1


def test_sarif_file_equals_the_log(demo, tmp_path):
    result, deck = demo
    out = tmp_path / "r.sarif"
    write_sarif(out, result, deck, SAMPLE_GDS, "fail")
    eager = to_sarif(result, deck, SAMPLE_GDS, "fail")
    assert json.loads(out.read_text(encoding="utf-8")) == json.loads(json.dumps(eager))


@pytest.mark.parametrize("fail_on", ["fail", "risk", "marginal", "never"])
def test_streamed_junit_is_the_same_text(demo, tmp_path, fail_on):
    result, deck = demo
    out = tmp_path / "r.xml"
    write_junit(out, result, deck, fail_on)
    assert out.read_text(encoding="utf-8") == to_junit(result, deck, fail_on)
