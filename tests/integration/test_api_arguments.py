"""The Python API checks its arguments as the command line checks its options:
the same bounds (pitchguard.option_bounds), a one-line PitchguardError naming
the argument and the bound for a bad number, TypeError for a wrong type (a
bool is not a number here), and nothing is scanned or imaged first.

Reference: the command line's own refusals of the same values (argparse
errors, exit 2) and the README's option bounds (lengths at least 0.001 nm).
"""

from __future__ import annotations

import re

import pytest

import pitchguard
from decks import DEMO_DECK, SAMPLE_GDS
from pitchguard.errors import PitchguardError

from .conftest import run_cli as _run_cli


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    """The command in this process: argparse's refusals leave by SystemExit."""
    try:
        return _run_cli(capsys, *argv)
    except SystemExit as exc:
        out, err = capsys.readouterr()
        return exc.code, out, err


NAN, INF = float("nan"), float("inf")

BAD_SCANS = [
    ({"max_memory_mb": NAN}, "max_memory_mb must be a finite number"),
    ({"tile_um": INF}, "tile_um must be a finite number"),
    ({"tile_um": -1}, "tile_um must be above 0"),
    ({"tile_um": 0.0}, "tile_um must be above 0"),
    ({"jobs": -1}, "jobs must be at least 1"),
    ({"jobs": 0}, "jobs must be at least 1"),
    ({"jobs": 2.5}, "jobs must be a whole number"),
    ({"jobs": 10**6}, "jobs must be at most 512"),
    ({"jobs": 10**5000}, "jobs must be at most 512"),
    ({"max_memory_mb": -5}, "max_memory_mb must be at least 1"),
    ({"max_memory_mb": 2**40}, "max_memory_mb must be at most 1,073,741,824"),
    ({"max_shapes": -1}, "max_shapes must be at least 1"),
    ({"max_shapes": 2**60}, "max_shapes must be at most"),
    ({"read_timeout_s": 0}, "read_timeout_s must be at least 0.1"),
    ({"read_timeout_s": NAN}, "read_timeout_s must be a finite number"),
    ({"region_um": (0, 0, NAN, 1)}, "region_um must be X0,Y0,X1,Y1"),
    ({"region_um": (5, 0, 1, 1)}, "region_um must be X0,Y0,X1,Y1"),
    ({"region_um": (0, 0, 1e7, 1)}, "region_um must be X0,Y0,X1,Y1"),
    ({"fail_on": "sometimes"}, "fail_on must be one of"),
]

WRONG_TYPES = [
    {"jobs": "2"},
    {"jobs": True},
    {"tile_um": "10"},
    {"max_memory_mb": [1]},
    {"max_shapes": False},
    {"read_timeout_s": "1"},
    {"region_um": "0,0,1,1"},
    {"region_um": (0, 0, 1)},
    {"region_um": (0, 0, "1", 1)},
    {"scheduler": 5},
    {"cell": 5},
]


def _id(value) -> str:
    if not isinstance(value, dict):
        return str(value)[:30]
    big = lambda v: isinstance(v, int) and v.bit_length() > 100  # noqa: E731  (repr refuses)
    return "-".join(f"{k}={'huge' if big(v) else str(v)[:16]}" for k, v in value.items())


def _one_line(exc: BaseException) -> str:
    text = str(exc)
    assert "\n" not in text and 0 < len(text) < 400, text
    return text


@pytest.fixture
def no_scan(monkeypatch):
    """A scan that starts is a failure here: every check comes first."""

    def refuse(*args, **kwargs):
        raise AssertionError("the scan started")

    monkeypatch.setattr("pitchguard.run.tiled.scan_tiled", refuse)
    monkeypatch.setattr("pitchguard.run.scan.scan_layout", refuse)


@pytest.mark.parametrize(("kwargs", "says"), BAD_SCANS, ids=_id)
def test_scan_refuses_bad_numbers_in_one_line(no_scan, kwargs, says):
    with pytest.raises(PitchguardError) as err:
        pitchguard.scan(SAMPLE_GDS, DEMO_DECK, **kwargs)
    assert says in _one_line(err.value)


@pytest.mark.parametrize("kwargs", WRONG_TYPES, ids=_id)
def test_scan_refuses_wrong_types_with_type_error(no_scan, kwargs):
    with pytest.raises(TypeError) as err:
        pitchguard.scan(SAMPLE_GDS, DEMO_DECK, **kwargs)
    assert next(iter(kwargs)) in _one_line(err.value)


# (API argument, command-line option, value): the two refuse the same values
# for the same reason.
SHARED = [
    ("jobs", "--jobs", 0),
    ("jobs", "--jobs", 513),
    ("tile_um", "--tile-um", 0),
    ("tile_um", "--tile-um", 2e6),
    ("max_memory_mb", "--max-memory-mb", 2**31),
    ("max_shapes", "--max-shapes", 0),
    ("read_timeout_s", "--read-timeout", 0.01),
    ("read_timeout_s", "--read-timeout", 1e9),
]


