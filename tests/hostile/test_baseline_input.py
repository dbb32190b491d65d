"""Hostile baselines, expiry dates, and the exit code of ``--write-baseline``.

A baseline is edited by people and may come from anywhere: a value of the
wrong type, not finite, out of range or nested without end, a file that is
not a regular file or is too large, each ends in exit 2 with one line naming
the file (and the entry and key), never exit 3, a hang or unbounded memory.

Reference: the README's error contract and docs/gating.md (the baseline format,
`expires` as an ISO 8601 date); RFC 8259 (JSON has no NaN or infinities).
"""

from __future__ import annotations

import datetime as dt
import json
import os
from pathlib import Path

import gdstk
import pytest

from decks import DRY_ARF_DECK
from hostile.limited import command
from pitchguard.cli import main
from pitchguard.outputs.baseline import apply_baseline, load_baseline


def _chip(path: Path, extra: bool = False) -> Path:
    """A cell A110 of nine 55 nm lines at a 110 nm pitch (below the deck's 115.3 nm
    cutoff: one fail finding), placed once; ``extra``: a cell B110 drawn alike."""
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for name, x in (("A110", 0.0), ("B110", 10.0))[: 2 if extra else 1]:
        cell = lib.new_cell(name)
        for k in range(9):
            cell.add(gdstk.rectangle((k * 0.11, 0), (k * 0.11 + 0.055, 1.5), layer=7, datatype=0))
        top.add(gdstk.Reference(cell, (x, 0)))
    lib.write_gds(str(path))
    return path


@pytest.fixture
def setup(tmp_path, capsys):
    deck = tmp_path / "dry.toml"
    deck.write_text(DRY_ARF_DECK)
    chip = _chip(tmp_path / "chip.gds")
    base = tmp_path / "base.json"
    code = main(["scan", str(chip), "--rules", str(deck), "-q", "--write-baseline", str(base)])
    capsys.readouterr()
    assert base.exists(), code  # the exit code is test_writing_a_baseline_exits_0_once_written's
    return {"deck": deck, "chip": chip, "base": base, "tmp": tmp_path}


def _gate(s, capsys, baseline: Path, *more: str) -> tuple[int, str, str]:
    argv = ["scan", str(s["chip"]), "--rules", str(s["deck"]), "-q", "--baseline", str(baseline)]
    code = main([*argv, *more])
    out, err = capsys.readouterr()
    return code, out, err


def _one_line(code: int, err: str, path: Path, *words: str) -> None:
    assert code == 2, (code, err)
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith(f"pitchguard: error: {path}: "), err
    assert all(w in lines[0] for w in words), err


def test_writing_a_baseline_exits_0_once_written(tmp_path, capsys):
    deck = tmp_path / "dry.toml"
    deck.write_text(DRY_ARF_DECK)
    chip = _chip(tmp_path / "chip.gds")
    base = tmp_path / "base.json"
    argv = ["scan", str(chip), "--rules", str(deck), "-q"]
    assert main(argv) == 1  # a fail finding
    capsys.readouterr()
    assert main([*argv, "--write-baseline", str(base)]) == 0
    out = capsys.readouterr().out
    assert "[baseline written: 1 entry]" in out, out
    assert len(json.loads(base.read_text())["entries"]) == 1
    # A write that cannot happen is still an error, not a pass.
    code = main([*argv, "--write-baseline", str(tmp_path / "missing" / "base.json")])
    assert code == 2


# (what, text edit of the written baseline, words of the one error line)
BAD = [
    ("nan-pitch", ('"pitch_nm": 110.0', '"pitch_nm": NaN'), ["NaN"]),
    (
        "infinite-centre",
        ('"centre_um": [\n        0.4675', '"centre_um": [\n        1e999'),
        ["1e999"],
    ),
    (
        "infinite-cell-centre",
        ('"cell_centre_um": [\n        0.4675', '"cell_centre_um": [\n        1e999'),
        ["1e999"],
    ),
    ("text-pitch", ('"pitch_nm": 110.0', '"pitch_nm": "110"'), ["pitch_nm", "expected a number"]),
    ("negative-pitch", ('"pitch_nm": 110.0', '"pitch_nm": -5'), ["pitch_nm", "outside"]),
    ("bool-lines", ('"lines": 9', '"lines": true'), ["lines", "whole number"]),
    ("huge-lines", ('"lines": 9', '"lines": 1e300'), ["lines", "whole number"]),
    ("huge-angle", ('"orientation_deg": 90.0', '"orientation_deg": 1e308'), ["orientation_deg"]),
    ("list-layer", ('"layer": "poly"', '"layer": ["poly"]'), ["layer", "expected text"]),
    ("odd-path", ('"cell_path": [\n', '"cell_path": [[], {}, \n'), ["cell_path"]),
    ("object-reason", ('"reason": ""', '"reason": {"a": 1}'), ["reason", "expected text"]),
    ("bad-expiry", ('"reason": ""', '"reason": "", "expires": "next year"'), ["expires", "YYYY"]),
    ("no-date", ('"reason": ""', '"reason": "", "expires": "2027-02-30"'), ["calendar date"]),
    (
        "deep",
        ('"owner": ""', '"owner": ' + "[" * 200_000 + "]" * 200_000),
        ["nest deeper than the JSON parser follows"],
    ),
    ("deep-enough", ('"owner": ""', '"owner": ' + "[" * 20 + "]" * 20), ["deeper than 8 levels"]),
]


