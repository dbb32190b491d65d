"""Gating a merge: baselines and revision diffs.

What counts as "the same finding" is the project's own rule (docs/gating.md:
per cell finding); these tests hold it to the behaviour CI needs: a baseline
taken on one revision passes that revision, survives a shift of the whole
layout and another placement of an accepted cell, and reports exactly what
was added (a new cell).  tests/integration/test_gating_cells.py holds the
per-cell rule itself.
"""

from __future__ import annotations

import json

import gdstk
import pytest

from .conftest import DRY_ARF_CUTOFF_NM, line_array_cell, run_cli


def _chip(path, shift=(0.0, 0.0), add=False, remove_b=False, new_cell=False):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    a = line_array_cell(lib, "A110", (7, 0), 110, 55, 9, 1500)  # below the 115.3 nm cutoff
    sx, sy = shift
    top.add(gdstk.Reference(a, (sx, sy)))
    if not remove_b:  # (an unreferenced cell would be a second top cell: not created)
        b = line_array_cell(lib, "B120", (7, 0), 120, 60, 12, 2000)  # k1 0.289: risk or worse
        top.add(gdstk.Reference(b, (10 + sx, sy)))
    if add:
        top.add(gdstk.Reference(a, (30 + sx, 5 + sy)))
    if new_cell:  # A110's lines drawn again in a cell of their own: another cell's finding
        c = line_array_cell(lib, "C110", (7, 0), 110, 55, 9, 1500)
        top.add(gdstk.Reference(c, (30 + sx, 5 + sy)))
    lib.write_gds(str(path))
    return path


@pytest.fixture
def revs(tmp_path, dry_deck):
    return {
        "deck": dry_deck,
        "r1": _chip(tmp_path / "r1.gds"),
        "shifted": _chip(tmp_path / "shifted.gds", shift=(3.7, -2.2)),
        "added": _chip(tmp_path / "added.gds", add=True),
        "both": _chip(tmp_path / "both.gds", shift=(3.7, -2.2), add=True),
        "new_cell": _chip(tmp_path / "new_cell.gds", new_cell=True),
        "both_new": _chip(tmp_path / "both_new.gds", shift=(3.7, -2.2), new_cell=True),
        "fixed": _chip(tmp_path / "fixed.gds", remove_b=True),
        "base": tmp_path / "baseline.json",
        "tmp": tmp_path,
    }


def test_baseline_passes_its_own_revision(revs, capsys):
    code, _, _ = run_cli(
        capsys, "scan", revs["r1"], "-r", revs["deck"], "-q", "--write-baseline", revs["base"]
    )
    assert code == 0  # the revision has a fail finding, recorded: the write succeeded
    data = json.loads(revs["base"].read_text())
    assert data["pitchguard_baseline"] == 1 and len(data["entries"]) == 2
    code, out, _ = run_cli(
        capsys, "scan", revs["r1"], "-r", revs["deck"], "-q", "--baseline", revs["base"]
    )
    assert code == 0 and "0 new, 2 accepted, 0 stale" in out


@pytest.mark.parametrize("rev", ["shifted", "added", "both", "new_cell", "both_new"])
def test_baseline_survives_shift_and_another_placement(revs, capsys, rev):
    run_cli(capsys, "scan", revs["r1"], "-r", revs["deck"], "-q", "--write-baseline", revs["base"])
    js = revs["tmp"] / f"{rev}.json"
    code, out, _ = run_cli(
        capsys,
        "scan",
        revs[rev],
        "-r",
        revs["deck"],
        "-q",
        "--baseline",
        revs["base"],
        "--json",
        js,
    )
    data = json.loads(js.read_text())
    # Another placement of A110 is accepted with A110's entry (one more placement
    # accepted by the same two entries); the new cell C110 is new.
    placed_again = rev in ("added", "both")
    added = rev in ("new_cell", "both_new")
    assert data["baseline"]["accepted"] == (3 if placed_again else 2)
    assert len(data["baseline"]["accepted_entries"]) == 2 and data["baseline"]["stale"] == 0
    assert data["baseline"]["new"] == (1 if added else 0)
    assert code == (1 if added else 0)
    if added:
        # Exactly the added array, wherever the whole layout moved.
        (f,) = data["findings"]
        assert f["cell"] == "C110"
        dx, dy = (3.7, -2.2) if rev == "both_new" else (0.0, 0.0)
        x0, y0, x1, y1 = f["bbox_um"]
        assert x0 == pytest.approx(30 + dx, abs=0.01) and y0 == pytest.approx(5 + dy, abs=0.01)


