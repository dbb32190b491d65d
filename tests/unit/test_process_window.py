"""Exposure latitude and depth of focus against brute-force references.

The definitions (common practice): exposure latitude is the dose range keeping
the printed CD within +-``cd_tolerance_pct`` of the drawn CD, in % of the
dose-to-size; depth of focus is the longest focus range over which a dose
range of ``el_min_pct`` keeps it there.  The references below apply them by
brute force: the CD at 20,001 thresholds per image and images at 641 focus
values, the window read off those grids.  The images come from the engine,
itself checked against an Abbe sum and closed forms (test_image.py).
"""

from __future__ import annotations

import numpy as np
import pytest

from pitchguard.deck import parse_deck
from pitchguard.optics.aerial import grating_spectrum
from pitchguard.optics.axis_batch import latitudes
from pitchguard.optics.cut_images import (
    _grating_frame,
    anchor_threshold,
    coherent_systems,
    grating_metrics,
)
from pitchguard.optics.focus_windows import fine_windows, fine_windows_plain
from pitchguard.optics.resist import cd_of_thresholds
from pitchguard.optics.window_edges import focus_spans

DECK = """
[exposures.e]
wavelength_nm = {wl}
na = {na}
immersion_index = {index}
illumination = {illumination}
mask = {mask}
polarization = "{light}"

[[layers]]
name = "m"
source = "1/0"
exposure = "e"
field = "{field}"
focus_half_range_nm = {half}
"""

# (wavelength, NA, index, illumination, mask, light, field, focus half range, pitch,
# CD): invented scanner set-ups across the trade's usual range (common practice),
# focus ranges wide enough that the depth of focus lies inside them, sampled at
# the default 9 steps.
CASES = {
    "KrF annular, lines 130/400": (
        248.0, 0.8, 1.0, '{ shape = "annular", sigma_inner = 0.55, sigma_outer = 0.85 }',
        '{ kind = "binary" }', "unpolarized", "clear", 400.0, 400.0, 130.0,
    ),
    "ArF dry annular, openings 90/360": (
        193.0, 0.93, 1.0, '{ shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }',
        '{ kind = "attenuated", transmission = 0.06 }', "unpolarized", "dark", 300.0, 360.0, 90.0,
    ),
    "ArF immersion dipole, trenches 60/160": (
        193.0, 1.35, 1.44,
        '{ shape = "dipole", sigma_inner = 0.7, sigma_outer = 0.95, opening_deg = 35.0, axis = "x" }',
        '{ kind = "attenuated", transmission = 0.06 }', "y", "dark", 200.0, 160.0, 60.0,
    ),
    "i-line conventional, lines 350/800": (
        365.0, 0.57, 1.0, '{ shape = "conventional", sigma = 0.6 }',
        '{ kind = "binary" }', "unpolarized", "clear", 1200.0, 800.0, 350.0,
    ),
}  # fmt: skip


def _rule(case):
    wl, na, index, ill, mask, light, field, half, *_ = case
    text = DECK.format(
        wl=wl, na=na, index=index, illumination=ill, mask=mask, light=light, field=field, half=half
    )
    return parse_deck(text).layers[0]


def _reference(rule, pitch, cd, focus):
    """(EL %, DOF nm) by brute force: dense thresholds, dense focus."""
    e, n_max, samples, x, order, feat, bg = _grating_frame(rule, pitch)
    spec = grating_spectrum(pitch, cd, feat, bg, n_max)
    images = np.stack(
        [
            coherent_systems(e, 0.0, pitch, n_max, float(z)).image(spec, samples)[0, order]
            for z in focus
        ]
    )
    bright = rule.field == "dark"
    tol = rule.cd_tolerance_pct / 100.0
    t = np.linspace(images.min(), images.max(), 20001)
    lows, highs, sizes = [], [], []
    for img in images:
        cds = cd_of_thresholds(x, img, 0.0, -pitch / 2, pitch / 2, bright, t)
        ok = np.isfinite(cds) & (np.abs(cds - cd) <= tol * cd)
        diff = np.where(np.isfinite(cds), np.abs(cds - cd), np.inf)
        k0 = int(np.argmin(diff))
        if not ok[k0]:
            lows.append(np.inf)
            highs.append(-np.inf)
            sizes.append(np.nan)
            continue
        a = k0
        while a > 0 and ok[a - 1]:
            a -= 1
        b = k0
        while b < len(t) - 1 and ok[b + 1]:
            b += 1
        lows.append(1.0 / t[b])  # dose D prints like threshold t / D
        highs.append(1.0 / t[a])
        sizes.append(t[k0])
    lows, highs = np.array(lows), np.array(highs)
    best = int(np.argmin(np.abs(focus)))
    t_size = sizes[best]
    assert anchor_threshold(rule) is None  # each at its own dose-to-size
    el = 100.0 * (highs[best] - lows[best]) * t_size
    dof = 0.0
    for i in range(len(focus)):
        lo, hi = -np.inf, np.inf
        for j in range(i, len(focus)):
            lo, hi = max(lo, lows[j]), min(hi, highs[j])
            if 100.0 * (hi - lo) * t_size < rule.el_min_pct:
                break
            dof = max(dof, focus[j] - focus[i])
    return el, dof