@pytest.mark.parametrize(("name", "option", "value"), SHARED)
def test_api_and_command_line_share_the_bounds(capsys, no_scan, name, option, value):
    code, _, err = run_cli(capsys, "scan", SAMPLE_GDS, "-r", DEMO_DECK, f"{option}={value}")
    assert code == 2, err
    cli_why = re.search(rf"argument {option}[^:]*: (must be .*?), got ", err).group(1)
    with pytest.raises(PitchguardError) as api:
        pitchguard.scan(SAMPLE_GDS, DEMO_DECK, **{name: value})
    assert f"{name} {cli_why}, got " in _one_line(api.value)


def test_whole_floats_and_numpy_numbers_are_numbers(monkeypatch):
    """Whole-number arguments take 2.0 as 2; numpy scalars are numbers."""
    import numpy as np

    seen = {}

    def record(layout, deck, **kwargs):
        seen.update(kwargs)
        raise PitchguardError("recorded")

    monkeypatch.setattr("pitchguard.run.tiled.scan_tiled", record)
    with pytest.raises(PitchguardError, match="recorded"):
        pitchguard.scan(
            SAMPLE_GDS, DEMO_DECK, jobs=2.0, max_memory_mb=np.int64(4096), tile_um=np.float64(20)
        )
    assert (seen["jobs"], seen["max_memory_mb"], seen["tile_um"]) == (2, 4096, 20.0)
    assert type(seen["jobs"]) is int and type(seen["max_memory_mb"]) is int


BAD_PROBES = [
    ({"orientation_deg": NAN}, "orientation_deg must be a finite number"),
    ({"orientation_deg": 1e6}, "orientation_deg must be at least -360"),
    ({"focus_nm": 1e12}, "focus_nm must be at least -100,000 and at most 100,000 nm"),
    ({"focus_nm": -1e6}, "focus_nm must be at least -100,000"),
    ({"pitch_nm": 1e-300, "cd_nm": 1e-301}, "pitch_nm must be at least 0.001"),
    ({"cd_nm": 0.0001}, "cd_nm must be at least 0.001"),
    ({"cd_nm": -70}, "cd_nm must be at least 0.001"),
    ({"pitch_nm": 1e9}, "pitch_nm must be at least 0.001 and at most 10,000,000 nm"),
    ({"pitch_y_nm": NAN}, "pitch_y_nm must be a finite number"),
    ({"cd_y_nm": -3}, "cd_y_nm must be at least 0.001"),
]


@pytest.fixture
def no_image(monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError("the probe imaged")

    monkeypatch.setattr("pitchguard.judge.gratings.grating", refuse)
    monkeypatch.setattr("pitchguard.judge.gratings.array_probe", refuse)


@pytest.mark.parametrize(("kwargs", "says"), BAD_PROBES, ids=_id)
def test_probe_refuses_bad_numbers_in_one_line(no_image, kwargs, says):
    args = {"pitch_nm": 140, "cd_nm": 70, **kwargs}
    with pytest.raises(PitchguardError) as err:
        pitchguard.probe(DEMO_DECK, "metal1", **args)
    assert says in _one_line(err.value)


@pytest.mark.parametrize(
    "kwargs",
    [{"pitch_nm": True}, {"cd_nm": "70"}, {"focus_nm": None}, {"orientation_deg": "90"}],
    ids=str,
)
def test_probe_refuses_wrong_types_with_type_error(no_image, kwargs):
    args = {"pitch_nm": 140, "cd_nm": 70, **kwargs}
    with pytest.raises(TypeError) as err:
        pitchguard.probe(DEMO_DECK, "metal1", **args)
    assert next(iter(kwargs)) in _one_line(err.value)


def test_probe_lengths_below_a_picometre_are_refused_on_the_command_line(capsys):
    code, out, err = run_cli(
        capsys, "probe", "-r", DEMO_DECK, "--layer", "metal1", "--pitch", "1e-300", "--cd", "1e-301"
    )
    assert code == 2 and out == "", (code, out)
    (line,) = err.splitlines()
    assert "argument --pitch" in line and "at least 0.001" in line, line
    code, _, err = run_cli(
        capsys, "sweep", "-r", DEMO_DECK, "--layer", "metal1", "--pitches", "1e-9:1e-8:1e-9"
    )
    assert code == 2 and "0.001" in err, err


@pytest.fixture(scope="module")
def small_report():
    return pitchguard.scan(SAMPLE_GDS, DEMO_DECK, untiled=True, region_um=(0, 0, 5, 5))


def test_report_arguments_are_checked(small_report, tmp_path):
    with pytest.raises(PitchguardError, match="pictures must be at least 0"):
        small_report.write_html(tmp_path / "r.html", pictures=-1)
    with pytest.raises(TypeError, match="pictures"):
        small_report.write_html(tmp_path / "r.html", pictures=True)
    with pytest.raises(PitchguardError, match="read_timeout_s must be a finite number"):
        pitchguard.ScanReport(small_report.result, small_report.deck, read_timeout_s=NAN)
    assert not (tmp_path / "r.html").exists()
