"""Baselines and diffs per cell finding (outputs/baseline.py), on hand-made findings.

The rule under test is the one docs/gating.md states: an entry naming a cell
matches a cell finding of that cell with a compatible signature, nearest in
the cell's own frame, and accepts every placement of it; an entry without a
cell matches one placement by its top-frame position.  Every placement below
is built by moving a box drawn in its cell's frame (``p_top = p_cell + t``),
so which findings are "the same" follows from the construction.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from pitchguard.errors import PitchguardError
from pitchguard.judge.findings import Finding
from pitchguard.outputs.baseline import (
    Signature,
    apply_baseline,
    diff,
    load_baseline,
    units_of,
    write_baseline,
)
from pitchguard.run.cells import CellMap

# A box in a cell's frame (nm): nine 55 nm lines at a 110 nm pitch, 1.5 um long.
BOX = (0.0, 0.0, 935.0, 1500.0)
EYE = (1.0, 0.0, 0.0, 1.0)


def _finding(box, pitch=110.0, check="unresolvable-pitch") -> Finding:
    x0, y0, x1, y1 = box
    return Finding(
        layer="poly",
        source="7/0",
        exposure="arf",
        check=check,
        severity="fail",
        pitch_nm=pitch,
        pitch_max_nm=pitch,
        width_nm=pitch / 2,
        space_nm=pitch / 2,
        wafer_pitch_nm=pitch,
        k1=0.27,
        orientation_deg=90.0,
        orders=(0,),
        orders_on_axis=(0,),
        two_beam_fraction=0.0,
        cutoff_pitch_nm=115.3,
        lines=9,
        periodicity="dense",
        sites=16,
        run_nm=y1 - y0,
        bbox_nm=box,
        outline_nm=((x0, y0), (x1, y0), (x1, y1), (x0, y1)),
        limit="",
        message=f"pitch {pitch} nm",
        hint="",
        context="interior",
    )


def _scan(placements):
    """Findings and their CellMap from ``(cell, path, (tx, ty) nm, box in the cell,
    pitch)`` per placement: each finding's box is the cell's box moved by t."""
    names = tuple(dict.fromkeys(p[0] for p in placements))
    paths = tuple(dict.fromkeys(p[1] for p in placements))
    findings = []
    for _, _, (tx, ty), (x0, y0, x1, y1), pitch in placements:
        findings.append(_finding((x0 + tx, y0 + ty, x1 + tx, y1 + ty), pitch))
    cells = CellMap(
        names,
        paths,
        np.array([names.index(p[0]) for p in placements], np.int32),
        np.array([paths.index(p[1]) for p in placements], np.int32),
        np.array([EYE] * len(placements), np.float64),
        np.array([p[2] for p in placements], np.float64),
    )
    return findings, cells


A = ("A", ("TOP", "A"))
B = ("B", ("TOP", "B"))
TOP = ("TOP", ("TOP",))
B_BOX = (0.0, 0.0, 1380.0, 2000.0)


def _r1():
    return _scan([(*A, (0.0, 0.0), BOX, 110.0), (*B, (10_000.0, 0.0), B_BOX, 120.0)])


def _baseline(tmp_path, findings, cells, reasons=None):
    path = tmp_path / "base.json"
    write_baseline(path, findings, "deck", "layout", [], cells=cells)
    if reasons:
        data = json.loads(path.read_text())
        for e in data["entries"]:
            e["reason"] = reasons.get(e.get("cell"), "")
        path.write_text(json.dumps(data))
    return path, load_baseline(path)


def test_an_entry_records_the_cell_finding(tmp_path):
    findings, cells = _scan([(*A, (30_000.0, 5_000.0), BOX, 110.0), (*A, (0.0, 0.0), BOX, 110.0)])
    _, entries = _baseline(tmp_path, findings, cells)
    (e,) = entries
    # The box drawn in A's frame, in um; for people, the first placement's box,
    # the cell's moved by t = (30, 5) um.
    assert e["cell"] == "A" and e["cell_path"] == ["TOP", "A"] and e["placements"] == 2
    assert e["cell_bbox_um"] == [0.0, 0.0, 0.935, 1.5]
    assert e["cell_centre_um"] == [0.4675, 0.75]
    assert e["bbox_um"] == [30.0, 5.0, 30.935, 6.5] and e["centre_um"] == [30.4675, 5.75]


def test_a_cell_finding_is_compared_in_its_cells_frame():
    """Whatever its first placement, a cell finding's place is the box drawn in the
    cell (t = (30, 5) um taken back); a finding with no cell keeps the top frame."""
    findings, cells = _scan([(*A, (30_000.0, 5_000.0), BOX, 110.0)])
    (u,) = units_of(findings, cells)
    s = Signature.of_unit(u)
    assert (s.centre_um, s.frame) == ((0.4675, 0.75), ("A",))
    (alone,) = units_of(findings, None)
    s = Signature.of_unit(alone)
    assert (s.centre_um, s.frame) == ((30.4675, 5.75), None)


def test_a_cell_moved_in_its_parent_is_the_same_finding(tmp_path):
    _, entries = _baseline(tmp_path, *_r1())
    # A moved by (5, 7) um in TOP, B by (-3, 0) um.
    moved = _scan([(*A, (5_000.0, 7_000.0), BOX, 110.0), (*B, (7_000.0, 0.0), B_BOX, 120.0)])
    gate = apply_baseline(moved[0], entries, cells=moved[1])
    assert gate.new_index == [] and gate.stale == [] and gate.accepted_placements == 2
    assert [(a.unit.cell, a.per_cell) for a in gate.accepted] == [("A", True), ("B", True)]


def test_reasons_follow_the_cell_not_the_place(tmp_path):
    """Two cells with equal findings swap places in the parent: each entry stays
    with its cell (matching by top-frame place would swap them)."""
    two = [(*A, (0.0, 0.0), BOX, 110.0), ("A2", ("TOP", "A2"), (20_000.0, 0.0), BOX, 110.0)]
    path, entries = _baseline(tmp_path, *_scan(two), reasons={"A": "a", "A2": "a2"})
    swapped = _scan(
        [(*A, (20_000.0, 0.0), BOX, 110.0), ("A2", ("TOP", "A2"), (0.0, 0.0), BOX, 110.0)]
    )
    gate = apply_baseline(swapped[0], entries, cells=swapped[1])
    assert {a.unit.cell: a.entry["reason"] for a in gate.accepted} == {"A": "a", "A2": "a2"}
    write_baseline(path, *swapped[:1], "deck", "layout", [], cells=swapped[1])
    again = json.loads(path.read_text())["entries"]
    assert {e["cell"]: e["reason"] for e in again} == {"A": "a", "A2": "a2"}


def test_every_placement_of_a_matched_entry_is_accepted(tmp_path):
    _, entries = _baseline(tmp_path, *_r1())
    more = _scan(
        [
            (*A, (0.0, 0.0), BOX, 110.0),
            (*B, (10_000.0, 0.0), B_BOX, 120.0),
            (*A, (30_000.0, 5_000.0), BOX, 110.0),
            (*A, (-8_000.0, 40_000.0), BOX, 110.0),
        ]
    )
    gate = apply_baseline(more[0], entries, cells=more[1])
    assert gate.new_index == [] and gate.accepted_placements == 4
    assert {a.unit.cell: a.unit.placements for a in gate.accepted} == {"A": 3, "B": 1}


def test_a_placement_held_by_the_parent_is_new(tmp_path):
    """The same drawing whose surroundings differ belongs to TOP: another cell finding."""
    _, entries = _baseline(tmp_path, *_r1())
    crowded = _scan(
        [
            (*A, (0.0, 0.0), BOX, 110.0),
            (*B, (10_000.0, 0.0), B_BOX, 120.0),
            (*TOP, (0.0, 0.0), (30_000.0, 5_000.0, 30_935.0, 6_500.0), 110.0),
        ]
    )
    gate = apply_baseline(crowded[0], entries, cells=crowded[1])
    assert gate.new_index == [2] and gate.new == [crowded[0][2]]
    assert [a.unit.cell for a in gate.accepted] == ["A", "B"]


def test_new_index_runs_in_the_findings_order(tmp_path):
    _, entries = _baseline(tmp_path, *_scan([(*B, (0.0, 0.0), B_BOX, 120.0)]))
    findings, cells = _scan(
        [
            (*A, (0.0, 0.0), BOX, 110.0),
            (*B, (10_000.0, 0.0), B_BOX, 120.0),
            (*A, (30_000.0, 0.0), BOX, 110.0),
        ]
    )
    gate = apply_baseline(findings, entries, cells=cells)
    assert gate.new_index == [0, 2] and gate.new == [findings[0], findings[2]]


def test_top_level_findings_match_across_top_cell_names(tmp_path):
    """Findings held by a top cell are in the layout's frame, whatever the top is called;
    the layout moved as a whole by (3, -2) um is the same layout."""
    box = (1_000.0, 1_000.0, 1_935.0, 2_500.0)
    _, entries = _baseline(tmp_path, *_scan([(*TOP, (0.0, 0.0), box, 110.0)]))
    moved = (4_000.0, -1_000.0, 4_935.0, 500.0)
    renamed = _scan([("TOP_V2", ("TOP_V2",), (0.0, 0.0), moved, 110.0)])
    gate = apply_baseline(renamed[0], entries, cells=renamed[1])
    assert gate.new_index == [] and gate.stale == []


def test_nearest_in_the_cells_frame_pairs_equal_findings(tmp_path):
    """Two equal findings in one cell: each entry keeps its own, also when the cell's
    drawing moves by (2, 0) um in its own frame (a shift common to the cell)."""
    left, right = BOX, (3_000.0, 0.0, 3_935.0, 1_500.0)
    path = tmp_path / "base.json"
    f, c = _scan([(*A, (0.0, 0.0), left, 110.0), (*A, (0.0, 0.0), right, 110.0)])
    write_baseline(path, f, "deck", "layout", [], cells=c)
    data = json.loads(path.read_text())
    for e in data["entries"]:
        e["reason"] = "left" if e["cell_centre_um"][0] < 1.0 else "right"
    path.write_text(json.dumps(data))
    shift = 2_000.0
    f2, c2 = _scan(
        [
            (*A, (50_000.0, 0.0), (left[0] + shift, 0.0, left[2] + shift, 1_500.0), 110.0),
            (*A, (50_000.0, 0.0), (right[0] + shift, 0.0, right[2] + shift, 1_500.0), 110.0),
        ]
    )
    gate = apply_baseline(f2, load_baseline(path), cells=c2)
    got = {round(a.unit.finding.bbox_nm[0]): a.entry["reason"] for a in gate.accepted}
    assert got == {52_000: "left", 55_000: "right"}


def test_entries_without_a_cell_match_one_placement_each(tmp_path):
    """Entries without a cell: one placement each, by top-frame place."""
    path, entries = _baseline(tmp_path, *_r1())
    old = []
    for e in entries:
        old.append({k: v for k, v in e.items() if not k.startswith("cell") and k != "placements"})
    more = _scan(
        [
            (*A, (0.0, 0.0), BOX, 110.0),
            (*B, (10_000.0, 0.0), B_BOX, 120.0),
            (*A, (30_000.0, 5_000.0), BOX, 110.0),
        ]
    )
    gate = apply_baseline(more[0], old, cells=more[1])
    assert gate.new_index == [2] and gate.accepted_placements == 2
    assert all(not a.per_cell for a in gate.accepted)
    assert {a.unit.cell for a in gate.accepted} == {"A", "B"}  # named from the scan
    # Rewritten from such a scan, the entries name cells and keep their notes.
    for e in old:
        e["reason"] = "kept"
    path.write_text(json.dumps({"pitchguard_baseline": 1, "entries": old}))
    write_baseline(path, more[0], "deck", "layout", [], cells=more[1])
    again = json.loads(path.read_text())["entries"]
    assert {(e["cell"], e["placements"], e["reason"]) for e in again} == {
        ("A", 2, "kept"),
        ("B", 1, "kept"),
    }


def test_a_scan_without_cells_gates_per_placement(tmp_path):
    """No cells named: an entry with a cell stands for its first placement."""
    _, entries = _baseline(tmp_path, *_r1())
    more = _scan(
        [
            (*A, (0.0, 0.0), BOX, 110.0),
            (*B, (10_000.0, 0.0), B_BOX, 120.0),
            (*A, (30_000.0, 5_000.0), BOX, 110.0),
        ]
    )
    gate = apply_baseline(more[0], entries, cells=None)
    assert gate.new_index == [2] and gate.accepted_placements == 2


def test_a_cell_entry_without_its_frame_is_malformed(tmp_path):
    path, entries = _baseline(tmp_path, *_r1())
    del entries[0]["cell_centre_um"]
    path.write_text(json.dumps({"pitchguard_baseline": 1, "entries": entries}))
    with pytest.raises(PitchguardError, match="base.json: baseline entry is malformed"):
        load_baseline(path)


def test_diff_per_cell_finding():
    base = _r1()
    new = _scan(
        [
            (*A, (0.0, 5_000.0), BOX, 110.0),  # A moved in TOP
            (*A, (30_000.0, 5_000.0), BOX, 110.0),  # another placement of A
            (*TOP, (0.0, 0.0), (30_000.0, 20_000.0, 30_935.0, 21_500.0), 110.0),  # crowded
        ]
    )
    d = diff(base[0], new[0], base[1], new[1])
    assert d.introduced_index == [2]
    assert [c.cell for c in d.fixed] == ["B"] and d.fixed_placements == 1
    assert [(b.cell, n.cell, n.placements) for b, n in d.unchanged] == [("A", "A", 2)]
    assert d.unchanged_placements == 2
    # Without cells on either side, per placement: the second A is introduced too.
    flat = diff(base[0], new[0], base[1], None)
    assert len(flat.introduced_index) == 2 and flat.unchanged_placements == 1
    assert [c.cell for c in flat.fixed] == [""]  # B, with no cell named
