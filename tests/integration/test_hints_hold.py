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

from decks import SKY130_WEAK_DECK
from pitchguard.deck import parse_deck
from pitchguard.run.scan import scan_layout

HINT = re.compile(r"pitch ([0-9.]+) nm \(space ([0-9.]+) nm\) passes every limit")
MET1 = (68, 20)
HEIGHT_UM = 6.0

# (line widths, spaces between them), nm.
NEIGHBOURHOODS = {
    "array 140/140": ([140] * 9, [140] * 8),
    "array 160/140": ([160] * 9, [140] * 8),
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
    deck = parse_deck(SKY130_WEAK_DECK)
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
