"""The command line as a user meets it: exit codes, outputs, bad input."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import gdstk
import numpy as np
import pytest

from pitchguard.deck import load_deck
from pitchguard.outputs.verdict import CAUTION

from .conftest import DEMO_DECK, REPO, SAMPLE_GDS, SAMPLE_OAS, run_cli

sys.path.insert(0, str(REPO / "sample_layouts"))
from build_demo_chip import EXPECTED, EXPECTED_2D


@pytest.fixture(scope="module")
def demo_json(tmp_path_factory) -> dict:
    out = tmp_path_factory.mktemp("demo") / "f.json"
    from pitchguard.cli.app import main

    assert (
        main(["scan", str(SAMPLE_GDS), "--rules", str(DEMO_DECK), "--json", str(out), "--quiet"])
        == 1
    )
    return json.loads(out.read_text())


def test_each_entry_names_its_cell_and_the_placements_add_up(demo_json):
    """One entry per distinct finding of a cell; the demo chip places POLY_P110
    mirrored three times, two of them alone (sample_layouts/build_demo_chip.py)."""
    entries = demo_json["findings"]
    summary = demo_json["summary"]
    assert summary["findings"] == len(entries)
    assert sum(e["placements"] for e in entries) == summary["placements"]
    assert sum(summary["by_severity"].values()) == summary["placements"]
    assert sum(summary["distinct_by_severity"].values()) == len(entries)
    for e in entries:
        assert e["cell"] and e["cell_path"][-1] == e["cell"]
        origins = sum(len(g["origins_um"]) // 2 for g in e["placed"])
        assert origins == e["placements"]
    twice = [e for e in entries if e["placements"] > 1]
    assert [(e["cell"], e["placements"], e["placed"][0]["mirrored"]) for e in twice] == [
        ("POLY_P110", 2, True)
    ]


def test_sample_scan_shows_every_severity(demo_json):
    sev = demo_json["summary"]["by_severity"]
    assert sev["fail"] > 0 and sev["risk"] > 0 and sev["marginal"] > 0
    assert demo_json["caution"] == CAUTION


@pytest.mark.parametrize(("block", "layer", "pitch", "angle", "severity"), EXPECTED)
def test_sample_blocks_get_their_expected_verdict(demo_json, block, layer, pitch, angle, severity):
    """Each block of the demo chip, as listed by its build script."""
    found = {
        f["severity"]
        for f in demo_json["findings"]
        if f["layer"] == layer
        and f["pitch_nm"] is not None
        and f["line_end"] is None
        and abs(f["pitch_nm"] - pitch) <= 1.0
        and abs(f["orientation_deg"] - angle) < 0.5
    }
    if severity is None:
        assert found == set(), block
    else:
        assert found == {severity}, block


@pytest.mark.parametrize(("block", "layer", "check", "severity", "point"), EXPECTED_2D)
def test_sample_2d_blocks_get_their_expected_verdict(
    demo_json, block, layer, check, severity, point
):
    """Line ends and via arrays of the demo chip, as listed by its build script."""
    x, y = point
    found = {
        (f["check"], f["severity"])
        for f in demo_json["findings"]
        if f["layer"] == layer
        and f["bbox_um"][0] <= x <= f["bbox_um"][2]
        and f["bbox_um"][1] <= y <= f["bbox_um"][3]
    }
    if severity is None:
        assert not {c for c, s in found if c == check or check is None}, block
    else:
        assert (check, severity) in found, block


def test_sample_ignores_layer_not_in_deck(demo_json):
    # Layer 63/0 holds a 20 nm pitch the deck does not name.
    assert all(f["pitch_nm"] is None or f["pitch_nm"] > 50 for f in demo_json["findings"])
    assert set(demo_json["summary"]["by_layer"]) == {"active", "poly", "metal1", "via1"}


def test_json_finding_fields(demo_json):
    f = demo_json["findings"][0]
    for key in (
        "layer",
        "severity",
        "pitch_nm",
        "width_nm",
        "space_nm",
        "k1",
        "orientation_deg",
        "bbox_um",
        "orders",
    ):
        assert key in f
    assert f["severity"] in ("fail", "risk", "marginal")
    x0, y0, x1, y1 = f["bbox_um"]
    assert x0 < x1 and y0 < y1
    # Findings are sorted worst first.
    ranks = [("fail", "risk", "marginal").index(g["severity"]) for g in demo_json["findings"]]
    assert ranks == sorted(ranks)


def test_json_coordinates_are_micrometres_whatever_the_unit(tmp_path, capsys, dry_deck):
    """The same array in a 1 nm-unit library and a 1 um-unit library: same bbox_um."""
    boxes = []
    for unit in (1e-6, 1e-9):
        lib = gdstk.Library(unit=unit, precision=1e-9)
        cell = lib.new_cell("TOP")
        s = 1e-9 / unit  # nm -> user units
        for k in range(8):
            x = (1000 + k * 110) * s
            cell.add(gdstk.rectangle((x, 2000 * s), (x + 55 * s, 3000 * s), layer=7))
        path = tmp_path / f"u{unit:g}.gds"
        lib.write_gds(str(path))
        out = tmp_path / f"u{unit:g}.json"
        code, _, _ = run_cli(capsys, "scan", path, "--rules", dry_deck, "--json", out, "-q")
        assert code == 1
        boxes.append(json.loads(out.read_text())["findings"][0]["bbox_um"])
    assert boxes[0] == pytest.approx(boxes[1])
    assert boxes[0] == pytest.approx([1.0, 2.0, 1.825, 3.0])  # 7 pitches + one width


def _read_markers(path):
    return gdstk.read_gds(str(path)) if path.suffix == ".gds" else gdstk.read_oas(str(path))


def _marker_polygons(lib):
    """Every marker polygon of a marker file, flattened, as (layer, datatype, corners nm)."""
    (top,) = [c for c in lib.top_level() if c.name == "PITCHGUARD_MARKERS"]
    out = []
    for p in top.get_polygons():
        pts = np.round(p.points * 1000.0)  # um -> nm
        out.append((p.layer, p.datatype, pts[np.lexsort(pts.T[::-1])]))
    return sorted(out, key=lambda r: (r[0], r[1], *r[2].ravel().tolist()))


@pytest.mark.parametrize("ext", [".gds", ".oas"])
def test_markers_one_polygon_and_label_per_placement(tmp_path, capsys, ext, demo_json):
    """Flattened, the hierarchical marker file holds one polygon and one label per
    placement of a finding, on the deck's marker layer of its severity; the flat
    file holds the same polygons (to the 1 nm grid: corners of a turned cell's
    markers are snapped in the cell's frame)."""
    out = tmp_path / f"markers{ext}"
    flat = tmp_path / f"flat{ext}"
    code, _, _ = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--markers", out, "-q")
    assert code == 1
    code, _, _ = run_cli(
        capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--markers", flat, "--flat-markers", "-q"
    )
    assert code == 1
    lib, flat_lib = _read_markers(out), _read_markers(flat)
    placements = demo_json["summary"]["placements"]
    (flat_cell,) = flat_lib.cells
    assert len(flat_cell.polygons) == placements == len(flat_cell.labels)
    (top,) = lib.top_level()
    assert len(top.get_polygons()) == placements == len(top.get_labels())
    # A marker cell per cell with findings away from the top and set of placements
    # (the JSON entries' "placed"), placed by reference.
    entries = [e for e in demo_json["findings"] if len(e["cell_path"]) > 1]
    contexts = {(e["cell"], json.dumps(e["placed"], sort_keys=True)) for e in entries}
    assert len(lib.cells) - 1 == len(contexts) > 0
    assert {c.name.split("_", 1)[1] for c in lib.cells if c is not top} == {
        e["cell"] for e in entries
    }
    a, b = _marker_polygons(lib), _marker_polygons(flat_lib)
    assert [r[:2] for r in a] == [r[:2] for r in b]
    assert max(float(np.abs(x[2] - y[2]).max()) for x, y in zip(a, b, strict=True)) <= 1.0
    deck = load_deck(DEMO_DECK)
    by_layer = {}
    for layer, datatype, _ in a:
        by_layer[(layer, datatype)] = by_layer.get((layer, datatype), 0) + 1
    expected = {deck.markers[s]: n for s, n in demo_json["summary"]["by_severity"].items() if n}
    assert by_layer == expected
    assert any(lbl.text.startswith("fail unresolvable-pitch") for lbl in top.get_labels())
    for one in (lib, flat_lib):
        assert one.unit == pytest.approx(1e-6) and one.precision == pytest.approx(1e-9)


def test_oasis_sample_gives_same_findings_as_gdsii(tmp_path, capsys, demo_json):
    out = tmp_path / "oas.json"
    code, _, _ = run_cli(capsys, "scan", SAMPLE_OAS, "--rules", DEMO_DECK, "--json", out, "-q")
    assert code == 1
    oas = json.loads(out.read_text())
    key = lambda f: (f["layer"], f["severity"], f["pitch_nm"] or -1.0, tuple(f["bbox_um"]))  # noqa: E731
    assert sorted(map(key, oas["findings"])) == sorted(map(key, demo_json["findings"]))


@pytest.mark.parametrize(
    ("fail_on", "code"), [("fail", 1), ("risk", 1), ("marginal", 1), ("never", 0)]
)
def test_fail_on_sets_exit_code(capsys, fail_on, code):
    got, out, _ = run_cli(
        capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--fail-on", fail_on, "-q"
    )
    assert got == code
    assert out.startswith("pitchguard: ")


def test_relaxed_only_layout_exits_zero(tmp_path, capsys, dry_deck):
    lib = gdstk.Library()
    cell = lib.new_cell("TOP")
    for k in range(10):
        cell.add(gdstk.rectangle((k * 0.26, 0), (k * 0.26 + 0.13, 2), layer=7))
    path = tmp_path / "relaxed.gds"
    lib.write_gds(str(path))
    code, out, _ = run_cli(capsys, "scan", path, "--rules", dry_deck, "--fail-on", "marginal")
    assert code == 0
    assert "0 fail, 0 risk, 0 marginal" in out


def test_quiet_prints_one_line(capsys):
    code, out, err = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "-q")
    assert code == 1
    assert out.count("\n") == 1
    assert out.startswith("pitchguard: FAILED (fail-on fail): ")


