"""How the command line reads what is typed: every usage error is one line on
stderr (the README's contract for exit 2) pointing at the command's help, and
a number starting with '-' is read as the value of the option before it.

Reference: the README's error contract (exit 2, one ``pitchguard: error:``
line); argparse's own reading of ``--option=VALUE``, which takes any value.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from pitchguard.cli import main
from pitchguard.cli.parser import build_parser

SCAN = ["scan", "x.gds", "--rules", "x.toml"]
DIFF = ["diff", "a.gds", "b.gds", "--rules", "x.toml"]
PROBE = ["probe", "--rules", "x.toml", "--layer", "m1", "--pitch", "200", "--cd", "100"]
SWEEP = ["sweep", "--rules", "x.toml", "--layer", "m1"]
COMMANDS = {"scan": SCAN, "diff": DIFF, "probe": PROBE, "sweep": SWEEP}


def _run(capsys, argv: list[str]) -> tuple[int, str, str]:
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse leaves by SystemExit
        code = exc.code
    out, err = capsys.readouterr()
    return code, out, err


def _one_line(code: int, out: str, err: str, help_of: str) -> str:
    assert code == 2, (code, err)
    assert out == "", out
    lines = err.splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("pitchguard: error: "), err
    assert lines[0].endswith(f" (see: {help_of} --help)"), err
    return lines[0]


@pytest.mark.parametrize(
    ("argv", "help_of", "says"),
    [
        ([], "pitchguard", "COMMAND"),
        (["no-such-command"], "pitchguard", "invalid choice"),
        (["--no-such-option"], "pitchguard", "COMMAND"),
        (["rules"], "pitchguard rules", "ACTION"),
        (["rules", "check"], "pitchguard rules check", "deck"),
        ([*SCAN, "--no-such-option"], "pitchguard scan", "--no-such-option"),
        ([*SCAN, "surplus.gds"], "pitchguard scan", "surplus.gds"),
        (["scan", "x.gds", "--rules"], "pitchguard scan", "expected one argument"),
        ([*SCAN, "--fail-on", "sometimes"], "pitchguard scan", "invalid choice"),
        ([*SCAN, "--jobs=0"], "pitchguard scan", "at least 1"),
        ([*DIFF, "--top", "x"], "pitchguard diff", "--top"),
        (["probe", "--rules", "x.toml", "--pitch", "200"], "pitchguard probe", "--layer"),
        ([*PROBE, "--plot"], "pitchguard probe", "--plot"),
        ([*SWEEP, "--pitches", "1:2"], "pitchguard sweep", "FROM:TO:STEP"),
        (["rules", "check", "d.toml", "--strict"], "pitchguard rules check", "--strict"),
    ],
)
def test_usage_errors_are_one_line(capsys, tmp_path, monkeypatch, argv, help_of, says):
    monkeypatch.chdir(tmp_path)  # no project settings around
    line = _one_line(*_run(capsys, argv), help_of)
    assert says in line, line


def test_usage_error_text_is_escaped_and_capped(capsys, tmp_path, monkeypatch):
    """An unknown argument is echoed with control characters written out, and a
    flood of them does not make a huge line."""
    monkeypatch.chdir(tmp_path)
    line = _one_line(*_run(capsys, [*SCAN, "--x\x1b[2J\n"]), "pitchguard scan")
    assert "\x1b" not in line and "\\x1b" in line, line
    line = _one_line(*_run(capsys, [*SCAN, *["extra"] * 5000]), "pitchguard scan")
    assert len(line) < 500, len(line)


def _numeric_options() -> list[tuple[str, str]]:
    """(command, option) for every option of a command that takes a number."""
    parser = build_parser()
    found = []
    for name, sub in parser._subparsers._group_actions[0].choices.items():
        for action in sub._actions:
            if action.type in (None, Path, str) or action.choices or not action.option_strings:
                continue
            found.append((name, max(action.option_strings, key=len)))
    return found


SIGNED = {  # options whose values may be negative: the text and what it reads as
    "--region": ("-5,-5,5,5", (-5.0, -5.0, 5.0, 5.0)),
    "--focus": ("-1e3", -1000.0),
    "--orientation": ("-4.5e1", -45.0),
}


@pytest.mark.parametrize(("command", "option"), _numeric_options(), ids="-".join)
def test_a_value_starting_with_minus_is_the_options_value(capsys, command, option):
    """``--option -VALUE`` reads as ``--option=-VALUE``: a signed option takes it,
    any other refuses it with its own bound, never 'expected one argument'."""
    argv = COMMANDS[command]
    assert set(SIGNED) <= {o for _, o in _numeric_options()}
    if option in SIGNED:
        text, expected = SIGNED[option]
        args = build_parser().parse_args([*argv, option, text])
        assert getattr(args, option.lstrip("-").replace("-", "_")) == expected
        return
    text = "-1e1:400:5" if option == "--pitches" else "-1e1"
    with pytest.raises(SystemExit) as exc:
        build_parser().parse_args([*argv, option, text])
    err = capsys.readouterr().err
    assert exc.value.code == 2 and len(err.splitlines()) == 1, err
    assert f"argument {option}" in err and "expected one argument" not in err, err
    assert "'-1e1" in err, err  # the value itself was read and judged


@pytest.mark.parametrize(
    ("argv", "dest", "expected"),
    [
        ([*SCAN, "--reg", "-5,-5,5,5"], "region", (-5.0, -5.0, 5.0, 5.0)),  # an abbreviation
        ([*PROBE, "--focus", "-5e-1"], "focus", -0.5),
        ([*PROBE, "--focus", "-7e0", "--focus", "-8e0"], "focus", -8.0),  # the last one wins
        ([*SCAN, "-j", "3", "--region", "-1e1,-2e1,1,2"], "region", (-10.0, -20.0, 1.0, 2.0)),
        ([*SWEEP, "--orientation", "-9e1"], "orientation", -90.0),
    ],
)
def test_negative_values_in_every_spelling(argv, dest, expected):
    assert getattr(build_parser().parse_args(argv), dest) == expected


def test_an_option_after_an_option_is_still_an_option(capsys):
    """Only values are joined: an option name in the value's place stays an option."""
    args = build_parser().parse_args([*PROBE, "--focus", "-1e3", "--json"])
    assert args.focus == -1000.0 and args.json
    with pytest.raises(SystemExit):
        build_parser().parse_args([*PROBE, "--focus", "--json"])
    err = capsys.readouterr().err
    assert "argument --focus: expected one argument" in err, err
    args = build_parser().parse_args([*SCAN, "--top", "5", "-q"])
    assert args.top == 5 and args.quiet