@pytest.mark.parametrize("name", sorted(CASES))
def test_latitude_and_depth_of_focus_match_dense_references(name):
    case = CASES[name]
    rule = _rule(case)
    pitch, cd = case[-2:]
    h = rule.focus_half_range_nm
    m = grating_metrics(rule, pitch, cd)[0]
    el, dof = _reference(rule, pitch, cd, np.linspace(-h, h, 641))
    assert 0.0 < dof < 2 * h * 0.95, "the case must have its DOF inside the range"
    assert m.el_pct == pytest.approx(el, abs=0.05)  # % of dose, absolute
    assert m.dof_nm == pytest.approx(dof, rel=0.05)


def test_parabolic_windows_give_the_closed_form_depth_of_focus():
    # Dose windows whose edges drift as parabolas in focus (Bossung-like, common
    # practice): lo(f) = a + b f^2, hi(f) = c + d f^2 with b > d.  Over [-F, F] the
    # common window is [lo(F), hi(0)], so EL >= e holds while
    # (c - a - b F^2) t >= e / 100: DOF = 2 sqrt((c - a - e / (100 t)) / b).
    fs = np.linspace(-200.0, 200.0, 9)
    a, b, c, d, t = 3.5, 2.75e-4, 4.45, 2.2e-4, 0.25
    lows, highs = a + b * fs**2, c + d * fs**2
    g, lo_g, hi_g = fine_windows(fs, lows[None], highs[None])
    open_ = c + d * g**2 > a + b * g**2  # the window closes beyond |f| = 131 nm
    assert np.allclose(lo_g[0, open_], (a + b * g**2)[open_])
    assert np.allclose(hi_g[0, open_], (c + d * g**2)[open_])
    assert np.all(np.isinf(lo_g[0, ~open_]))
    want = 2.0 * np.sqrt((c - a - 5.0 / (100.0 * t)) / b)
    got = focus_spans(g, latitudes(lo_g, hi_g, np.array([t])), 5.0)[0]
    assert got == pytest.approx(want, rel=0.005)
    # Read off the 9 samples alone, the same windows give a whole number of steps.
    alone = focus_spans(fs, latitudes(lows[None], highs[None], np.array([t])), 5.0)[0]
    assert abs(alone - want) > 0.05 * want


def test_carried_windows_equal_their_plain_twin():
    rng = np.random.default_rng(11)
    for _ in range(200):
        n = int(rng.choice([1, 2, 3, 5, 9, 13]))
        fs = np.sort(rng.choice(np.linspace(-300, 300, 61), n, replace=False))
        centre = rng.uniform(2.0, 5.0, n) + rng.uniform(0, 1e-4) * fs**2
        width = rng.uniform(-0.2, 1.0, n)
        lows, highs = centre - width / 2, centre + width / 2
        closed = (width <= 0) | (rng.random(n) < 0.2)
        lows[closed] = highs[closed] = np.nan
        g, lo, hi = fine_windows(fs, lows[None], highs[None])
        g2, lo2, hi2 = fine_windows_plain(fs, lows, highs)
        np.testing.assert_array_equal(g, g2)
        np.testing.assert_allclose(lo[0], lo2, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(hi[0], hi2, rtol=1e-12, atol=1e-12)
        # Samples without a window stay without one; those with one keep it.
        at = np.searchsorted(g, fs)
        assert np.all(np.isinf(lo[0, at[closed]]))
        assert np.allclose(lo[0, at[~closed]], lows[~closed])
