"""Side-lobe printing (optics/side_lobes.py and the side-lobe-printing check).

The printing case comes from a published kind of failure of attenuated
phase-shift masks: light through the 6 % background of neighbouring openings
adds up mid-way between them.  Here: 193 nm, NA 0.85, conventional sigma 0.3,
130 nm openings at 320 nm pitch on a dark field.  The intensity mid-way
between openings is 1.06x the dose-to-size threshold with a 6 % mask and
3.45x with 20 % (both computed by an independent implementation of the same
conventions, as reported to the project: scalar light); with a binary mask it is
far below.
The profile tests use hand-made images whose answer follows from the rule
(printing cut off from both the feature and its neighbour).
"""

from __future__ import annotations

import numpy as np
import pytest

from pitchguard.deck import parse_deck
from pitchguard.judge.checks import violations
from pitchguard.optics.cut_images import grating_metrics
from pitchguard.optics.orders import analyse_pitch
from pitchguard.optics.side_lobes import NOMINAL, NONE, WINDOW, detached, side_lobe_codes

DECK = """
[exposures.e]
wavelength_nm = 193.0
na = 0.85
illumination = {{ shape = "conventional", sigma = 0.3 }}
mask = {mask}
polarization = "{light}"

[[layers]]
name = "contacts"
source = "1/0"
exposure = "e"
field = "dark"
"""


@pytest.mark.parametrize(
    ("mask", "code", "ratio"),
    [
        ('{ kind = "attenuated", transmission = 0.06 }', NOMINAL, 1.06),
        ('{ kind = "attenuated", transmission = 0.20 }', NOMINAL, 3.45),
        ('{ kind = "binary" }', NONE, None),
    ],
)
def test_the_mid_way_lobe_of_attenuated_masks_is_flagged(mask, code, ratio):
    rule = parse_deck(DECK.format(mask=mask, light="scalar")).layers[0]  # as computed
    m, x, image = grating_metrics(rule, 320.0, 130.0)
    assert m.side_lobe == code
    if ratio is not None:
        assert m.side_lobe_depth == pytest.approx(ratio, abs=0.01)
        mid = float(np.interp(160.0, x, image))  # mid-way between openings
        assert mid / m.threshold == pytest.approx(ratio, abs=0.01)
        vs = violations(rule, analyse_pitch(rule.exposure, 320.0, 0.0), m, 320.0)
        assert ("side-lobe-printing", "fail") in [(v.check, v.severity) for v in vs]


def test_vector_light_weakens_the_lobe_only_through_its_tm_part():
    # The lobe is the +-1st orders' interference (the image's 2nd harmonic).  TE light
    # (E along the lines: "y" for a pitch along x) interferes fully, as the scalar
    # model; TM light at sin(theta) = lambda / p = 0.60 only with cos(2 theta) =
    # 0.28 (standard two-beam interference, see optics/polarization.py), so
    # unpolarised light prints a weaker lobe.
    mask = '{ kind = "attenuated", transmission = 0.20 }'
    depth = {}
    for light in ("scalar", "y", "unpolarized"):
        rule = parse_deck(DECK.format(mask=mask, light=light)).layers[0]
        depth[light] = grating_metrics(rule, 320.0, 130.0, 0.0)[0].side_lobe_depth
    assert depth["y"] == pytest.approx(depth["scalar"], rel=0.03)
    assert 1.0 < depth["unpolarized"] < depth["scalar"] - 0.5


X = np.linspace(-500.0, 500.0, 1001)
FEATURE = (np.array([-50.0]), np.array([50.0]))
SEARCH = (np.array([-200.0]), np.array([200.0]))  # neighbours' edges at -350 and 350


def _opening_profile(bumps):
    """Bright where openings are drawn (|x| <= 50, |x| >= 350), dark between, plus
    Gaussian bumps ``(centre, height)``."""
    img = np.where((np.abs(X) <= 50) | (np.abs(X) >= 350), 1.0, 0.05)
    for c, h in bumps:
        img = img + h * np.exp(-(((X - c) / 15.0) ** 2))
    return img[None, :]


def _depth(img, t=0.5, reach=np.inf):
    return detached(X, img, *FEATURE, *SEARCH, True, np.array([t]), np.array([reach]))[0]


def test_a_bump_apart_from_both_features_prints_as_a_lobe():
    assert _depth(_opening_profile([(200.0, 0.6)])) == pytest.approx(0.65 / 0.5, rel=0.01)
    assert _depth(_opening_profile([(200.0, 0.3)])) == 0.0  # below the threshold


def test_printing_that_runs_in_from_a_feature_is_not_a_lobe():
    img = _opening_profile([])
    img[0, (X > 50) & (X < 120)] = 0.9  # the feature prints wider
    img[0, (X > 280) & (X < 350)] = 0.9  # and so does the neighbour
    img[0, (X > -350) & (X < -50)] = 0.9  # a bridge to the left neighbour
    assert _depth(img) == 0.0


def test_beyond_the_reach_nothing_is_looked_at():
    img = _opening_profile([(300.0, 0.6)])
    assert _depth(img) > 0
    assert _depth(img, reach=250.0) == 0.0


def test_the_window_flags_what_prints_only_at_the_dose_edge():
    """A lobe at 0.49 of the open frame against a threshold of 0.5: it prints once
    the dose is 2.5 % up (threshold 0.5 / 1.025 = 0.488), the edge of a 5 %
    latitude window."""
    img = _opening_profile([(200.0, 0.44)])  # 0.05 + 0.44 = 0.49 at the peak
    stack = np.repeat(img[:, None, :], 3, axis=1)  # three focus samples alike
    code, depth = side_lobe_codes(
        X, stack, np.array([-50.0, 0.0, 50.0]), *FEATURE, *SEARCH, True,
        np.array([0.5]), 5.0, np.array([np.inf]),
    )  # fmt: skip
    assert code[0] == WINDOW and depth[0] == pytest.approx(0.49 * 1.025 / 0.5, rel=1e-3)
