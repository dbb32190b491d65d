"""The JSON report's text table: messages and hints written once, rows refer to them.

The reference is the same scan written with ``--json-inline-texts`` (every text
in its row): resolved through ``texts``, each row must read the same.
"""

from __future__ import annotations

import json

from decks import DEMO_DECK, SAMPLE_GDS

from .conftest import run_cli


def _resolved(row: dict, texts: list[str]) -> dict:
    out = dict(row, message=texts[row["message"]], hint=texts[row["hint"]])
    out["checks"] = [dict(c, message=texts[c["message"]]) for c in row["checks"]]
    return out


def test_rows_refer_to_each_text_once_and_read_as_inline_rows(capsys, tmp_path):
    ref, inline = tmp_path / "ref.json", tmp_path / "inline.json"
    for out, extra in ((ref, ()), (inline, ("--json-inline-texts",))):
        code, _, _ = run_cli(
            capsys, "scan", SAMPLE_GDS, "-r", DEMO_DECK, "-q", "--json", out, *extra
        )
        assert code == 1  # the demo chip has fail findings
    a, b = json.loads(ref.read_text()), json.loads(inline.read_text())
    assert "texts" not in b and len(a["findings"]) == len(b["findings"]) > 10
    texts = a["texts"]
    assert len(texts) == len(set(texts))  # each text once
    assert all(isinstance(r["message"], int) and isinstance(r["hint"], int) for r in a["findings"])
    assert [_resolved(r, texts) for r in a["findings"]] == b["findings"]
    # Texts recur across findings, so the table is shorter than the rows' texts.
    used = sum(2 + len(r["checks"]) for r in a["findings"])
    assert len(texts) < used
    assert ref.stat().st_size < inline.stat().st_size
