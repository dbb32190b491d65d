"""Gating per cell finding on hand-built hierarchies (docs/gating.md).

Two cells are placed in TOP: A110 (nine 55 nm lines at a 110 nm pitch, below
the dry ArF deck's 115.3 nm cutoff: a fail) and B120 (twelve 60 nm lines at
120 nm: a fail too, see test_gating.py).  Revisions move A110 in TOP, place
it again, or place it again beside a 500 nm wide line of TOP's own.  The
deck's interaction range is its default, 3 lambda/NA = 3 * 193 / 0.93 =
622.6 nm (deck.py, "Defaults"): a line 300 nm from A110's last line is
within it (the placement's finding belongs to TOP, which holds both), one
1.5 um away is not.
"""

from __future__ import annotations

import json
import re

import gdstk
import pytest

from .conftest import line_array_cell, run_cli

RANGE_UM = 3 * 0.193 / 0.93  # the deck's default interaction range (deck.py), 0.6226 um
A_RIGHT_UM = (8 * 110 + 55) / 1000  # A110's last line ends 0.935 um right of its origin
# The finding of A110's lines in A110's own frame: the box of its nine lines.
A_CELL_BOX = [0.0, 0.0, A_RIGHT_UM, 1.5]
A_CELL_CENTRE = [A_RIGHT_UM / 2, 0.75]
B_CELL_CENTRE = [(11 * 120 + 60) / 2000, 1.0]  # B120's twelve lines, 2 um long


def _chip(path, a_at=(0.0, 0.0), again=(), wires=(), with_b=True):
    """TOP with A110 at ``a_at``, A110 again at each of ``again``, B120 at (10, 0),
    and a 500 nm x 1.5 um line of TOP's own at each of ``wires`` (lower left, um)."""
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    a = line_array_cell(lib, "A110", (7, 0), 110, 55, 9, 1500)
    top.add(gdstk.Reference(a, a_at))
    if with_b:
        b = line_array_cell(lib, "B120", (7, 0), 120, 60, 12, 2000)
        top.add(gdstk.Reference(b, (10, 0)))
    for at in again:
        top.add(gdstk.Reference(a, at))
    for x, y in wires:
        top.add(gdstk.rectangle((x, y), (x + 0.5, y + 1.5), layer=7))
    lib.write_gds(str(path))
    return path


NEAR_UM = 0.3  # space from A110's last line to the wire: within the range
FAR_UM = 1.5  # beyond it


@pytest.fixture
def revs(tmp_path, dry_deck):
    assert NEAR_UM < RANGE_UM < FAR_UM
    p = tmp_path
    return {
        "deck": dry_deck,
        "tmp": p,
        "r1": _chip(p / "r1.gds"),
        # (a) A110 moved by (0, 5) um in TOP.
        "moved": _chip(p / "moved.gds", a_at=(0.0, 5.0)),
        # (b) A110 placed again at (30, 5).
        "again": _chip(p / "again.gds", again=[(30.0, 5.0)]),
        # (c) ... with a line of TOP's own 0.3 um from its last line, or 1.5 um.
        "crowded": _chip(
            p / "crowded.gds", again=[(30.0, 5.0)], wires=[(30.0 + A_RIGHT_UM + NEAR_UM, 5.0)]
        ),
        "far": _chip(p / "far.gds", again=[(30.0, 5.0)], wires=[(30.0 + A_RIGHT_UM + FAR_UM, 5.0)]),
        # (d) all three at once: moved, placed again, placed again in a crowd at (30, 20).
        "all": _chip(
            p / "all.gds",
            a_at=(0.0, 5.0),
            again=[(30.0, 5.0), (30.0, 20.0)],
            wires=[(30.0 + A_RIGHT_UM + NEAR_UM, 20.0)],
        ),
        "no_b": _chip(p / "no_b.gds", with_b=False),
        "base": p / "baseline.json",
    }


def _write_baseline(revs, capsys, rev="r1"):
    code, _, _ = run_cli(
        capsys, "scan", revs[rev], "-r", revs["deck"], "-q", "--write-baseline", revs["base"]
    )
    assert code == 0  # A110 and B120 fail, and are recorded: the write succeeded
    return json.loads(revs["base"].read_text())


def _gated(revs, capsys, rev, *more):
    js = revs["tmp"] / f"{rev}.gated.json"
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
        *more,
    )
    return code, out, json.loads(js.read_text())


def _accepted(data) -> dict:
    return {e["cell"]: e for e in data["baseline"]["accepted_entries"]}


