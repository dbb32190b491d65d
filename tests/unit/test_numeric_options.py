"""Every numeric option of every command refuses non-finite, overflowing, huge
and malformed values with exit 2 and one error line naming the option; good
values still parse.

Reference: the README's error contract (exit 2, one line) and the bounds stated
in docs/limits.md; IEEE 754 (inf, nan, overflow past 1.8e308)."""

from __future__ import annotations

import argparse
from pathlib import Path

import pytest

from pitchguard.cli import main
from pitchguard.cli.parser import build_parser

SCAN = ["scan", "x.gds", "--rules", "x.toml"]
DIFF = ["diff", "a.gds", "b.gds", "--rules", "x.toml"]
PROBE = ["probe", "--rules", "x.toml", "--layer", "m1", "--pitch", "200", "--cd", "100"]
SWEEP = ["sweep", "--rules", "x.toml", "--layer", "m1"]

OUTPUT_NUMBERS = [
    "--html-pictures",
    "--top",
    "--max-shapes",
    "--read-timeout",
    "--jobs",
    "--tile-um",
    "--max-memory-mb",
]
OPTIONS = (
    [(SCAN, o) for o in [*OUTPUT_NUMBERS, "--region"]]
    + [(DIFF, o) for o in OUTPUT_NUMBERS]
    + [(PROBE, o) for o in ["--pitch", "--cd", "--pitch-y", "--cd-y", "--focus", "--orientation"]]
    + [(SWEEP, o) for o in ["--cd", "--pitches", "--orientation"]]
)

BAD = ["inf", "-inf", "nan", "1e400", "-1e400", "1e308", "-1e308", "0x10", "9" * 60, "1e", ""]


def _shaped(option: str, value: str) -> str:
    """``value`` where the option's text takes a number (one of several for some)."""
    if option == "--region":
        return f"0,0,{value},1"
    if option == "--pitches":
        return f"100:{value}:5"
    return value


def _run(capsys, argv: list[str]) -> tuple[int, str]:
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse leaves by SystemExit
        code = exc.code
    return code, capsys.readouterr().err


def test_every_numeric_option_is_listed():
    """The table above holds every option that takes a number (a new one must join
    it), and each one's converter refuses nan."""
    parser = build_parser()
    listed = {(argv[0], o) for argv, o in OPTIONS}
    found = set()
    for name, sub in parser._subparsers._group_actions[0].choices.items():
        for action in sub._actions:
            kind = action.type
            if kind in (None, Path, str) or action.choices or not action.option_strings:
                continue
            found.add((name, max(action.option_strings, key=len)))
            with pytest.raises(argparse.ArgumentTypeError):  # not plain float or int
                kind(_shaped(max(action.option_strings, key=len), "nan"))
    assert found == listed


@pytest.mark.parametrize("value", BAD)
@pytest.mark.parametrize(("argv", "option"), OPTIONS, ids=[f"{a[0]}{o}" for a, o in OPTIONS])
def test_bad_numbers_are_usage_errors(capsys, tmp_path, monkeypatch, argv, option, value):
    monkeypatch.chdir(tmp_path)  # no project settings around
    code, err = _run(capsys, [*argv, f"{option}={_shaped(option, value)}"])
    assert code == 2, err
    assert "Traceback" not in err and "internal error" not in err, err
    errors = [ln for ln in err.splitlines() if ln.startswith("pitchguard: error: ")]
    assert len(errors) == 1 and f"argument {option}" in errors[0], err
    assert len(errors[0]) < 400, errors[0]  # a huge value is not echoed whole


@pytest.mark.parametrize(
    ("argv", "option", "value", "expected"),
    [
        (SCAN, "--jobs", "4", 4),
        (SCAN, "--jobs", "1e2", 100),
        (SCAN, "--max-shapes", "1e9", 1_000_000_000),
        (SCAN, "--html-pictures", "0", 0),
        (SCAN, "--max-memory-mb", "4096", 4096),
        (SCAN, "--read-timeout", "0.5", 0.5),
        (SCAN, "--tile-um", "2.5", 2.5),
        (SCAN, "--region", "-1,-2,3,4", (-1.0, -2.0, 3.0, 4.0)),
        (PROBE, "--focus", "-0", 0.0),
        (PROBE, "--focus", "-150", -150.0),
        (PROBE, "--orientation", "45", 45.0),
        (SWEEP, "--pitches", "80:400:5", (80.0, 400.0, 5.0)),
    ],
)
def test_good_numbers_parse(argv, option, value, expected):
    args = build_parser().parse_args([*argv, f"{option}={value}"])
    assert getattr(args, option.lstrip("-").replace("-", "_")) == expected


@pytest.mark.parametrize(
    ("option", "value", "why"),
    [
        ("--jobs", "2.5", "whole number"),
        ("--jobs", "-0", "at least 1"),
        ("--jobs", "513", "at most 512"),
        ("--top", "1e7", "at most 1,000,000"),
        ("--max-memory-mb", "1e308", "at most 1,073,741,824"),
        ("--read-timeout", "1e-9", "at least 0.1"),
        ("--tile-um", "0", "above 0"),
    ],
)
def test_a_refused_number_says_why(capsys, tmp_path, monkeypatch, option, value, why):
    monkeypatch.chdir(tmp_path)
    code, err = _run(capsys, [*SCAN, f"{option}={value}"])
    assert code == 2 and why in err.splitlines()[-1], err


def test_converters_raise_argparse_errors():
    """Settings files feed the same converters (cli.config): they raise
    ArgumentTypeError, never OverflowError or ValueError."""
    parser = build_parser()
    scan = parser._subparsers._group_actions[0].choices["scan"]
    for action in scan._actions:
        if action.type in (None, Path, str) or not action.option_strings or action.choices:
            continue
        for value in BAD:
            with pytest.raises(argparse.ArgumentTypeError):
                action.type(_shaped(max(action.option_strings, key=len), value))
