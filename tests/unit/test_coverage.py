"""Coverage: the share of a layer's edge length some check judged, and the
refusal of a deck layer the layout lacks.

Expected values are arithmetic on the drawn shapes: an array of N lines of
length L and width w has 2N(L + w) of edge, of which the 2NL of long sides
are judged and the 2Nw of line ends are not (2-D).
"""

from __future__ import annotations

import json
import math

import gdstk
import numpy as np
import pytest

from decks import DEMO_DECK
from pitchguard.cli import main
from pitchguard.deck import parse_deck
from pitchguard.errors import LayoutError
from pitchguard.geometry.sites import length_in_region
from pitchguard.run.scan import scan_layout

DECK_1 = """
[exposures.arf]
wavelength_nm = 193.0
na = 0.93
illumination = { shape = "annular", sigma_inner = 0.5, sigma_outer = 0.8 }

[[layers]]
name = "via"
source = "17/0"
exposure = "arf"
field = "dark"
"""


def test_edge_length_inside_tiles_adds_up_to_the_whole():
    """A 1000 nm square's outline, a 45 degree segment and a segment lying on a
    tile border, over a 3 x 3 tiling of 400 nm tiles: each length counted once."""
    sq = np.array([(0, 0), (1000, 0), (1000, 1000), (0, 1000)], dtype=float)
    a = np.concatenate([sq, [(50.0, 50.0), (400.0, 0.0)]])
    b = np.concatenate([np.roll(sq, -1, axis=0), [(950.0, 950.0), (400.0, 1000.0)]])
    whole = 4000.0 + 900.0 * math.sqrt(2.0) + 1000.0
    tiles = [(x, y, x + 400.0, y + 400.0) for x in (0.0, 400.0, 800.0) for y in (0.0, 400.0, 800.0)]
    # The last tiles end at 1200: the square's far sides (x, y = 1000) lie inside.
    assert sum(length_in_region(a, b, t) for t in tiles) == pytest.approx(whole, rel=1e-12)
    assert length_in_region(a, b, (-1e9, -1e9, 1e9, 1e9)) == pytest.approx(whole, rel=1e-12)


def _lines(path, n, length_um, width_um, pitch_um, layer=(17, 0)):
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    for k in range(n):
        x = k * pitch_um
        top.add(gdstk.rectangle((x, 0), (x + width_um, length_um), *layer))
    lib.write_gds(str(path))


def test_a_line_array_is_judged_along_its_sides_and_not_at_its_ends(tmp_path):
    _lines(tmp_path / "lines.gds", 9, 3.0, 0.2, 0.5)
    ex = scan_layout(tmp_path / "lines.gds", parse_deck(DECK_1)).layers[0].extract
    assert ex.edge_nm == pytest.approx(2 * 9 * (3000 + 200))
    assert ex.judged_nm == pytest.approx(2 * 9 * 3000)
    assert ex.coverage == pytest.approx(3000 / 3200)


def _vias(path, places_um, size_um=0.06):
    lib = gdstk.Library()
    top = lib.new_cell("VIAS")
    for x, y in places_um:
        top.add(gdstk.rectangle((x, y), (x + size_um, y + size_um), 17))
    lib.write_gds(str(path))


def test_a_via_array_is_judged_whole(tmp_path, capsys):
    """20 x 20 vias of 60 nm at 110 nm: below the square-array cutoff of this
    annular source, lambda / (NA (1 + sigma_outer)) = 193 / (0.93 x 1.8) =
    115.3 nm (arithmetic): every edge is judged, and the array fails."""
    layout = tmp_path / "vias.gds"
    _vias(layout, [(i * 0.11, j * 0.11) for i in range(20) for j in range(20)])
    deck = tmp_path / "deck.toml"
    deck.write_text(DECK_1)
    report = tmp_path / "r.json"
    code = main(["scan", str(layout), "--rules", str(deck), "--json", str(report)])
    capsys.readouterr()
    data = json.loads(report.read_text())
    layer = data["summary"]["by_layer"]["via"]
    assert (layer["edge_um"], layer["judged_um"], layer["judged_pct"]) == (96.0, 96.0, 100.0)
    assert (layer["arrays"], layer["array_features"], layer["compact_not_in_array"]) == (1, 400, 0)
    assert data["summary"]["notes"] == []
    (f,) = data["findings"]
    assert (f["severity"], f["check"], f["array"]["lattice"]) == (
        "fail",
        "unresolvable-pitch",
        "square",
    )
    assert code == 1


def test_vias_in_pairs_are_judged_on_clips(tmp_path, capsys):
    """Three pairs of vias 200 nm apart, microns from each other, form no array
    (a row needs three); their lattice is unconfirmed, so each via is judged on
    a clip of its own and every edge counts as judged."""
    layout = tmp_path / "vias.gds"
    _vias(layout, [(x + dx, y) for x, y in ((0.0, 0.0), (5.0, 0.0), (0.0, 7.0)) for dx in (0, 0.2)])
    deck = tmp_path / "deck.toml"
    deck.write_text(DECK_1)
    report = tmp_path / "r.json"
    main(["scan", str(layout), "--rules", str(deck), "--json", str(report), "-q"])
    summary = json.loads(report.read_text())["summary"]
    layer = summary["by_layer"]["via"]
    assert (layer["edge_um"], layer["judged_um"], layer["judged_pct"]) == (
        6 * 0.24,
        6 * 0.24,
        100.0,
    )
    assert layer["compact_on_clips"] == 6 and layer["compact_not_in_array"] == 0
    assert summary["notes"] == []


def test_vias_on_their_own_are_judged_on_clips(tmp_path, capsys):
    """Three vias microns apart: each has no other feature of its shape within
    reach and is judged on a clip of its own, so its edges count as judged."""
    layout = tmp_path / "vias.gds"
    _vias(layout, [(0.0, 0.0), (5.0, 0.0), (0.0, 7.0)])
    deck = tmp_path / "deck.toml"
    deck.write_text(DECK_1)
    report = tmp_path / "r.json"
    main(["scan", str(layout), "--rules", str(deck), "--json", str(report), "-q"])
    layer = json.loads(report.read_text())["summary"]["by_layer"]["via"]
    assert (layer["edge_um"], layer["judged_um"], layer["judged_pct"]) == (
        3 * 0.24,
        3 * 0.24,
        100.0,
    )
    assert layer["compact_on_clips"] == 3 and layer["compact_not_in_array"] == 0


def test_a_deck_layer_missing_from_the_layout_is_refused(tmp_path, capsys):
    _lines(tmp_path / "lines.gds", 3, 2.0, 0.1, 0.3, layer=(99, 5))
    with pytest.raises(LayoutError, match=r"metal1 \(17/0\); the file has 99/5"):
        scan_layout(tmp_path / "lines.gds", parse_deck(DECK_1.replace('"via"', '"metal1"')))
    code = main(["scan", str(tmp_path / "lines.gds"), "--rules", str(DEMO_DECK), "-q"])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "active (1/0), poly (7/0), metal1 (17/0)" in err