def test_the_baseline_names_each_cell_finding(revs, capsys):
    data = _write_baseline(revs, capsys)
    got = {e["cell"]: e for e in data["entries"]}
    assert set(got) == {"A110", "B120"}
    a = got["A110"]
    assert a["cell_path"] == ["TOP", "A110"] and a["placements"] == 1
    assert a["cell_bbox_um"] == pytest.approx(A_CELL_BOX, abs=1e-6)
    assert a["cell_centre_um"] == pytest.approx(A_CELL_CENTRE, abs=1e-4)
    assert got["B120"]["cell_centre_um"] == pytest.approx(B_CELL_CENTRE, abs=1e-4)
    # For people: the first placement in the top frame (A110 at the origin, B120 at (10, 0)).
    assert a["centre_um"] == pytest.approx(A_CELL_CENTRE, abs=1e-4)
    assert got["B120"]["centre_um"] == pytest.approx([10 + B_CELL_CENTRE[0], 1.0], abs=1e-4)


def test_a_cell_moved_in_its_parent_is_the_same_finding(revs, capsys):
    """(a) A110 moved by (0, 5) um in TOP: accepted, nothing new or stale."""
    _write_baseline(revs, capsys)
    code, out, data = _gated(revs, capsys, "moved")
    assert code == 0 and "0 new, 2 accepted, 0 stale" in out
    a = _accepted(data)["A110"]
    assert a["matched"] == "cell" and a["placements"] == 1
    assert a["cell_centre_um"] == pytest.approx(A_CELL_CENTRE, abs=1e-4)
    assert a["centre_um"] == pytest.approx([A_CELL_CENTRE[0], A_CELL_CENTRE[1] + 5], abs=1e-4)


def test_another_placement_of_an_accepted_cell_is_not_new(revs, capsys):
    """(b) A110 placed again: both placements accepted by A110's one entry."""
    _write_baseline(revs, capsys)
    code, out, data = _gated(revs, capsys, "again")
    assert code == 0 and "0 new, 3 accepted, 0 stale" in out
    assert data["baseline"]["new"] == 0 and data["baseline"]["accepted"] == 3
    assert {c: e["placements"] for c, e in _accepted(data).items()} == {"A110": 2, "B120": 1}
    assert data["findings"] == []


def test_a_placement_with_a_neighbour_in_range_is_new(revs, capsys):
    """(c) The second A110 with a line of TOP's within range: its finding belongs to
    TOP and is new; the first placement stays accepted."""
    _write_baseline(revs, capsys)
    code, _, data = _gated(revs, capsys, "crowded")
    assert code == 1
    assert {c: e["placements"] for c, e in _accepted(data).items()} == {"A110": 1, "B120": 1}
    new = data["findings"]
    assert new and {f["cell"] for f in new} == {"TOP"}
    assert data["baseline"]["new"] == sum(f["placements"] for f in new)
    # A110's lines at their second place, (30, 5) um: now TOP's finding.
    moved_box = [30.0, 5.0, 30.0 + A_RIGHT_UM, 6.5]
    (lines,) = [f for f in new if f["check"] == "unresolvable-pitch"]
    assert lines["bbox_um"] == pytest.approx(moved_box, abs=1e-6)
    # Everything new lies where the crowd is: A110's second place and the wire.
    for f in new:
        x0, y0, x1, y1 = f["bbox_um"]
        assert x0 >= 30.0 and x1 <= 30.0 + A_RIGHT_UM + NEAR_UM + 0.5 and (y0, y1) == (5.0, 6.5)


def test_a_neighbour_beyond_the_range_changes_nothing(revs, capsys):
    """The same line 1.5 um away: the second placement is A110's again."""
    _write_baseline(revs, capsys)
    code, out, data = _gated(revs, capsys, "far")
    assert code == 0 and "0 new, 3 accepted, 0 stale" in out
    assert _accepted(data)["A110"]["placements"] == 2


def test_diff_matches_cell_findings_across_revisions(revs, capsys):
    """(d) r1 -> all: A110 moved and placed again is unchanged (two placements),
    B120 unchanged, the crowded placement's findings introduced (TOP's)."""
    js = revs["tmp"] / "diff.json"
    code, out, _ = run_cli(
        capsys, "diff", revs["r1"], revs["all"], "-r", revs["deck"], "-q", "--json", js
    )
    data = json.loads(js.read_text())
    d = data["diff"]
    assert code == 1
    new = data["findings"]
    assert new and {f["cell"] for f in new} == {"TOP"}
    introduced = sum(f["placements"] for f in new)
    assert (d["introduced"], d["fixed"], d["unchanged"]) == (introduced, 0, 3)
    assert f"{introduced} introduced, 0 fixed, 3 unchanged" in out
    unchanged = {e["cell"]: e["placements"] for e in d["unchanged_findings"]}
    assert unchanged == {"A110": 2, "B120": 1}
    (lines,) = [f for f in new if f["check"] == "unresolvable-pitch"]
    assert lines["bbox_um"] == pytest.approx([30.0, 20.0, 30.0 + A_RIGHT_UM, 21.5], abs=1e-6)


