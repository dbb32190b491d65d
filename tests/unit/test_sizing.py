"""Judging as OPC would size it (deck key sizing = "retarget", optics/sizing.py).

References outside the project:

* The definition of the retargeting (domain notes, common practice for a 1-D
  correction): bias each feature so that it prints its drawn CD at the anchored
  dose.  For an ideal grating that bias is found here by brute force, without
  the module: gratings of CD + 2b for b on a 0.02 nm grid, the CD each prints at
  the anchored threshold, the b where it meets the drawn CD.
* Geometry: a bias moves a feature's two edges apart by 2b and leaves edges
  where the cut is clipped in place; it may not close a space.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from pitchguard.cli import main
from pitchguard.deck import parse_deck
from pitchguard.errors import DeckError
from pitchguard.judge.gratings import grating
from pitchguard.optics.aerial import grating_spectrum
from pitchguard.optics.cut_images import (
    _grating_frame,
    anchor_threshold,
    coherent_systems,
    grating_metrics,
)
from pitchguard.optics.resist import SIZED, UNSIZED, cd_of_thresholds
from pitchguard.optics.sizing import GAP_NM, bias_limits, biased_edges

# ArF immersion, x dipole, y light, 6 % attenuated PSM, dark field, anchored at
# 40 nm trenches on an 80 nm pitch: the demo deck's metal1 (an invented process).
DECK = """
[exposures.e]
wavelength_nm = 193.0
na = 1.35
immersion_index = 1.44
illumination = {{ shape = "dipole", sigma_inner = 0.70, sigma_outer = 0.95, opening_deg = 35.0, axis = "x" }}
mask = {{ kind = "attenuated", transmission = 0.06 }}
polarization = "y"

