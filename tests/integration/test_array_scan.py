"""Arrays of contacts and vias in scans: found through the hierarchy, judged by
their lattice, the same whole and tiled, in GDSII and OASIS.

Check values (arithmetic on published formulas):

* The deck is dry ArF, NA 0.93, conventional sigma 0.8, binary mask.  The
  smallest pitch it images along a lattice direction is lambda / (NA (1 +
  sigma)) = 193 / (0.93 x 1.8) = 115.3 nm; a square lattice's first orders
  (1, 0) and (0, 1) sit at 1 / p, so a square array below 115.3 nm images
  no 2-D pattern (tests/unit/test_lattice_orders.py holds the 2-D cases).
* 60 nm holes at 110 nm, in any orientation, and a 110 x 300 nm rectangular
  lattice (its 110 nm direction lost: the holes merge into lines) fail.
* 150 nm holes at 300 nm (2.6 times the cutoff) are relaxed: no risk or fail.
"""

from __future__ import annotations

import json
import math

import gdstk
import numpy as np
import pytest

from decks import DEMO_DECK, DRY_ARF_CUTOFF_NM, DRY_ARF_DECK
from pitchguard.cli import main
from pitchguard.deck import load_deck
from pitchguard.optics.aerial import mask_amplitudes
from pitchguard.optics.aerial2d import cell_spectra, coherent_systems_2d, exposure_orders
from pitchguard.optics.compact_clips import clip_window, feature_cell

DECK = DRY_ARF_DECK.replace('"clear"', '"dark"')

# name, hole (um), spacing (um), rotation (deg), origin (um), columns, rows
ARRAYS = (
    ("square", 0.06, (0.11, 0.11), 0.0, (0.0, 0.0), 20, 20),
    ("rectangular", 0.06, (0.11, 0.30), 0.0, (0.0, 8.0), 30, 10),
    ("turned", 0.06, (0.11, 0.11), 30.0, (12.0, 0.0), 15, 15),
    ("relaxed", 0.15, (0.30, 0.30), 0.0, (5.0, 12.0), 12, 12),
    ("relaxed-turned", 0.15, (0.30, 0.30), 45.0, (20.0, 12.0), 8, 8),
)
BELOW = {"square", "rectangular", "turned"}


def _layout(path) -> None:
    """Each array as one arrayed reference of a one-hole cell."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell("TOP")
    for name, hole, (sx, sy), rot, origin, cols, rows in ARRAYS:
        cell = lib.new_cell(f"HOLE_{name}")
        cell.add(gdstk.rectangle((-hole / 2, -hole / 2), (hole / 2, hole / 2), layer=7))
        top.add(
            gdstk.Reference(
                cell, origin, rotation=math.radians(rot), columns=cols, rows=rows, spacing=(sx, sy)
            )
        )
    if str(path).endswith(".oas"):
        lib.write_oas(str(path))
    else:
        lib.write_gds(str(path))


def _scan(tmp_path, layout, *extra) -> tuple[int, dict]:
    deck = tmp_path / "deck.toml"
    deck.write_text(DECK)
    out = tmp_path / f"r{len(list(tmp_path.iterdir()))}.json"
    code = main(["scan", str(layout), "--rules", str(deck), "--json", str(out), "-q", *extra])
    return code, json.loads(out.read_text())


def _array_at(findings, origin_um):
    """The finding whose box holds the array's first hole."""
    x, y = origin_um
    hits = [
        f
        for f in findings
        if f["bbox_um"][0] - 0.2 <= x <= f["bbox_um"][2] + 0.2
        and f["bbox_um"][1] - 0.2 <= y <= f["bbox_um"][3] + 0.2
    ]
    return hits