def test_stale_entries_are_listed_and_reasons_kept(revs, capsys):
    run_cli(capsys, "scan", revs["r1"], "-r", revs["deck"], "-q", "--write-baseline", revs["base"])
    data = json.loads(revs["base"].read_text())
    for e in data["entries"]:
        e["reason"], e["owner"] = "accepted for the test chip", "layout team"
    revs["base"].write_text(json.dumps(data))
    code, out, _ = run_cli(
        capsys, "scan", revs["fixed"], "-r", revs["deck"], "--baseline", revs["base"]
    )
    assert code == 0
    assert "1 stale" in out and "stale (fixed since, prune it)" in out
    # Rewriting the baseline in place keeps the people's notes on what still matches.
    run_cli(
        capsys,
        "scan",
        revs["shifted"],
        "-r",
        revs["deck"],
        "-q",
        "--baseline",
        revs["base"],
        "--write-baseline",
        revs["base"],
    )
    again = json.loads(revs["base"].read_text())
    assert {(e["reason"], e["owner"]) for e in again["entries"]} == {
        ("accepted for the test chip", "layout team")
    }


def test_bad_baseline_is_a_usage_error(revs, capsys):
    bad = revs["tmp"] / "bad.json"
    bad.write_text('{"entries": []}')
    code, _, err = run_cli(capsys, "scan", revs["r1"], "-r", revs["deck"], "--baseline", bad)
    assert code == 2 and "not a pitchguard baseline" in err and "Traceback" not in err


def test_diff_reports_exactly_the_introduced_array(revs, capsys):
    js = revs["tmp"] / "diff.json"
    code, out, _ = run_cli(
        capsys, "diff", revs["r1"], revs["both_new"], "-r", revs["deck"], "-q", "--json", js
    )
    assert code == 1
    data = json.loads(js.read_text())
    assert (data["diff"]["introduced"], data["diff"]["fixed"], data["diff"]["unchanged"]) == (
        1,
        0,
        2,
    )
    (f,) = data["findings"]
    assert f["bbox_um"][0] == pytest.approx(33.7, abs=0.01)
    assert "1 introduced, 0 fixed, 2 unchanged" in out


def test_diff_fixed_only_passes(revs, capsys):
    js = revs["tmp"] / "diff.json"
    code, _, _ = run_cli(
        capsys, "diff", revs["r1"], revs["fixed"], "-r", revs["deck"], "-q", "--json", js
    )
    data = json.loads(js.read_text())
    assert code == 0
    assert (data["diff"]["introduced"], data["diff"]["fixed"]) == (0, 1)
    assert data["diff"]["fixed_findings"][0]["pitch_nm"] == pytest.approx(120.0, abs=1.0)


def test_the_revisions_arrays_sit_either_side_of_the_decks_cutoff(revs, capsys):
    """What the tests above rest on: the dry ArF deck images pitches down to
    193 / (0.93 * 1.8) = 115.3 nm (lambda / (NA (1 + sigma)), arithmetic), so the
    110 nm array is unresolvable, and the 120 nm one resolves at k1 = 60 * 0.93 /
    193 = 0.289 (arithmetic), below the 0.30 risk band (common practice)."""
    js = revs["tmp"] / "r1.json"
    code, _, _ = run_cli(capsys, "scan", revs["r1"], "-r", revs["deck"], "-q", "--json", js)
    assert code == 1
    found = {round(f["pitch_nm"]): f for f in json.loads(js.read_text())["findings"]}
    assert set(found) == {110, 120}
    checks = {p: {c["check"]: c["severity"] for c in f["checks"]} for p, f in found.items()}
    assert found[110]["cutoff_pitch_nm"] == pytest.approx(DRY_ARF_CUTOFF_NM, abs=1e-3)
    assert checks[110]["unresolvable-pitch"] == "fail"
    assert "unresolvable-pitch" not in checks[120]
    assert checks[120]["low-k1"] == "risk"
    assert found[120]["k1"] == pytest.approx(60 * 0.93 / 193, abs=1e-4)  # JSON: 4 places


def test_diff_writes_every_ci_output(revs, capsys):
    """The CI recipe's outputs from a diff: SARIF valid against the official
    schema (tests/fixtures, OASIS SARIF 2.1.0), JUnit failures = introduced
    fail-level findings, HTML report and markers written."""
    import xml.etree.ElementTree as ET
    from pathlib import Path

    import jsonschema

    t = revs["tmp"]
    outs = {k: t / f"ci.{k}" for k in ("sarif", "xml", "html", "gds")}
    code, _, _ = run_cli(
        capsys,
        "diff",
        revs["r1"],
        revs["both_new"],
        "-r",
        revs["deck"],
        "-q",
        "--sarif",
        outs["sarif"],
        "--junit",
        outs["xml"],
        "--html",
        outs["html"],
        "--markers",
        outs["gds"],
    )
    assert code == 1
    schema_path = Path(__file__).resolve().parents[1] / "fixtures" / "sarif-schema-2.1.0.json"
    schema = json.loads(schema_path.read_text())
    sarif = json.loads(outs["sarif"].read_text())
    jsonschema.Draft4Validator(schema).validate(sarif)
    assert len(sarif["runs"][0]["results"]) == 1
    root = ET.parse(outs["xml"]).getroot()
    assert int(root.get("failures")) == 1
    assert "<html" in outs["html"].read_text()[:2000].lower()
    assert outs["gds"].stat().st_size > 0
