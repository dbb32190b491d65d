"""Names from a user's files in every report: kept whole where they are data,
shown short and as text where a person reads them.

A cell, exposure or deck may be named with anything: control characters
(which the JSON writer spells ``\\u0001``), XML and HTML specials, rich markup,
matplotlib's ``$...$`` mathematical text, or a million characters.  The JSON
and SARIF data (after JSON decoding) give names back byte for byte; JUnit
writes the characters XML 1.0 cannot hold as ``\\xNN``; the HTML page, the
pictures and the terminal show at most ``SHOWN_CHARS`` characters of a name.

References: XML 1.0 section 2.2 (the characters a document may hold), the
SARIF 2.1.0 ``logicalLocation`` object (``name``, ``fullyQualifiedName``),
and matplotlib's text documentation (an even number of unescaped ``$`` starts
mathematical text).
"""

from __future__ import annotations

import dataclasses
import io
import json
import re
import time
import xml.etree.ElementTree as ET

import gdstk
import pytest

from pitchguard.cli import main

# Dry ArF, conventional sigma 0.8, binary mask: the cutoff pitch is
# 193 / (0.93 * 1.8) = 115.3 nm (lambda / (NA (1 + sigma)), arithmetic), so
# 35/35 nm lines (pitch 70 nm) fail as unresolvable.  Demo data.
DECK = """
[deck]
name = {deck}

[exposures.{exposure}]
wavelength_nm = 193.0
na = 0.93
illumination = {{ shape = "conventional", sigma = 0.8 }}
mask = {{ kind = "binary" }}

[[layers]]
name = "metal1"
source = "17/0"
exposure = {exposure}
field = "clear"
"""


def _toml(text: str) -> str:
    """A TOML basic string (JSON's escapes are TOML's: ``\\uXXXX``, ``\\"``, ``\\\\``)."""
    return json.dumps(text, ensure_ascii=False)


def _deck(tmp_path, exposure: str = "arf", name: str = "names") -> str:
    path = tmp_path / "deck.toml"
    path.write_text(DECK.format(deck=_toml(name), exposure=_toml(exposure)), encoding="utf-8")
    return str(path)


def _layout(path, top: str = "TOP", cell: str = "LINES", placements: int = 3) -> str:
    """12 lines 35 nm wide at pitch 70 nm on 17/0 in ``cell``, placed in ``top``."""
    lib = gdstk.Library()
    lines = lib.new_cell(cell)
    for k in range(12):
        lines.add(gdstk.rectangle((k * 0.07, 0), (k * 0.07 + 0.035, 1.5), layer=17))
    top_cell = lib.new_cell(top)
    for i in range(placements):
        top_cell.add(gdstk.Reference(lines, (i * 5.0, 0)))
    lib.write_gds(str(path))
    return str(path)


def _clean(code: int, err: str, expected=(0, 1)) -> None:
    assert code in expected, (code, err)
    assert "Traceback" not in err and "internal error" not in err, err


_XML_BAD = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")


def _xml_shown(text: str) -> str:
    """What JUnit holds for ``text``: characters XML cannot hold as ``\\xNN``."""
    return _XML_BAD.sub(lambda m: f"\\x{ord(m.group()):02x}", text)


TOP_NAMES = [
    pytest.param("\x02nope\x02", False, id="stx-nope"),
    pytest.param("\x01bbox_um\x01", False, id="soh-bbox"),
    pytest.param("\x02where\x02", True, id="stx-where-tiled", marks=pytest.mark.slow),
    pytest.param("<a&b \"c\" 'd'>]]>", False, id="xml-specials"),
]