@pytest.mark.parametrize("suffix", [".gds", ".oas"])
def test_arrays_below_the_cutoff_fail_and_relaxed_ones_pass(tmp_path, suffix):
    layout = tmp_path / f"holes{suffix}"
    _layout(layout)
    code, data = _scan(tmp_path, layout, "--untiled")
    findings = data["findings"]
    for name, _, _, _, origin, cols, rows in ARRAYS:
        hits = _array_at(findings, origin)
        if name in BELOW:
            assert len(hits) == 1, name
            f = hits[0]
            assert (f["severity"], f["check"]) == ("fail", "unresolvable-pitch"), name
            assert f["array"]["features"] == cols * rows
            assert f["cutoff_pitch_nm"] == pytest.approx(DRY_ARF_CUTOFF_NM, abs=0.01)
            assert min(f["array"]["columns"], f["array"]["rows"]) == min(cols, rows)
        else:
            assert all(f["severity"] not in ("fail", "risk") for f in hits), name
    assert data["findings"][0]["array"]["lattice"] in ("square", "rectangular")
    kinds = {f["array"]["lattice"] for f in findings if f["severity"] == "fail"}
    assert kinds == {"square", "rectangular"}
    layer = data["summary"]["by_layer"]["poly"]
    assert layer["arrays"] == len(ARRAYS)
    assert layer["compact_not_in_array"] == 0
    assert layer["judged_pct"] == 100.0
    assert code == 1


def test_tiled_scan_finds_the_same_arrays_as_the_whole_one(tmp_path):
    """Tiles of 2.5 um cut every array; reused tiles (the interiors of the
    square arrays) are judged from shifted lattice sites."""
    layout = tmp_path / "holes.gds"
    _layout(layout)
    _, whole = _scan(tmp_path, layout, "--untiled")
    for extra in (("--tile-um", "2.5"), ("--tile-um", "2.5", "--jobs", "2")):
        _, tiled = _scan(tmp_path, layout, *extra)
        assert tiled["summary"]["tiling"]["tiles"] > 10
        assert tiled["findings"] == whole["findings"]
        for key in ("arrays", "array_features", "judged_um", "edge_um"):
            assert (
                tiled["summary"]["by_layer"]["poly"][key]
                == whole["summary"]["by_layer"]["poly"][key]
            )


