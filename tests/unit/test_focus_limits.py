"""The default depth-of-focus floor and focus range, and floors the focus
samples cannot measure (deck.py).

Reference: the defocus path difference at the pupil's edge is
n z (1 - cos theta) with sin theta = NA / n (exact, non-paraxial); Rayleigh's
quarter-wave criterion sets it to lambda / 4, so z = lambda / (4 (n - sqrt(n^2 -
NA^2))), which tends to the paraxial n lambda / (2 NA^2) at small NA (common
practice: the high-NA form of the Rayleigh depth of focus, from memory).
"""

from __future__ import annotations

import math

import pytest

from pitchguard.cli.app import main
from pitchguard.deck import load_deck, quarter_wave_focus_nm
from pitchguard.errors import DeckError


def _deck(tmp_path, na: float, n: float, extra: str = "", defaults: str = ""):
    text = f"""
[exposures.e]
wavelength_nm = 193.0
na = {na}
immersion_index = {n}
illumination = {{ shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }}

[layer_defaults]
{defaults}

[[layers]]
name = "m1"
source = "1/0"
exposure = "e"
field = "dark"
{extra}
"""
    path = tmp_path / "d.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _naive(wavelength: float, na: float, n: float) -> float:
    return wavelength / (4.0 * (n - math.sqrt(n * n - na * na)))


@pytest.mark.parametrize(("na", "n"), [(1.35, 1.44), (1.2, 1.44), (0.93, 1.0), (0.75, 1.0)])
def test_default_floor_and_range_are_the_quarter_wave_focus(tmp_path, na, n):
    rule = load_deck(_deck(tmp_path, na, n)).layers[0]
    want = _naive(193.0, na, n)
    assert rule.dof_min_nm == pytest.approx(want, rel=1e-12)
    assert rule.focus_half_range_nm == pytest.approx(want, rel=1e-12)
    assert quarter_wave_focus_nm(rule.exposure) == pytest.approx(want, rel=1e-12)


def test_the_quarter_wave_focus_is_the_paraxial_form_at_low_na_and_tighter_at_high_na(tmp_path):
    """0.5 n lambda / NA^2 at NA 0.1; at NA 0.93 (dry) and 1.35 (water, n 1.44)
    about 32 % and 33 % tighter (arithmetic of the two forms)."""
    for na, n, tighter in ((0.1, 1.0, 0.0), (0.93, 1.0, 0.316), (1.35, 1.44, 0.326)):
        rule = load_deck(_deck(tmp_path, na, n)).layers[0]
        paraxial = 0.5 * n * 193.0 / na**2
        assert 1.0 - rule.dof_min_nm / paraxial == pytest.approx(tighter, abs=3e-3)
    # Water at NA 1.35: 51.4 nm against the paraxial 76.3 nm.
    rule = load_deck(_deck(tmp_path, 1.35, 1.44)).layers[0]
    assert rule.dof_min_nm == pytest.approx(51.39, abs=0.01)


def test_a_floor_beyond_the_sampled_focus_span_is_refused(tmp_path, capsys):
    """NA 1.35, dof_min_nm 160 against a span of 2 x 76 = 152 nm: no depth of focus
    the scan can measure reaches it, so every pitch would be flagged."""
    path = _deck(tmp_path, 1.35, 1.44, "dof_min_nm = 160.0\nfocus_half_range_nm = 76.0")
    with pytest.raises(DeckError) as err:
        load_deck(path)
    msg = str(err.value)
    assert "layers[0].dof_min_nm" in msg and "152" in msg and "160" in msg
    assert main(["rules", "check", str(path)]) == 2
    out = capsys.readouterr()
    assert len(out.err.strip().splitlines()) == 1 and "dof_min_nm" in out.err


def test_the_floor_in_layer_defaults_is_named_there(tmp_path):
    path = _deck(tmp_path, 1.35, 1.44, "focus_half_range_nm = 40.0", "dof_min_nm = 100.0")
    with pytest.raises(DeckError, match=r"layer_defaults\.dof_min_nm"):
        load_deck(path)


def test_a_floor_the_span_reaches_and_one_focus_sample(tmp_path):
    ok = _deck(tmp_path, 1.35, 1.44, "dof_min_nm = 152.0\nfocus_half_range_nm = 76.0")
    assert load_deck(ok).layers[0].focus_span_nm == pytest.approx(152.0)
    one = _deck(tmp_path, 1.35, 1.44, "focus_steps = 1\ndof_min_nm = 1.0")
    with pytest.raises(DeckError, match="cannot be measured"):
        load_deck(one)
    unjudged = _deck(tmp_path, 1.35, 1.44, "focus_steps = 1\nimage_checks = false")
    assert load_deck(unjudged).layers[0].focus_span_nm == 0.0  # no image: nothing to measure


def test_a_depth_of_focus_the_focus_range_limits_reads_at_least(capsys):
    """The demo deck's poly layer (dry ArF, NA 0.93: quarter-wave focus 76.3 nm,
    so 152.6 nm of focus are sampled; unpolarised light): at pitch 150 nm every
    focus sample holds the window, so the depth of focus is at least the span;
    at 140 nm it is inside the range and reads as it is."""
    import json

    from decks import DEMO_DECK

    span = 2 * _naive(193.0, 0.93, 1.0)
    for pitch, cd, limited in ((150, 75, True), (140, 70, False)):
        args = ["probe", "--rules", str(DEMO_DECK), "--layer", "poly"]
        assert main([*args, "--pitch", str(pitch), "--cd", str(cd), "--json"]) in (0, 1)
        d = json.loads(capsys.readouterr().out)
        assert d["depth_of_focus_at_least"] is limited
        assert (abs(d["depth_of_focus_nm"] - span) < 0.5) is limited
        main([*args, "--pitch", str(pitch), "--cd", str(cd)])
        text = capsys.readouterr().out
        assert (f">= {span:.0f} nm" in text) is limited
