"""Line ends in scans: tip-to-tip and tip-to-side gaps judged on 2-D clips, in
GDSII and OASIS, through a turned reference, the same whole and tiled.

Check values (the deck is dry ArF, NA 0.93, conventional sigma 0.8, binary
mask, clear field: lambda/NA = 207.5 nm):

* The Rayleigh distance 0.61 lambda/NA = 127 nm (common practice) is the
  smallest separation two features image apart at; a 20 nm gap (0.1
  lambda/NA) between two line ends, or a 30 nm gap to a line side, is far
  below it and cannot print open: ``line-end-bridged`` fail.
* Gaps of 150 and 200 nm (above the Rayleigh distance) are not bridged.
* ``line_end_pullback_max_nm`` set to 1 nm flags the open tips'
  (nonzero) pullback as risk; the default (0.25 lambda/NA) does not.
"""

from __future__ import annotations

import json
import math

import gdstk
import pytest

from decks import DRY_ARF_DECK
from pitchguard.cli import main

from .conftest import each_placement

W = 0.09  # um
# name, gap (um), kind
GAPS = (
    ("t20", 0.02, "tip"),
    ("t150", 0.15, "tip"),
    ("t200", 0.20, "tip"),
    ("s30", 0.03, "side"),
)
FAR_BELOW = {"t20", "s30"}


def _block(lib) -> gdstk.Cell:
    cell = lib.new_cell("ENDS")
    for k, (_, gap, kind) in enumerate(GAPS):
        y = 2.0 * k
        cell.add(gdstk.rectangle((0, y), (1.0, y + W), layer=7))
        if kind == "tip":
            cell.add(gdstk.rectangle((1.0 + gap, y), (2.0 + gap, y + W), layer=7))
        else:
            cell.add(gdstk.rectangle((1.0 + gap, y - 0.8), (1.0 + gap + W, y + 0.9), layer=7))
    return cell