def test_diff_back_gives_the_crowd_as_fixed(revs, capsys):
    """(d) all -> r1: TOP's findings are fixed; A110's first placement and B120
    unchanged."""
    js = revs["tmp"] / "back.json"
    code, out, _ = run_cli(
        capsys, "diff", revs["all"], revs["r1"], "-r", revs["deck"], "--json", js
    )
    back = json.loads(js.read_text())["diff"]
    assert code == 0
    fixed = back["fixed_findings"]
    assert fixed and {e["cell"] for e in fixed} == {"TOP"}
    assert (back["introduced"], back["fixed"], back["unchanged"]) == (
        0,
        sum(e["placements"] for e in fixed),
        2,
    )
    (lines,) = [e for e in fixed if e["check"] == "unresolvable-pitch"]
    assert lines["bbox_um"] == pytest.approx([30.0, 20.0, 30.0 + A_RIGHT_UM, 21.5], abs=1e-6)
    flat = " ".join(out.split())  # the console wraps at 120 columns
    # A110's box centre, (0.4675, 0.75) um in the cell, placed at (30, 20) um.
    line = "fixed: poly unresolvable-pitch pitch 110.0 nm in top cell TOP at (30.4675, 20.75) µm"
    assert line + " (base)" in flat


def test_stale_and_fixed_lines_name_the_cell(revs, capsys):
    _write_baseline(revs, capsys)
    code, out, _ = run_cli(
        capsys, "scan", revs["no_b"], "-r", revs["deck"], "--baseline", revs["base"]
    )
    assert code == 0
    flat = " ".join(out.split())  # the console wraps at 120 columns
    assert "0 new placement(s) shown above, 1 accepted by 1 entry, 1 stale" in flat
    x, y = B_CELL_CENTRE
    # B120's check (bridged or low NILS) is the imaging's business, its cell the gate's.
    place = f"pitch 120.0 nm in cell B120 at ({x:g}, {y:g}) µm"
    assert re.search(r"prune it\): poly [a-z-]+ " + re.escape(place), flat)
    code, out, _ = run_cli(capsys, "diff", revs["r1"], revs["no_b"], "-r", revs["deck"])
    assert code == 0
    flat = " ".join(out.split())
    assert re.search(r"fixed: poly [a-z-]+ " + re.escape(place), flat)
    assert "1 placement, first at (10.69, 1) µm (base)" in flat  # B120 placed at (10, 0)


def _old_format_baseline(revs, capsys) -> None:
    """A baseline of r1 in the per-placement form: no cell keys."""
    data = _write_baseline(revs, capsys)
    for e in data["entries"]:
        for k in ("cell", "cell_path", "cell_bbox_um", "cell_centre_um", "placements"):
            del e[k]
        e["reason"] = "accepted per placement"
    revs["base"].write_text(json.dumps(data))


def test_a_baseline_without_cells_still_gates_per_placement(revs, capsys):
    """(e) Entries with no cell match one placement each, by top-frame place."""
    _old_format_baseline(revs, capsys)
    code, out, _ = _gated(revs, capsys, "r1")
    assert code == 0 and "0 new, 2 accepted, 0 stale" in out
    # A second placement of A110: an entry without a cell accepts one placement.
    code, out, gated = _gated(revs, capsys, "again")
    assert code == 1 and "1 new, 2 accepted, 0 stale" in out
    assert {e["matched"] for e in gated["baseline"]["accepted_entries"]} == {"placement"}
    (f,) = gated["findings"]
    assert f["cell"] == "A110" and f["bbox_um"][0] == pytest.approx(30.0, abs=1e-6)


def test_a_baseline_without_cells_rewritten_names_cells(revs, capsys):
    """(e) Rewritten in place from "again": per cell, the notes kept, and it passes."""
    _old_format_baseline(revs, capsys)
    _gated(revs, capsys, "again", "--write-baseline", revs["base"])
    again = json.loads(revs["base"].read_text())["entries"]
    assert {(e["cell"], e["placements"], e["reason"]) for e in again} == {
        ("A110", 2, "accepted per placement"),
        ("B120", 1, "accepted per placement"),
    }
    code, out, _ = _gated(revs, capsys, "again")
    assert code == 0 and "0 new, 3 accepted, 0 stale" in out
