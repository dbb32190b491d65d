"""User text reaches the terminal as text (issue of hostile input: rich markup and
terminal escape sequences in deck, exposure, cell and path names).

References: ECMA-48 (control functions: C0 0x00-0x1f, DEL, C1 0x80-0x9f) and
Unicode's bidirectional formatting characters (U+202A-U+202E, U+2066-U+2069,
U+200E/F), which can reorder or recolour what a terminal shows.
"""

from __future__ import annotations

import gdstk

from decks import DEMO_DECK
from pitchguard.cli import main
from pitchguard.outputs.texts import markup_safe, printable

EVIL = "[/]evil\x1b[31m\u202e"


def test_control_characters_are_written_out_and_markup_escaped():
    assert printable(EVIL) == "[/]evil\\x1b[31m\\u202e"
    assert markup_safe("[/]x") == "\\[/]x"
    assert printable("plain name_1.2/3 µm") == "plain name_1.2/3 µm"


def _deck(tmp_path):
    text = DEMO_DECK.read_text().replace('name = "wren3-front-end"', 'name = "[/]e\\u001b[31m"')
    text = text.replace("[exposures.arf_imm_dipole_x]", '[exposures."[/]x\\u001b[2J"]')
    text = text.replace('exposure = "arf_imm_dipole_x"', 'exposure = "[/]x\\u001b[2J"')
    path = tmp_path / "evil.toml"
    path.write_text(text)
    return path


def test_rules_check_and_probe_show_hostile_names_as_text(tmp_path, capsys):
    deck = _deck(tmp_path)
    assert main(["rules", "check", str(deck)]) == 0
    out = capsys.readouterr().out
    assert "\x1b" not in out and "[/]e\\x1b[31m" in out
    assert main(["probe", "-r", str(deck), "--layer", "metal1", "--pitch", "80", "--cd", "40"]) in (
        0,
        1,
    )
    out = capsys.readouterr().out
    assert "\x1b" not in out and "[/]x\\x1b[2J" in out


def test_a_scan_table_shows_hostile_cell_names_as_text(tmp_path, capsys):
    lib = gdstk.Library()
    cell = lib.new_cell(EVIL)
    for k in range(12):
        cell.add(gdstk.rectangle((k * 0.07, 0), (k * 0.07 + 0.035, 1.5), layer=17))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(cell, (0, 0)))
    layout = tmp_path / "evil.gds"
    lib.write_gds(str(layout))
    head, *layers = DEMO_DECK.read_text().split("[[layers]]")
    deck = tmp_path / "m1.toml"
    deck.write_text(head + "[[layers]]" + next(b for b in layers if 'name = "metal1"' in b))
    assert main(["scan", str(layout), "--rules", str(deck)]) == 1
    out = capsys.readouterr().out
    assert "\x1b" not in out and "\u202e" not in out and "\\x1b" in out