def _pairs(path, pairs) -> None:
    """Pairs of square holes on layer 7: ``((x, y), dy, side)`` um, the second hole dy
    above the first."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell("TOP")
    for (x, y), dy, side in pairs:
        h = side / 2
        for yy in (y, y + dy):
            top.add(gdstk.rectangle((x - h, yy - h), (x + h, yy + h), layer=7))
    lib.write_gds(str(path))


def test_pairs_of_holes_are_judged_on_clips_whole_and_tiled(tmp_path):
    """Two 60 nm holes 90 nm apart (centre to centre) are closer than both the
    Rayleigh (0.61 lambda / NA = 126.6 nm) and the Sparrow (0.47 lambda / NA =
    97.5 nm) two-point limits (from memory, any optics text): they print as
    one, a ``features-bridged`` fail on each hole's clip (context ``group``).
    150 nm holes 600 nm apart (almost 3 lambda / NA; the size of the relaxed
    array above) print apart, with no fail or risk."""
    layout = tmp_path / "pairs.gds"
    _pairs(layout, [((0.0, 0.0), 0.09, 0.06), ((5.0, 0.0), 0.6, 0.15)])
    code, whole = _scan(tmp_path, layout, "--untiled")
    bridged = [f for f in whole["findings"] if f["check"] == "features-bridged"]
    assert len(bridged) == 2
    assert {f["periodicity"] for f in bridged} == {"group"}
    assert all(f["bbox_um"][2] < 1.0 for f in bridged)  # the close pair only
    assert len(whole["findings"]) == 2  # nothing on the far pair
    layer = whole["summary"]["by_layer"]["poly"]
    assert layer["compact_on_clips"] == 4 and layer["compact_not_in_array"] == 0
    assert code == 1
    _, tiled = _scan(tmp_path, layout, "--tile-um", "2.5")
    assert tiled["summary"]["tiling"]["tiles"] > 1
    assert tiled["findings"] == whole["findings"]


def _via1_deck(tmp_path):
    """The demo deck's via1 layer alone (ArF immersion, annular, 6 % attenuated PSM,
    dark field; the other layers would be missing from the layout)."""
    head, *layers = DEMO_DECK.read_text().split("[[layers]]")
    deck = tmp_path / "via1.toml"
    deck.write_text(head + "[[layers]]" + next(b for b in layers if 'name = "via1"' in b))
    return deck


def test_an_arrays_last_rows_are_judged_on_clips(tmp_path):
    """70 nm holes at 200 nm, 10 x 10, on the demo via1 exposure.  The unit cell (the
    array's interior) gives NILS 1.12, a risk.  Holes on the array's outer ring
    have fewer neighbours sending light their way and image worse (common
    practice: OPC biases an array's last rows): their clips give NILS below 1, a
    fail, reported once for the array.  The ring is what a clip window (half
    side 214 nm, under 2 pitches) sees: 10^2 - 8^2 = 36 holes.  The reported NILS
    is the smallest of the ring's clips by the full Hopkins sum (every coherent
    system, no truncation; itself held to Abbe in tests/unit/test_image2d.py)."""
    w, p, n = 0.07, 0.2, 10
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    hole = lib.new_cell("HOLE")
    hole.add(gdstk.rectangle((-w / 2, -w / 2), (w / 2, w / 2), layer=18))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(hole, (0, 0), columns=n, rows=n, spacing=(p, p)))
    layout = tmp_path / "ring.gds"
    lib.write_gds(str(layout))
    deck = _via1_deck(tmp_path)
    runs = []
    for extra in (("--untiled",), ("--tile-um", "1")):
        out = tmp_path / f"r{len(runs)}.json"
        main(["scan", str(layout), "--rules", str(deck), "--json", str(out), "-q", *extra])
        runs.append(json.loads(out.read_text()))
    assert runs[0]["findings"] == runs[1]["findings"]
    by_kind = {f["periodicity"]: f for f in runs[0]["findings"]}
    assert set(by_kind) == {"square array", "group"}
    array, ring = by_kind["square array"], by_kind["group"]
    assert (array["check"], array["severity"]) == ("low-nils", "risk")
    assert (ring["check"], ring["severity"]) == ("low-nils", "fail")
    assert ring["sites"] == n * n - (n - 2) ** 2
    assert runs[0]["summary"]["by_layer"]["via1"]["array_edge_clips"] == 36
    # The ring's distinct clips (by symmetry: position 0..4 along a side), exact NILS.
    rule = load_deck(deck).layers[0]
    half = clip_window(rule)
    e = rule.exposure
    wn, pn = w * 1000, p * 1000
    nils = []
    for k in range(5):
        pts = [(i * pn, j * pn) for i in range(n) for j in range(n)]
        rects = np.array([(x - wn / 2, y - wn / 2, x + wn / 2, y + wn / 2) for x, y in pts])
        rects -= np.array([k * pn, 0.0, k * pn, 0.0])  # the hole k along the bottom side
        keep = (
            (rects[:, 0] < half)
            & (rects[:, 2] > -half)
            & (rects[:, 1] < half)
            & (rects[:, 3] > -half)
        )
        cell = feature_cell(rule, np.clip(rects[keep], -half, half))
        orders = exposure_orders(e, cell.px_nm, cell.py_nm)
        spec = cell_spectra([cell], orders, *mask_amplitudes(e, rule.field))
        i_e, d_x, d_y = coherent_systems_2d(e, cell.px_nm, cell.py_nm, 0.0).at(
            spec, [-wn / 2, wn / 2, 0, 0], [0, 0, -wn / 2, wn / 2]
        )
        slopes = np.abs(np.concatenate([d_x[0, :2], d_y[0, 2:]]))
        nils.append(float(np.min(wn * slopes / i_e[0])))
    assert ring["nils"] == pytest.approx(min(nils), rel=0.01)
    assert max(nils) < array["nils"]  # every ring hole images worse than the interior