def test_only_a_scan_that_lists_findings_sorts_them(tmp_path, capsys, monkeypatch):
    """A quiet scan writing no file reads only counts: the same line and exit code
    without the sort; any output that lists findings gets them in report order
    (the order sort_findings gives, checked against Python's sorted in
    test_findingset.py)."""
    import pitchguard.run.tiled as par

    sorts = []
    real = par.sort_findings
    monkeypatch.setattr(par, "sort_findings", lambda fs: sorts.append(len(fs)) or real(fs))
    code, out, _ = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "-q")
    assert sorts == []
    js = tmp_path / "f.json"
    code2, out2, _ = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "-q", "--json", js)
    assert len(sorts) == 1 and sorts[0] > 1
    assert (code, out.split(", ")[:3]) == (code2, out2.split(", ")[:3])  # all but the time
    listed = json.loads(js.read_text())["findings"]
    from pitchguard.deck import SEVERITIES

    # No k1 (a line end) after every k1 of its severity.
    keys = [
        (SEVERITIES.index(f["severity"]), f["k1"] if f["k1"] is not None else 9.0, f["layer"])
        for f in listed
    ]
    assert keys == sorted(keys)
    run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK)  # the table lists the worst
    assert len(sorts) == 2


def test_garbage_collection_is_on_for_the_scan_and_as_it_was_after(capsys, monkeypatch):
    """Paused only while the command starts: the scan (and the workers it forks)
    collect garbage, and an embedding program gets its own setting back."""
    import gc

    import pitchguard.run.tiled as par

    seen = []
    real = par.scan_tiled
    monkeypatch.setattr(
        par, "scan_tiled", lambda *a, **k: seen.append(gc.isenabled()) or real(*a, **k)
    )
    assert gc.isenabled()
    run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "-q")
    assert seen == [True] and gc.isenabled()
    gc.disable()
    try:
        run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "-q")
        assert seen == [True, False] and not gc.isenabled()  # theirs, left alone
    finally:
        gc.enable()
    run_cli(capsys, "rules", "check", DEMO_DECK)
    assert gc.isenabled()