@pytest.mark.parametrize(("top", "tiled"), TOP_NAMES)
def test_a_top_cell_name_comes_back_whole_in_json_sarif_and_junit(tmp_path, capsys, top, tiled):
    layout = _layout(tmp_path / "lines.gds", top=top)
    out = {k: tmp_path / f"out.{k}" for k in ("json", "sarif", "xml")}
    extra = ["--tile-um", "10", "--jobs", "1"] if tiled else []
    code = main(
        ["scan", layout, "--rules", _deck(tmp_path), "-q", "--json", str(out["json"])]
        + ["--sarif", str(out["sarif"]), "--junit", str(out["xml"]), *extra]
    )
    _clean(code, capsys.readouterr().err, expected=(1,))

    report = json.loads(out["json"].read_text(encoding="utf-8"))
    assert report["layout"]["cells"] == [top]
    assert report["findings"]
    for row in report["findings"]:
        assert row["cell"] == "LINES" and row["cell_path"] == [top, "LINES"]
        assert row["placements"] == 3

    sarif = json.loads(out["sarif"].read_text(encoding="utf-8"))
    results = sarif["runs"][0]["results"]
    assert results
    for r in results:
        logical = r["locations"][0]["logicalLocations"]
        assert all(isinstance(loc["name"], str) for loc in logical), logical
        module = [loc for loc in logical if loc["kind"] == "module"]
        assert module and module[0]["name"] == "LINES", logical
        assert module[0]["fullyQualifiedName"] == f"{top}/LINES", logical
        assert f"(placed {top} > LINES)" in r["message"]["text"]

    suites = ET.parse(out["xml"]).getroot()
    failures = suites.findall(".//failure")
    assert failures
    for fail in failures:
        assert f"(placed {_xml_shown(top)} > LINES)" in fail.text


def test_an_exposure_name_comes_back_whole_in_json_sarif_and_junit(tmp_path, capsys):
    name = "\x02nope\x02"
    out = {k: tmp_path / f"out.{k}" for k in ("json", "sarif", "xml")}
    code = main(
        ["scan", _layout(tmp_path / "lines.gds"), "--rules", _deck(tmp_path, exposure=name)]
        + ["-q", "--json", str(out["json"]), "--sarif", str(out["sarif"])]
        + ["--junit", str(out["xml"])]
    )
    _clean(code, capsys.readouterr().err, expected=(1,))
    report = json.loads(out["json"].read_text(encoding="utf-8"))
    assert report["findings"] and all(row["exposure"] == name for row in report["findings"])
    results = json.loads(out["sarif"].read_text(encoding="utf-8"))["runs"][0]["results"]
    assert results and all(r["properties"]["exposure"] == name for r in results)
    props = ET.parse(out["xml"]).getroot().findall(".//property[@name='exposure']")
    assert props and all(p.get("value") == _xml_shown(name) for p in props)


def _html_run(tmp_path, capsys, exposure: str, tag: str) -> tuple[float, str]:
    folder = tmp_path / tag
    folder.mkdir()
    html = folder / "report.html"
    deck = _deck(folder, exposure=exposure)
    t0 = time.perf_counter()
    code = main(["scan", _layout(folder / "lines.gds"), "--rules", deck, "-q", "--html", str(html)])
    seconds = time.perf_counter() - t0
    _clean(code, capsys.readouterr().err, expected=(1,))
    return seconds, html.read_text(encoding="utf-8")


@pytest.mark.slow
def test_a_very_long_exposure_name_does_not_slow_or_swell_the_html(tmp_path, capsys):
    """The page and its pictures show a name's start; the time and the size of the
    report do not grow with the name (compared with a short name's, same run)."""
    long_name = "E" * 200_000
    _html_run(tmp_path, capsys, "arf", "warm")  # imports and caches, not timed
    t_short, short_page = _html_run(tmp_path, capsys, "arf", "short")
    t_long, long_page = _html_run(tmp_path, capsys, long_name, "long")
    assert t_long < 3 * t_short + 1.0, (t_long, t_short)
    assert len(long_page) < len(short_page) + 5_000, (len(long_page), len(short_page))
    assert "E" * 79 + "…" in long_page and "E" * 81 not in long_page


