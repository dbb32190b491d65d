"""Variants of hostile paths and names: loops of symbolic links, a SARIF base
that is not a folder, sockets, names with line breaks or undecodable bytes,
and very long names in the lines the terminal prints under the table.

The contract (README, docs/limits.md): exit 0/1 with the reports, or exit 2
with one ``pitchguard: error:`` line; never exit 3, a hang, or a name that
breaks the terminal's lines.
"""

from __future__ import annotations

import json
import os
import socket
from pathlib import Path

import gdstk
import pytest

from decks import DRY_ARF_DECK
from pitchguard.cli import main


def _chip(path: Path, cell: str = "A110") -> Path:
    """Nine 55 nm lines at a 110 nm pitch in ``cell`` (below the dry ArF deck's
    115.3 nm cutoff: one fail finding), placed once under TOP."""
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    c = lib.new_cell(cell)
    for k in range(9):
        c.add(gdstk.rectangle((k * 0.11, 0), (k * 0.11 + 0.055, 1.5), layer=7, datatype=0))
    top.add(gdstk.Reference(c))
    lib.write_gds(str(path))
    return path


@pytest.fixture
def files(tmp_path):
    deck = tmp_path / "dry.toml"
    deck.write_text(DRY_ARF_DECK)
    return deck, _chip(tmp_path / "chip.gds")


def _scan(capsys, deck, chip, *more) -> tuple[int, str, str]:
    code = main(["scan", str(chip), "--rules", str(deck), "-q", *map(str, more)])
    out, err = capsys.readouterr()
    return code, out, err


def _one_line(code, err, *words) -> None:
    assert code == 2, (code, err)
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("pitchguard: error: "), err
    for w in words:
        assert w in lines[0], (w, lines[0])


@pytest.mark.parametrize(
    "option",
    ["--json", "--sarif", "--junit", "--html", "--markers", "--write-baseline", "--sarif-root"],
)
@pytest.mark.parametrize("inside", [False, True])
def test_a_loop_of_links_as_an_output_is_one_line(files, tmp_path, capsys, option, inside):
    deck, chip = files
    (tmp_path / "a").symlink_to(tmp_path / "b")
    (tmp_path / "b").symlink_to(tmp_path / "a")
    name = "a"
    if option == "--markers":
        (tmp_path / "a.gds").symlink_to(tmp_path / "b.gds")
        (tmp_path / "b.gds").symlink_to(tmp_path / "a.gds")
        name = "a.gds"
    out = tmp_path / name / "x.gds" if inside else tmp_path / name
    more = [option, out] if option != "--sarif-root" else ["--sarif", tmp_path / "s", option, out]
    code, _, err = _scan(capsys, deck, chip, *more)
    _one_line(code, err)
    assert "loop" in err or "not a folder" in err or "does not exist" in err, err


def test_a_sarif_base_must_be_an_existing_folder(files, tmp_path, capsys):
    deck, chip = files
    sarif = tmp_path / "pg.sarif"
    code, _, err = _scan(capsys, deck, chip, "--sarif", sarif, "--sarif-root", tmp_path / "typo")
    _one_line(code, err, "--sarif-root", "does not exist")
    code, _, err = _scan(capsys, deck, chip, "--sarif", sarif, "--sarif-root", chip)
    _one_line(code, err, "--sarif-root", "is not a folder")
    assert not sarif.exists()  # refused before the scan


@pytest.mark.parametrize("what", ["layout", "deck"])
def test_a_socket_is_named_as_one(files, tmp_path, capsys, what):
    deck, chip = files
    path = tmp_path / ("sock.gds" if what == "layout" else "sock.toml")
    s = socket.socket(socket.AF_UNIX)
    s.bind(str(path))
    try:
        code, _, err = _scan(capsys, *((deck, path) if what == "layout" else (path, chip)))
    finally:
        s.close()
    _one_line(code, err, "is a socket", f"not a {what} file")


def test_a_name_that_is_not_utf8_says_so(files, tmp_path, capsys):
    """One Latin-1 byte (0xB5, 'µ') in a GDSII cell name: the layout library reads
    no such name; the error says what is wrong instead of its TypeError."""
    deck, chip = files
    data = chip.read_bytes().replace(b"A110", b"A\xb5M1")
    bad = tmp_path / "latin1.gds"
    bad.write_bytes(data)
    for extra in ((), ("--untiled",)):
        code, _, err = _scan(capsys, deck, bad, *extra)
        _one_line(code, err, "not UTF-8")
        assert "TypeError" not in err


def test_line_breaks_in_a_name_stay_on_their_line(files, tmp_path, capsys):
    """A cell named with a newline, a carriage return, a tab and U+2028: each row of
    the table is one finding (the breaks are written out as escapes)."""
    deck, _ = files
    name = "two\nlines\r\tand\u2028more"
    chip = _chip(tmp_path / "named.gds", cell=name)
    code = main(["scan", str(chip), "--rules", str(deck)])
    out, _ = capsys.readouterr()
    assert code == 1
    assert "two\\x0alines" in out  # the table may cut the rest of the column
    rows = [ln for ln in out.splitlines() if "two" in ln]
    assert len(rows) == 1, rows
    assert "\u2028" not in out and "\r" not in out and "\t" not in out


def test_long_names_in_stale_entries_are_cut(files, tmp_path, capsys):
    """Stale entries are listed under the table, one line each: a 40,000-character
    cell name is cut (the README: names shown at most 80 characters)."""
    deck, chip = files
    base = tmp_path / "base.json"
    main(["scan", str(chip), "--rules", str(deck), "-q", "--write-baseline", str(base)])
    capsys.readouterr()
    data = json.loads(base.read_text())
    long = "L" * 40_000
    data["entries"] = [dict(e, cell=long + str(k)) for k in range(20) for e in data["entries"]]
    base.write_text(json.dumps(data))
    code = main(["scan", str(chip), "--rules", str(deck), "--baseline", str(base)])
    out, _ = capsys.readouterr()
    assert code == 1  # the entries name another cell: the finding is new
    stale = [ln for ln in out.splitlines() if "stale (fixed since" in ln]
    assert len(stale) == 20
    assert len(out) < 40_000, len(out)  # whole, the names alone would be 800,000 characters
    assert os.path.getsize(base) > 20 * 40_000  # the names themselves were that long