def test_table_lists_layers_and_worst_findings_of_cells(capsys, demo_json):
    code, out, _ = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--top", "3")
    assert code == 1
    assert "Findings per layer" in out
    for layer in ("active", "poly", "metal1"):
        assert layer in out
    # The worst findings of cells, with their placements (the JSON's entries and summary).
    data = demo_json
    n, placed = data["summary"]["findings"], data["summary"]["placements"]
    assert f"Worst findings (3 of {n}; {placed} placements)" in out
    assert n < placed  # the demo places a cell finding twice
    first = data["findings"][0]
    row = next(line for line in out.splitlines() if line.lstrip().startswith("1 "))
    assert first["cell"] in row and f" {first['placements']} " in row
    assert "sign-off stays with the fab" in out


# ----------------------------------------------------------------------------- bad input


def _one_line_error(code: int, err: str, *needles: str) -> None:
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("pitchguard: error: ")
    assert "Traceback" not in err
    for n in needles:
        assert n in lines[0]


def test_missing_layout(tmp_path, capsys):
    code, _, err = run_cli(capsys, "scan", tmp_path / "nope.gds", "--rules", DEMO_DECK)
    _one_line_error(code, err, "nope.gds", "not found")


def test_not_a_layout(tmp_path, capsys):
    bad = tmp_path / "notes.gds"
    bad.write_text("this is not a layout\n")
    code, _, err = run_cli(capsys, "scan", bad, "--rules", DEMO_DECK)
    _one_line_error(code, err, "notes.gds", "not a GDSII or OASIS file")