def _layout(path) -> None:
    """The block as drawn at the origin and turned by 90 degrees at (20, 0) um."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    block = _block(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(block, (0, 0)))
    top.add(gdstk.Reference(block, (20.0, 0), rotation=math.pi / 2))
    if str(path).endswith(".oas"):
        lib.write_oas(str(path))
    else:
        lib.write_gds(str(path))


def _scan(tmp_path, layout, deck_text=DRY_ARF_DECK, *extra) -> tuple[int, dict]:
    deck = tmp_path / "deck.toml"
    deck.write_text(deck_text)
    out = tmp_path / f"r{len(list(tmp_path.iterdir()))}.json"
    code = main(["scan", str(layout), "--rules", str(deck), "--json", str(out), "-q", *extra])
    return code, json.loads(out.read_text())


def _at(findings, x, y):
    return [
        f
        for f in findings
        if f["bbox_um"][0] - 0.05 <= x <= f["bbox_um"][2] + 0.05
        and f["bbox_um"][1] - 0.05 <= y <= f["bbox_um"][3] + 0.05
    ]


def _gap_centre(k: int, gap: float, turned: bool) -> tuple[float, float]:
    x, y = 1.0 + gap / 2, 2.0 * k + W / 2
    return (20.0 - y, x) if turned else (x, y)


@pytest.mark.parametrize("suffix", [".gds", ".oas"])
def test_gaps_far_below_resolution_fail_and_wide_ones_do_not(tmp_path, suffix):
    layout = tmp_path / f"ends{suffix}"
    _layout(layout)
    code, data = _scan(tmp_path, layout, DRY_ARF_DECK, "--untiled")
    findings = each_placement(data)
    # One cell drawn twice, alone: each finding is the cell's, with both placements.
    assert {(f["cell"], f["placements"]) for f in data["findings"]} == {("ENDS", 2)}
    assert len(findings) == data["summary"]["placements"]
    for turned in (False, True):
        for k, (name, gap, kind) in enumerate(GAPS):
            hits = _at(findings, *_gap_centre(k, gap, turned))
            bridged = [f for f in hits if f["check"] == "line-end-bridged"]
            if name in FAR_BELOW:
                assert len(bridged) == 1 and bridged[0]["severity"] == "fail", (name, turned)
                f = bridged[0]
                assert f["space_nm"] == pytest.approx(gap * 1000, abs=0.01)
                assert f["width_nm"] == pytest.approx(W * 1000, abs=0.01)
                want = "tip-to-tip" if kind == "tip" else "tip-to-side"
                assert f["line_end"]["kind"] == want == f["periodicity"]
                assert f["pitch_nm"] is None and f["k1"] is None
            else:
                assert not bridged, (name, turned)
    assert not _at(findings, *_gap_centre(2, 0.2, False))
    layer = data["summary"]["by_layer"]["poly"]
    # Per placement 7 lines and a bar, each with two ends; 3 tip-to-tip gaps
    # (each judged once) and 1 tip-to-side.
    assert layer["line_ends"] == 2 * 8 * 2
    assert layer["line_ends_judged"] == 2 * 4
    assert code == 1


def test_tiled_scan_judges_the_same_line_ends(tmp_path):
    layout = tmp_path / "ends.gds"
    _layout(layout)
    _, whole = _scan(tmp_path, layout, DRY_ARF_DECK, "--untiled")
    _, tiled = _scan(tmp_path, layout, DRY_ARF_DECK, "--tile-um", "1.5", "--jobs", "2")

    def key(data):
        return sorted(
            (f["check"], f["severity"], tuple(round(v, 3) for v in f["bbox_um"]))
            for f in each_placement(data)
        )

    assert key(tiled) == key(whole)
    assert len([k for k in key(whole) if k[0].startswith("line-end")]) == 4
    ends = [d["summary"]["by_layer"]["poly"]["line_ends_judged"] for d in (whole, tiled)]
    assert ends == [8, 8]


def test_the_pullback_limit_is_a_deck_key(tmp_path):
    layout = tmp_path / "ends.gds"
    _layout(layout)
    _, default = _scan(tmp_path, layout, DRY_ARF_DECK, "--untiled")
    assert not [f for f in default["findings"] if f["check"] == "line-end-pullback"]
    strict = DRY_ARF_DECK + "line_end_pullback_max_nm = 1.0\n"
    _, data = _scan(tmp_path, layout, strict, "--untiled")
    pulled = [f for f in each_placement(data) if f["check"] == "line-end-pullback"]
    # The open gaps: 150 and 200 nm tip to tip, in both placements.
    assert len(pulled) == 4
    for f in pulled:
        assert f["severity"] == "risk"
        assert f["line_end"]["pullback_nm"] > 1.0


def test_a_baseline_accepts_its_own_line_end_findings(tmp_path, capsys):
    layout = tmp_path / "ends.gds"
    _layout(layout)
    deck = tmp_path / "deck.toml"
    deck.write_text(DRY_ARF_DECK)
    base = tmp_path / "base.json"
    args = ["scan", str(layout), "--rules", str(deck), "-q"]
    first = tmp_path / "first.json"
    assert main([*args, "--write-baseline", str(base), "--json", str(first)]) == 0
    out = tmp_path / "again.json"
    assert main([*args, "--baseline", str(base), "--json", str(out)]) == 0
    data = json.loads(out.read_text())
    # Every finding accepted: the four ends and the lines' own (low NILS with
    # unpolarised light at NA 0.93).
    found = each_placement(json.loads(first.read_text()))
    assert len([f for f in found if f["check"].startswith("line-end")]) == 4
    assert data["baseline"]["new"] == 0
    assert data["baseline"]["accepted"] == len(found)


def test_grouping_ends_by_neighbourhood_changes_nothing(tmp_path, monkeypatch):
    """Ends with equal neighbourhoods (by hash) are judged once; with every end its
    own group (the plain way) the findings are the same."""
    import numpy as np

    import pitchguard.geometry.rectangles as rect
    import pitchguard.judge.line_ends as le

    layout = tmp_path / "ends.gds"
    _layout(layout)
    _, grouped = _scan(tmp_path, layout, DRY_ARF_DECK, "--untiled")
    monkeypatch.setattr(
        rect, "neighbourhood_hashes", lambda q, hit, n, *a: np.arange(n, dtype=np.uint64)
    )
    le._CACHES.clear()
    _, plain = _scan(tmp_path, layout, DRY_ARF_DECK, "--untiled")

    def key(data):
        return sorted(
            (f["check"], f["severity"], tuple(f["bbox_um"])) for f in each_placement(data)
        )

    assert key(plain) == key(grouped)
    assert len([k for k in key(grouped) if k[0].startswith("line-end")]) == 4