def test_very_long_names_in_the_terminal_are_cut_with_an_ellipsis(tmp_path, capsys):
    deck = _deck(tmp_path, exposure="X" * 50_000, name="D" * 50_000)
    assert main(["rules", "check", deck]) == 0
    out = capsys.readouterr().out
    assert len(out) < 10_000 and "X" * 81 not in out and "D" * 81 not in out
    assert "D" * 79 + "…" in out
    layout = _layout(tmp_path / "long.gds", top="T" * 5_000, cell="C" * 5_000)
    json_out = tmp_path / "out.json"
    code = main(["scan", layout, "--rules", deck, "--json", str(json_out)])
    captured = capsys.readouterr()
    _clean(code, captured.err, expected=(1,))
    shown = sum(len(run) for run in re.findall("C{3,}", captured.out))  # wrapped in a column
    assert 0 < shown <= 80 and "…" in captured.out, shown
    rows = json.loads(json_out.read_text(encoding="utf-8"))["findings"]
    assert rows and rows[0]["cell"] == "C" * 5_000 and rows[0]["exposure"] == "X" * 50_000


MATH = "$\\frac{$"
"""An exposure name that matplotlib would take for (broken) mathematical text."""


def test_mathematical_text_in_a_name_is_drawn_as_text(tmp_path, capsys):
    layout = _layout(tmp_path / "lines.gds")
    deck = _deck(tmp_path, exposure=MATH)
    html = tmp_path / "report.html"
    code = main(["scan", layout, "--rules", deck, "-q", "--html", str(html)])
    _clean(code, capsys.readouterr().err, expected=(1,))
    assert html.stat().st_size > 0
    for command in (
        ["sweep", "-r", deck, "--layer", "metal1", "--cd", "60", "--plot", str(tmp_path / "s.png")],
        ["probe", "-r", deck, "--layer", "metal1", "--pitch", "120", "--cd", "60"]
        + ["--plot", str(tmp_path / "p.svg")],
    ):
        code = main(command)
        _clean(code, capsys.readouterr().err)
    assert (tmp_path / "s.png").stat().st_size > 0 and (tmp_path / "p.svg").stat().st_size > 0


EVIL = "[/]m\x1b[31m\u202e"


def test_the_scan_table_shows_hostile_layer_names_and_warnings_as_text(tmp_path):
    """Layer names and the layout library's warnings in the terminal table (a deck
    checks layer names today; the table does not rely on it)."""
    from rich.console import Console

    from pitchguard.deck import load_deck
    from pitchguard.outputs.table import print_table
    from pitchguard.run.scan import scan_layout

    result = scan_layout(_layout(tmp_path / "lines.gds"), load_deck(_deck(tmp_path)), cells=True)
    layers = [dataclasses.replace(st, name=EVIL + st.name) for st in result.layers]
    result = dataclasses.replace(result, layers=layers, warnings=[EVIL + " warning"])
    buf = io.StringIO()
    print_table(Console(file=buf, width=200), result, "fail")
    text = buf.getvalue()
    assert "\x1b" not in text and "\u202e" not in text
    assert "[/]m\\x1b[31m\\u202emetal1" in text and "[/]m\\x1b[31m\\u202e warning" in text


def test_notes_and_errors_on_stderr_are_one_line_of_text(capsys):
    from pitchguard.cli.console import make_console, show_note, tell

    show_note(make_console(stderr=True), f"{EVIL}\nsecond line")
    tell(f"pitchguard: error: {EVIL}\nsecond line")
    err = capsys.readouterr().err
    lines = err.splitlines()
    assert len(lines) == 2 and "\x1b" not in err and "\u202e" not in err
    assert lines[0].endswith("[/]m\\x1b[31m\\u202e\\x0asecond line")
    tell("x" * 100_000)
    assert len(capsys.readouterr().err) < 3_000