@pytest.mark.parametrize("src", [SAMPLE_GDS, SAMPLE_OAS])
def test_truncated_layout(tmp_path, capsys, src):
    bad = tmp_path / f"cut{src.suffix}"
    bad.write_bytes(src.read_bytes()[:100])
    code, _, err = run_cli(capsys, "scan", bad, "--rules", DEMO_DECK)
    _one_line_error(code, err, bad.name, "cannot read")


def test_bad_deck_one_line(tmp_path, capsys):
    deck = tmp_path / "bad.toml"
    deck.write_text(DEMO_DECK.read_text().replace('source = "7/0"', 'source = "7-0"'))
    code, _, err = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", deck)
    _one_line_error(code, err, "bad.toml", "layers[1].source")


def test_rules_check_ok_and_bad(tmp_path, capsys):
    code, out, _ = run_cli(capsys, "rules", "check", DEMO_DECK)
    assert code == 0 and "valid deck" in out
    deck = tmp_path / "bad.toml"
    deck.write_text(DEMO_DECK.read_text().replace("na = 1.35", "na = 1.50", 1))  # one error
    code, _, err = run_cli(capsys, "rules", "check", deck)
    _one_line_error(code, err, "exposures.arf_imm_dipole_x", "immersion_index")


def test_missing_cell(capsys):
    code, _, err = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--cell", "NOPE")
    _one_line_error(code, err, "no cell named 'NOPE'")


def test_output_may_not_overwrite_input(tmp_path, capsys):
    layout = tmp_path / "chip.gds"
    layout.write_bytes(SAMPLE_GDS.read_bytes())
    before = layout.read_bytes()
    code, _, err = run_cli(capsys, "scan", layout, "--rules", DEMO_DECK, "--markers", layout)
    _one_line_error(code, err, "refusing to overwrite an input file")
    assert layout.read_bytes() == before


def test_bad_marker_extension(tmp_path, capsys):
    code, _, err = run_cli(
        capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--markers", tmp_path / "m.txt"
    )
    _one_line_error(code, err, "must end in .gds or .oas")


def test_reference_cycle_is_refused(tmp_path, capsys):
    lib = gdstk.Library()
    a = lib.new_cell("A")
    b = lib.new_cell("B")
    a.add(gdstk.rectangle((0, 0), (1, 1), layer=7))
    a.add(gdstk.Reference(b))
    b.add(gdstk.Reference(a))
    path = tmp_path / "cycle.gds"
    lib.write_gds(str(path))
    code, _, err = run_cli(capsys, "scan", path, "--rules", DEMO_DECK, "--cell", "A")
    _one_line_error(code, err, "cycle")


