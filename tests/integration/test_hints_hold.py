"""A fix hint holds on the layout it is about: redrawn as the hint says, the
flagged line passes.

The oracle is the scan itself, not the hint's own search: each layout is
scanned, every hint that names a pitch is applied to the drawing (every space
narrower than the hinted one widened to it, widths kept), and the line the
finding was judged on is scanned again, alone, in the redrawn layout.  The
neighbourhoods are met1 lines of the SkyWater 130 nm cells in
tests/fixtures/sky130/ (140 nm lines at 140 nm spaces, the layer's minimum
width and space, from memory of the sky130 rules; one line between an array
and a wider line, as in the cells' transistor fingers), under the weak KrF
deck of tests/decks.py, which flags them.
"""

from __future__ import annotations

import re

import gdstk
import pytest

from decks import SKY130_QUADRUPOLE_DECK, SKY130_WEAK_DECK, with_optional_layers
from pitchguard.deck import parse_deck
from pitchguard.run.scan import scan_layout

HINT = re.compile(r"pitch ([0-9.]+) nm \(space ([0-9.]+) nm\) passes every limit")
MET1 = (68, 20)
HEIGHT_UM = 6.0

# (line widths, spaces between them), nm.
NEIGHBOURHOODS = {
    "array 140/140": ([140] * 9, [140] * 8),
    "array 160/140": ([160] * 9, [140] * 8),
    # The ideal grating at this pitch (330 nm) falls just short (NILS 1.97
    # against 2.0); one grid step of the hint search away (336.6 nm) it passes.
    "array 140/190": ([140] * 9, [190] * 8),
    "array beside a wider line": ([140] * 5 + [270], [140] * 4 + [170]),
    "array beside a wide plate": ([140] * 6 + [2000], [140] * 5 + [170]),
}


def _draw(path, widths, spaces) -> list[tuple[float, float]]:
    """Vertical lines left to right; returns each line's (x0, x1) in nm."""
    lib = gdstk.Library()
    cell = lib.new_cell("LINES")
    x, out = 0.0, []
    for k, w in enumerate(widths):
        cell.add(gdstk.rectangle((x / 1000, 0), ((x + w) / 1000, HEIGHT_UM), *MET1))
        out.append((x, x + w))
        x += w + (spaces[k] if k < len(spaces) else 0.0)
    lib.write_gds(str(path))
    return out


def _line_at(lines, x_nm: float) -> int:
    """The line with an edge at ``x_nm`` (a finding's cut origin lies on its site's edge)."""
    for k, (x0, x1) in enumerate(lines):
        if min(abs(x0 - x_nm), abs(x1 - x_nm)) < 1.0:
            return k
    raise AssertionError(f"no line has an edge at x = {x_nm}")


@pytest.mark.parametrize("name", sorted(NEIGHBOURHOODS))
def test_a_pitch_hint_applied_to_the_drawing_makes_the_line_pass(name, tmp_path):
    deck = parse_deck(with_optional_layers(SKY130_WEAK_DECK))
    widths, spaces = NEIGHBOURHOODS[name]
    lines = _draw(tmp_path / "before.gds", widths, spaces)
    findings = scan_layout(tmp_path / "before.gds", deck).findings
    hinted = [(f, m) for f in findings if (m := HINT.search(f.hint))]
    assert hinted, [f.hint for f in findings]  # the weak deck flags these and hints a pitch
    for f, m in hinted:
        k = _line_at(lines, f.cut_origin_nm[0])
        assert widths[k] == f.width_nm
        new_space = float(m.group(2))
        assert float(m.group(1)) > f.pitch_nm
        wider = [max(s, new_space) for s in spaces]
        after = _draw(tmp_path / "after.gds", widths, wider)
        x0, x1 = after[k]
        # Only the flagged line's own edges: its sites are all that is judged.
        box_um = ((x0 - 1) / 1000, 0.0, (x1 + 1) / 1000, HEIGHT_UM)
        again = scan_layout(tmp_path / "after.gds", deck, region_um=box_um).findings
        assert again == [], (name, f.hint, [(g.check, g.severity, g.pitch_nm) for g in again])


def test_a_line_failing_where_the_even_grating_passes_is_blamed_on_its_neighbourhood(tmp_path):
    """A 260 nm met1 line 140 nm from a 480 nm one, nothing else near (as in
    the sky130_fd_sc_hd decap cells), under the quadrupole deck: the pair
    images poorly, yet the ideal grating of 260 nm lines at that pitch
    (400 nm) breaks no limit (judged through the same imaging, as `pitchguard
    probe` does).  The hint must blame the neighbourhood rather than name a
    pitch the line already has."""
    from pitchguard.judge.checks import violations
    from pitchguard.optics.cut_images import grating_metrics
    from pitchguard.optics.orders import analyse_pitch

    deck = parse_deck(with_optional_layers(SKY130_QUADRUPOLE_DECK))
    rule = next(r for r in deck.layers if r.name == "met1")
    m, _, _ = grating_metrics(rule, 400.0, 260.0, 0.0)
    assert violations(rule, analyse_pitch(rule.exposure, 400.0, 90.0), m, 400.0) == []
    lines = _draw(tmp_path / "pair.gds", [260, 480], [140])
    findings = scan_layout(tmp_path / "pair.gds", deck).findings
    assert findings, "the pair is expected to be flagged"
    for f in findings:
        assert _line_at(lines, f.cut_origin_nm[0]) == 0
        assert (f.width_nm, f.pitch_nm) == (260.0, 400.0)
        assert "what fails here is the neighbourhood" in f.hint, f.hint
        assert not HINT.search(f.hint)
