"""An isolated line (no neighbour within the interaction range) has no pitch
and no k1: every report calls it isolated and never prints "inf".

The line: 40 nm wide, 3 um long, alone, on the dry ArF deck of decks.py
(NA 0.93, conventional sigma 0.8); its image is too weak (low NILS), so it
is a finding.  Expected texts follow from the definitions (pitch = width +
space, k1 = (pitch / 2) NA / lambda): with no space there is neither.
"""

from __future__ import annotations

import json
import math
import re

import gdstk
import pytest

from decks import DRY_ARF_DECK
from pitchguard.deck import load_deck
from pitchguard.judge.per_cell import cell_findings
from pitchguard.outputs.html.page import render_html
from pitchguard.outputs.junit import to_junit
from pitchguard.outputs.markers import marker_label
from pitchguard.outputs.sarif import to_sarif
from pitchguard.outputs.texts import describe, finding_line
from pitchguard.run.scan import scan_layout

INF = re.compile(r"pitch inf|k1 inf|infnm|k1=inf|p=inf|\binf nm|>inf<")


@pytest.fixture(scope="module")
def isolated(tmp_path_factory):
    folder = tmp_path_factory.mktemp("isolated")
    lib = gdstk.Library()
    lib.new_cell("TOP").add(gdstk.rectangle((0, 0), (0.04, 3.0), layer=7))
    gds = folder / "iso.gds"
    lib.write_gds(str(gds))
    deck_path = folder / "dry.toml"
    deck_path.write_text(DRY_ARF_DECK)
    deck = load_deck(deck_path)
    result = scan_layout(gds, deck, cells=True)
    assert len(result.findings) == 1
    f = result.findings[0]
    assert not math.isfinite(f.pitch_nm) and not math.isfinite(f.k1)
    return result, deck, gds


def test_every_text_calls_the_line_isolated(isolated):
    result, deck, gds = isolated
    f = result.findings[0]
    texts = {
        "marker": marker_label(f),
        "sentence": describe(f),
        "line": finding_line(f),
        "sarif": json.dumps(to_sarif(result, deck, gds, "fail")),
        "junit": to_junit(result, deck, "fail"),
        "html": render_html(result, deck, "fail"),
    }
    for name, text in texts.items():
        assert "isolated" in text, name
        assert not INF.search(text), (name, INF.search(text))
    assert marker_label(f) == f"{f.severity} {f.check} poly isolated w=40.0nm"


def test_the_json_gives_no_pitch_and_no_k1(isolated):
    from pitchguard.outputs.json_report import entry_to_dict

    (entry,) = cell_findings(isolated[0])
    row = entry_to_dict(entry)
    assert row["pitch_nm"] is None and row["k1"] is None and row["space_nm"] is None


def test_an_unresolvable_finding_shows_no_contrast_of_its_pitch():
    """Only the 0th order passes (the demo chip's 70 nm metal1 lines, below the
    73.3 nm its dipole images): the pitch cannot modulate the image, so the
    card gives no contrast for it."""
    from decks import DEMO_DECK, SAMPLE_GDS
    from pitchguard.outputs.html.card import _contrast_html

    result = scan_layout(SAMPLE_GDS, load_deck(DEMO_DECK))
    unresolvable = [f for f in result.findings if f.check == "unresolvable-pitch"]
    resolved = [f for f in result.findings if f.check == "low-nils"]
    assert unresolvable and resolved
    for f in unresolvable:
        assert _contrast_html(f).startswith("none from the pitch")
    for f in resolved:
        assert _contrast_html(f) == f"{f.contrast:.3f}"