def test_too_many_shapes_is_refused(capsys):
    code, _, err = run_cli(capsys, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--max-shapes", "10")
    _one_line_error(code, err, "over the limit of 10")


def test_usage_error_exit_2(capsys):
    with pytest.raises(SystemExit) as exc:
        run_cli(capsys, "scan", SAMPLE_GDS, "--no-such-option")
    assert exc.value.code == 2
    (line,) = capsys.readouterr().err.splitlines()  # one line, no usage text
    assert line.startswith("pitchguard: error: ") and "--no-such-option" in line


def test_no_deck_given_or_set_is_one_line(capsys):
    code, _, err = run_cli(capsys, "scan", SAMPLE_GDS)  # --rules missing, no settings file
    _one_line_error(code, err, "--rules")


def test_console_script_runs_without_traceback(tmp_path):
    """The installed entry point, in a real process (exit codes as the shell sees them)."""
    exe = Path(sys.executable).parent / "pitchguard"
    assert exe.exists(), "console script not installed"
    out = tmp_path / "findings.json"
    ok = subprocess.run(
        [exe, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "-q", "--json", out],
        capture_output=True,
        text=True,
    )
    assert ok.returncode == 1 and ok.stdout.startswith("pitchguard: FAILED")
    assert ok.stderr == ""
    # Written whole before the command ends (it freezes the collector at exit).
    assert json.loads(out.read_text())["findings"]
    bad = subprocess.run(
        [exe, "scan", tmp_path / "missing.oas", "--rules", DEMO_DECK],
        capture_output=True,
        text=True,
    )
    assert bad.returncode == 2 and "Traceback" not in bad.stderr


def test_a_quiet_scan_does_not_import_rich():
    """rich draws the table, bar and notes, none of which a quiet scan shows, so
    a quiet scan does not pay for importing it."""
    code = (
        "import sys; from pitchguard.cli import main; "
        f"c = main(['scan', {str(SAMPLE_GDS)!r}, '--rules', {str(DEMO_DECK)!r}, '-q']); "
        "print(c, sorted(m for m in sys.modules if m.split('.')[0] == 'rich'))"
    )
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert r.stdout.splitlines()[-1] == "1 []"


def test_the_command_turns_off_numpys_huge_page_advice_unless_the_user_set_it():
    """numpy's NUMPY_MADVISE_HUGEPAGE (documented under numpy's global state),
    read when numpy is imported: the command sets 0 before that, and keeps a
    value from the user's environment.  Importing the command does not import
    numpy, so the variable is in place before numpy reads it."""
    code = (
        "import os, sys; from pitchguard.cli import main; "
        "assert 'numpy' not in sys.modules; "
        f"main(['rules', 'check', {str(DEMO_DECK)!r}]); "
        "assert 'numpy' in sys.modules; print(os.environ['NUMPY_MADVISE_HUGEPAGE'])"
    )
    env = {k: v for k, v in os.environ.items() if k != "NUMPY_MADVISE_HUGEPAGE"}
    for given, want in ((None, "0"), ("1", "1")):
        if given is not None:
            env["NUMPY_MADVISE_HUGEPAGE"] = given
        r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env)
        assert r.returncode == 0, r.stderr
        assert r.stdout.splitlines()[-1] == want


@pytest.mark.slow
@pytest.mark.parametrize("quiet", [False, True])
@pytest.mark.parametrize("fail_on", ["fail", "never"])
def test_a_closed_output_pipe_keeps_the_verdict(quiet, fail_on):
    """``pitchguard scan ... | head``: the reader may go before the table or the
    summary is written.  The exit code is still the verdict's (1 with a fail
    finding, 0 with --fail-on never), not an internal error (3) or rich's own
    exit 1, and nothing lands on stderr."""
    exe = Path(sys.executable).parent / "pitchguard"
    cmd = [exe, "scan", SAMPLE_GDS, "--rules", DEMO_DECK, "--fail-on", fail_on]
    cmd += ["-q"] if quiet else []
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    proc.stdout.close()  # the reader is gone before anything is written
    err = proc.stderr.read()
    proc.wait(timeout=120)
    assert (proc.returncode, err) == (1 if fail_on == "fail" else 0, "")


def test_a_closed_error_pipe_keeps_the_exit_code(tmp_path):
    """``pitchguard scan ... 2>&1 | head -0``: the one-line error cannot be
    written, and the exit code still says bad input (2): the failed write of the
    error line must not become an error of its own."""
    exe = Path(sys.executable).parent / "pitchguard"
    bad = tmp_path / "not-a-layout.gds"
    bad.write_text("hello")
    proc = subprocess.Popen(
        [exe, "scan", bad, "--rules", DEMO_DECK], stdout=subprocess.PIPE, stderr=subprocess.STDOUT
    )
    proc.stdout.close()
    assert proc.wait(timeout=120) == 2


def test_a_note_to_a_closed_stderr_does_not_end_the_command():
    """rich exits 1 when its stream's reader is gone; the command's consoles
    (notes and progress on stderr, tables on stdout) drop the rest instead,
    and the command carries on to its own exit code (5 here)."""
    code = (
        "import sys; from pitchguard.cli.console import make_console; "
        "make_console(stderr=True).print('note ' * 20000); "
        "make_console().print('row ' * 20000); sys.exit(5)"
    )
    for closed in ("stdout", "stderr"):
        proc = subprocess.Popen(
            [sys.executable, "-c", code],
            stdout=subprocess.PIPE if closed == "stdout" else subprocess.DEVNULL,
            stderr=subprocess.PIPE if closed == "stderr" else subprocess.DEVNULL,
        )
        getattr(proc, closed).close()
        assert proc.wait(timeout=60) == 5, closed
