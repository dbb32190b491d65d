"""The Python API: the README's example runs as written, and the API reports
what the command line reports (the command is a thin layer over it).

Reference: the command line's own JSON (``--json-inline-texts``) and
``probe --json`` for the same inputs; marker counts from the layout library
reading the written file back.
"""

from __future__ import annotations

import contextlib
import io
import json
import re
import shutil

import gdstk
import pytest

import pitchguard
from decks import DEMO_DECK, REPO, SAMPLE_GDS
from pitchguard.errors import PitchguardError

from .conftest import run_cli


def _readme_example() -> str:
    text = (REPO / "README.md").read_text(encoding="utf-8")
    section = text[text.index("## Python API") :]
    return re.search(r"```python\n(.*?)```", section, re.S).group(1)


@pytest.fixture(scope="module")
def demo_report():
    return pitchguard.scan(SAMPLE_GDS, rules=DEMO_DECK, jobs=2)


def test_readme_example_runs_as_written(tmp_path, monkeypatch):
    for folder in ("sample_layouts", "rules"):
        shutil.copytree(REPO / folder, tmp_path / folder)
    monkeypatch.chdir(tmp_path)
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        exec(compile(_readme_example(), "README.md", "exec"), {})
    printed = out.getvalue().splitlines()
    assert printed[0].startswith("{'fail': ") and printed[0].endswith("exit 1")
    markers = gdstk.read_rawcells(tmp_path / "metal1_fails.gds")
    assert markers  # written, and a layout file the library reads
    assert len(printed) >= 3  # at least one metal1 fail listed, and the probe line


def test_findings_are_the_json_rows_of_the_command(demo_report, tmp_path, capsys):
    out = tmp_path / "cli.json"
    code, _, _ = run_cli(
        capsys, "scan", SAMPLE_GDS, "-r", DEMO_DECK, "-q", "--json", out, "--json-inline-texts"
    )
    rows = json.loads(out.read_text())["findings"]
    assert code == demo_report.exit_code == 1
    api_rows = [json.loads(json.dumps(f.row)) for f in demo_report.findings]
    drop = ("seconds",)
    assert [{k: v for k, v in r.items() if k not in drop} for r in api_rows] == rows
    for f, r in zip(demo_report.findings, rows, strict=True):
        assert (f.layer, f.check, f.severity, f.cell, f.placements) == (
            r["layer"],
            r["check"],
            r["severity"],
            r["cell"],
            r["placements"],
        )
        assert [c.check for c in f.checks] == [c["check"] for c in r["checks"]]
    summary = json.loads(out.read_text())["summary"]
    assert demo_report.summary["by_severity"] == summary["by_severity"]
    assert {c.layer: c.by_severity for c in demo_report.coverage} == {
        k: {s: v[s] for s in ("fail", "risk", "marginal")} for k, v in summary["by_layer"].items()
    }


def test_select_writes_markers_of_the_chosen_findings_only(demo_report, tmp_path):
    chosen = demo_report.select(lambda f: f.severity == "risk")
    assert chosen.findings and all(f.severity == "risk" for f in chosen.findings)
    assert len(chosen.findings) == sum(f.severity == "risk" for f in demo_report.findings)
    assert chosen.exit_code == 0  # risks do not reach the default fail_on "fail"
    out = tmp_path / "risk.gds"
    chosen.write_markers(out, flat=True)
    lib = gdstk.read_gds(out)
    (top,) = lib.top_level()
    by_layer = {}
    for poly in top.polygons:
        by_layer[(poly.layer, poly.datatype)] = by_layer.get((poly.layer, poly.datatype), 0) + 1
    # One polygon per placement, on the deck's risk marker layer only (700/2 by default).
    assert by_layer == {(700, 2): sum(f.placements for f in chosen.findings)}


def test_outputs_never_overwrite_the_inputs(demo_report):
    with pytest.raises(PitchguardError):
        demo_report.write_json(SAMPLE_GDS)
    with pytest.raises(PitchguardError):
        demo_report.write_markers(DEMO_DECK.with_suffix(".gds").with_name(DEMO_DECK.name))


def test_probe_is_what_probe_json_prints(capsys):
    api = pitchguard.probe(DEMO_DECK, "metal1", pitch_nm=140, cd_nm=70)
    code, out, _ = run_cli(
        capsys,
        "probe",
        "-r",
        DEMO_DECK,
        "--layer",
        "metal1",
        "--pitch",
        "140",
        "--cd",
        "70",
        "--json",
    )
    assert code == 0
    assert json.loads(json.dumps(api.to_dict())) == json.loads(out)
    assert api.severity == json.loads(out)["severity"]


def test_bad_input_raises_a_one_line_error(tmp_path):
    with pytest.raises(PitchguardError, match="not found"):
        pitchguard.scan(tmp_path / "missing.gds", rules=DEMO_DECK)
    with pytest.raises(PitchguardError) as err:
        pitchguard.probe(DEMO_DECK, "no-such-layer", pitch_nm=140, cd_nm=70)
    assert "\n" not in str(err.value)
    with pytest.raises(PitchguardError):
        pitchguard.probe(DEMO_DECK, "metal1", pitch_nm=float("nan"), cd_nm=70)
    deck = pitchguard.load_deck(DEMO_DECK)
    with pytest.raises(PitchguardError, match="fail_on"):
        pitchguard.scan(SAMPLE_GDS, rules=deck, fail_on="sometimes")