[[layers]]
name = "m"
source = "1/0"
exposure = "e"
field = "dark"
anchor = {{ pitch_nm = 80.0, cd_nm = 40.0 }}
{extra}
"""


def _rule(extra='sizing = "retarget"'):
    return parse_deck(DECK.format(extra=extra)).layers[0]


def _brute_force_bias(rule, pitch, cd):
    """The bias (per edge) at which a grating of CD + 2b prints CD, by scanning b."""
    e, n_max, samples, x, order, feat, bg = _grating_frame(rule, pitch)
    t = anchor_threshold(rule)
    systems = coherent_systems(e, 0.0, pitch, n_max, 0.0)
    bs = np.arange(-8.0, 12.0, 0.02)
    printed = []
    for b in bs:
        spec = grating_spectrum(pitch, cd + 2 * b, feat, bg, n_max)
        img = systems.image(spec, samples)[0, order]
        printed.append(cd_of_thresholds(x, img, 0.0, -pitch / 2, pitch / 2, True, np.array([t]))[0])
    printed = np.array(printed)
    k = int(np.flatnonzero(np.isfinite(printed) & (printed >= cd))[0])
    return float(np.interp(cd, printed[k - 1 : k + 1], bs[k - 1 : k + 1]))


@pytest.mark.parametrize("pitch", [100.0, 140.0, 250.0])
def test_a_sized_grating_prints_on_size_with_the_brute_force_bias(pitch):
    rule = _rule()
    m = grating_metrics(rule, pitch, 40.0)[0]
    assert m.sizing == SIZED
    assert m.cd_nm == pytest.approx(40.0, abs=0.05)
    assert m.bias_nm == pytest.approx(_brute_force_bias(rule, pitch, 40.0), abs=0.05)
    # As drawn the same grating prints off size at the anchored dose.
    drawn = grating_metrics(_rule(""), pitch, 40.0)[0]
    assert drawn.sizing == 0 and abs(drawn.cd_nm - 40.0) > 2.0


def test_the_anchor_itself_needs_no_bias():
    m = grating_metrics(_rule(), 80.0, 40.0)[0]
    assert m.bias_nm == 0.0 and m.cd_nm == pytest.approx(40.0, abs=0.05)


def test_sizing_judges_what_is_left_after_the_correction():
    # Pre-correction noise goes (a trench that does not print as drawn, a CD
    # error), the image's own limits stay (NILS, depth of focus).
    sized, drawn = grating(_rule(), 140.0, 40.0), grating(_rule(""), 140.0, 40.0)
    assert "feature-not-printed" in {v.check for v in drawn.violations}
    checks = {v.check for v in sized.violations}
    assert "feature-not-printed" not in checks and "cd-error" not in checks
    assert "low-nils" in checks


def test_a_bias_beyond_the_limit_is_a_risk_and_one_that_closes_the_space_a_fail():
    r = grating(_rule('sizing = "retarget"\nbias_max_nm = 1.0'), 140.0, 40.0)
    v = {x.check: x for x in r.violations}["sizing-bias"]
    assert v.severity == "risk" and v.value > 1.0
    # 40 nm trenches with 4 nm spaces: no bias prints them on size at the anchored
    # dose (the image of a 44 nm pitch holds no first order), and growth stops
    # short of closing the space.
    m = grating_metrics(_rule(), 44.0, 40.0)[0]
    assert m.sizing == UNSIZED and m.bias_nm <= (4.0 - GAP_NM) + 1e-9
    checks = {(v.check, v.severity) for v in grating(_rule(), 44.0, 40.0).violations}
    assert ("sizing-bias", "fail") in checks


def test_bias_moves_feature_edges_only_inside_the_cut():
    # A cut of two features, the second clipped at the cut's reach (100 nm).
    edges = np.array([[-150.0, -30.0, 30.0, 70.0, 100.0, 150.0]])
    material = np.array([[False, True, False, True, False]])
    reach = np.array([100.0])
    moved = biased_edges(edges, material, np.array([3.0]), reach)
    np.testing.assert_allclose(moved, [[-150.0, -33.0, 33.0, 67.0, 100.0, 150.0]])
    lo, hi = bias_limits(edges, material, reach)
    # The 40 nm space between the features has both edges moving: 2b < 40 - gap.
    assert hi[0] == pytest.approx((40.0 - GAP_NM) / 2)
    # The 30 nm clipped feature has one moving edge: -b < 30 - gap.
    assert lo[0] == pytest.approx(-(30.0 - GAP_NM))


def test_retargeting_needs_an_anchored_dose():
    with pytest.raises(DeckError) as err:
        parse_deck(DECK.format(extra='sizing = "retarget"').replace("anchor = ", "# "))
    assert "layers[0].sizing" in str(err.value) and "\n" not in str(err.value)


def test_probe_and_sweep_show_the_drawn_and_the_sized_verdicts(tmp_path, capsys):
    deck = tmp_path / "d.toml"
    deck.write_text(DECK.format(extra='sizing = "retarget"'))
    assert main(["probe", "-r", str(deck), "--layer", "m", "--pitch", "140", "--cd", "40"]) == 0
    text = capsys.readouterr().out
    assert "mask bias (sized)" in text and "as drawn (no bias): fail (feature-not-printed)" in text
    main(["probe", "-r", str(deck), "--layer", "m", "--pitch", "140", "--cd", "40", "--json"])
    obj = json.loads(capsys.readouterr().out)
    assert obj["sizing"] == "retarget" and obj["bias_nm"] > 0
    assert obj["as_drawn"]["severity"] == "fail" and obj["as_drawn"]["bias_nm"] is None
    out = tmp_path / "s.json"
    args = ["sweep", "-r", str(deck), "--layer", "m", "--pitches", "80:160:20", "--json", str(out)]
    assert main(args) == 0
    text = capsys.readouterr().out
    assert "as drawn" in text and "bias nm" in text
    sweep = json.loads(out.read_text())
    assert len(sweep["pitches"]) == len(sweep["as_drawn"]["pitches"]) == 5