@pytest.mark.parametrize(("name", "edit", "words"), BAD, ids=[b[0] for b in BAD])
def test_a_bad_baseline_value_is_one_line(setup, capsys, name, edit, words):
    text = setup["base"].read_text()
    old, new = edit
    assert old in text, name
    bad = setup["tmp"] / "bad.json"
    bad.write_text(text.replace(old, new, 1))
    code, _, err = _gate(setup, capsys, bad, "--json", str(setup["tmp"] / "r.json"))
    _one_line(code, err, bad, *words)


def test_a_baseline_of_another_deck_gates_with_a_note(setup, capsys):
    data = json.loads(setup["base"].read_text())
    assert data["deck"] == "dry"
    data["deck"] = "another-process"
    other = setup["tmp"] / "other.json"
    other.write_text(json.dumps(data))
    report = setup["tmp"] / "r.json"
    code, _, err = _gate(setup, capsys, other, "--json", str(report))
    assert code == 0, err  # still gates: a note, not an error
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("pitchguard: note: baseline "), err
    assert "'another-process', not with 'dry'" in lines[0], err
    section = json.loads(report.read_text())["baseline"]
    assert section["deck"] == "another-process" and section["deck_matches"] is False
    code, _, err = _gate(setup, capsys, setup["base"])
    assert code == 0 and err == "", err  # the same deck: no note


def _with_expiry(s, when: str) -> Path:
    data = json.loads(s["base"].read_text())
    for e in data["entries"]:
        e["expires"] = when
    path = s["tmp"] / f"base-{when}.json"
    path.write_text(json.dumps(data))
    return path


def test_an_expired_entry_accepts_nothing_and_is_noted(setup, capsys):
    report = setup["tmp"] / "r.json"
    code, out, err = _gate(setup, capsys, _with_expiry(setup, "2000-01-01"), "--json", str(report))
    assert code == 1, (out, err)  # the fail finding is new again
    assert "1 new, 0 accepted, 0 stale, 1 expired" in out, out
    assert "pitchguard: note: baseline" in err and "1 entry past its expiry date" in err, err
    assert "(expired 2000-01-01)" in err, err
    section = json.loads(report.read_text())["baseline"]
    assert section["expired"] == 1 and section["expired_entries"][0]["expires"] == "2000-01-01"
    code, out, err = _gate(setup, capsys, _with_expiry(setup, "2999-12-31"))
    assert code == 0 and "expired" not in out + err, (out, err)


def test_an_entry_expires_on_its_date():
    entry = {
        "layer": "poly",
        "check": "unresolvable-pitch",
        "pitch_nm": 110.0,
        "width_nm": 55.0,
        "space_nm": 55.0,
        "orientation_deg": 90.0,
        "lines": 9,
        "context": "outer",
        "centre_um": [0.0, 0.0],
        "expires": "2027-03-01",
    }
    before = apply_baseline([], [entry], today=dt.date(2027, 2, 28))
    on = apply_baseline([], [entry], today=dt.date(2027, 3, 1))
    assert (len(before.stale), len(before.expired)) == (1, 0)
    assert (len(on.stale), len(on.expired)) == (0, 1)


def test_rewriting_a_baseline_keeps_expiry_reason_and_owner(setup, capsys):
    data = json.loads(setup["base"].read_text())
    data["entries"][0].update(reason="known", owner="layout team", expires="2999-12-31")
    setup["base"].write_text(json.dumps(data))
    two = _chip(setup["tmp"] / "two.gds", extra=True)
    argv = ["scan", str(two), "--rules", str(setup["deck"]), "-q"]
    code = main([*argv, "--baseline", str(setup["base"]), "--write-baseline", str(setup["base"])])
    capsys.readouterr()
    assert code == 0
    entries = {e["cell"]: e for e in load_baseline(setup["base"])}
    assert set(entries) == {"A110", "B110"}
    kept = entries["A110"]
    assert (kept["reason"], kept["owner"], kept["expires"]) == (
        "known",
        "layout team",
        "2999-12-31",
    )
    assert "expires" not in entries["B110"]  # a new entry gets no date of its own


# --------------------------------------------------------------- files that are not baselines


@pytest.mark.parametrize("kind", ["fifo", "device"])
def test_a_baseline_that_is_not_a_regular_file_is_refused(setup, kind):
    if kind == "fifo":
        path = setup["tmp"] / "base.fifo"
        os.mkfifo(path)
        what = "a named pipe (FIFO)"
    else:
        path, what = Path("/dev/zero"), "a character device"
    code, err = command("scan", str(setup["chip"]), "--rules", str(setup["deck"]), "-q",
                         "--untiled", "--baseline", str(path))  # fmt: skip
    _one_line(code, err, path, f"is {what}, not a baseline file")


def test_a_baseline_larger_than_the_limit_is_refused_unread(setup, capsys):
    big = setup["tmp"] / "big.json"
    with big.open("wb") as fh:  # sparse: the size is refused before anything is read
        fh.truncate((256 << 20) + 1)
    code, _, err = _gate(setup, capsys, big)
    _one_line(code, err, big, "larger than 256 MiB, the most a baseline file may be")
