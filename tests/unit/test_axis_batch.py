"""The batched metrics (pitchguard.optics.axis_batch, pitchguard.optics.resist_batch)
against their plain twins.

Every function of ``axis_batch`` restates one of ``resist`` / ``resist2d`` as
arrays over many rows; each must give what the plain function gives row by
row (to rounding), on random profiles with plateaus, thresholds exactly at
samples and beyond the image (the cases where an off-by-one shows).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from pitchguard.optics.axis_batch import axis_metrics_batch, below, cds, thresholds
from pitchguard.optics.resist import THRESHOLD_SAMPLES, cd_of_thresholds, evaluate
from pitchguard.optics.resist2d import axis_metrics
from pitchguard.optics.resist_batch import evaluate_batch

SEED = 20261205


def test_thresholds_are_numpys_linspace_bit_for_bit():
    rng = np.random.default_rng(SEED)
    lo = rng.uniform(-1.0, 1.0, 50)
    hi = lo + rng.choice([0.0, 1e-9, 0.3, 2.0], 50)
    t = thresholds(lo, hi)
    for k in range(50):
        np.testing.assert_array_equal(t[k], np.linspace(lo[k], hi[k], THRESHOLD_SAMPLES))


def test_counting_below_equals_a_binary_search_per_row():
    rng = np.random.default_rng(SEED + 1)
    for _ in range(200):
        m, n = int(rng.integers(1, 40)), int(rng.integers(1, 60))
        run = np.maximum.accumulate(np.round(rng.normal(0, 1, (7, m)), 1), axis=1)
        t = np.sort(np.concatenate([rng.normal(0, 1.5, (7, n)), run[:, :3]], axis=1), axis=1)
        if rng.random() < 0.5:
            t = t[:, ::-1]  # falling thresholds (bright features search on -t)
        k = below(run, t)
        for r in range(7):
            np.testing.assert_array_equal(k[r], np.searchsorted(run[r], t[r], side="left"))


def _profile(rng, x):
    wave = sum(
        rng.uniform(0.05, 0.4) * np.cos(2 * math.pi * rng.integers(1, 5) * x / 400.0 + ph)
        for ph in rng.uniform(0, 2 * math.pi, 3)
    )
    inten = 0.5 + wave
    return np.round(inten, 1) if rng.random() < 0.3 else inten


def test_batched_cds_equal_the_plain_edge_search():
    rng = np.random.default_rng(SEED + 2)
    x = np.linspace(-200.0, 200.0, 81)
    for bright in (True, False):
        prof = np.stack([_profile(rng, x) for _ in range(30)])
        t = thresholds(prof.min(axis=1) - 0.05, prof.max(axis=1) + 0.05, 64)
        t = np.sort(np.concatenate([t, prof[:, 38:43]], axis=1), axis=1)  # some at samples
        got = cds(x, prof, 0.0, -150.0, 150.0, bright, t)
        for r in range(len(prof)):
            want = cd_of_thresholds(x, prof[r], 0.0, -150.0, 150.0, bright, t[r])
            np.testing.assert_allclose(got[r], want, rtol=0, atol=1e-9)


@pytest.mark.parametrize("anchored", [False, True])
def test_batched_axis_metrics_equal_the_plain_ones(anchored):
    """Random through-focus images of a feature (a bump or a dip near 0, drifting with
    focus, +z and -z alike), judged both ways."""
    rng = np.random.default_rng(SEED + 3 + anchored)
    s = np.linspace(-160.0, 160.0, 55)
    focus = np.linspace(-80.0, 80.0, 9)
    zmap = np.abs(np.arange(9) - 4)  # +z and -z share an image: 5 distinct
    for bright in (True, False):
        nb = 12
        sizes = rng.uniform(40.0, 110.0, (nb, 2))
        rows = np.empty((nb, 5, len(s)))
        cols = np.empty((nb, 5, len(s)))
        for b in range(nb):
            for u in range(5):
                for a, out in ((0, rows), (1, cols)):
                    width = sizes[b, a] * (1.0 + 0.1 * u) * rng.uniform(0.9, 1.1)
                    bump = np.exp(-((s - rng.normal(0, 3)) ** 2) / (0.36 * width**2))
                    level = (0.6 - 0.08 * u) * bump + rng.uniform(0.0, 0.05, len(s))
                    out[b, u] = level if bright else 1.0 - level
        i_e = rng.uniform(0.1, 0.5, (nb, 4))
        d_e = rng.normal(0.0, 0.01, (nb, 4))
        t_range = np.stack(
            [np.minimum(rows.min(axis=(1, 2)), cols.min(axis=(1, 2))),
             np.maximum(rows.max(axis=(1, 2)), cols.max(axis=(1, 2)))], axis=1
        )  # fmt: skip
        t_nom = 0.3 if anchored else None
        got = axis_metrics_batch(
            s, rows, cols, zmap, focus, sizes, bright, t_nom, 0.1, 5.0, (i_e, d_e), t_range
        )
        for b in range(nb):
            w, h = sizes[b]
            want = axis_metrics(
                s, s, rows[b, zmap], cols[b, zmap], focus, (-w / 2, -h / 2, w / 2, h / 2),
                bright, t_nom, 0.1, 5.0, (i_e[b], d_e[b]),
                ((s[0], s[-1]), (s[0], s[-1])), tuple(t_range[b]),
            )  # fmt: skip
            for name in want.__dataclass_fields__:
                x, y = getattr(got[b], name), getattr(want, name)
                if isinstance(y, bool) or not (math.isfinite(x) and math.isfinite(y)):
                    assert x == y or (math.isnan(x) and math.isnan(y)), (name, x, y)
                else:
                    assert x == pytest.approx(y, rel=1e-9, abs=1e-9), (name, x, y)


@pytest.mark.parametrize("anchored", [False, True])
def test_batched_cut_metrics_equal_the_plain_ones(anchored):
    """``resist_batch.evaluate_batch`` against ``resist.evaluate`` one cut at a time, on
    random through-focus images of a line or an opening between neighbours (each cut
    its own feature, search window and drawn CD; +z and -z images alike or not)."""
    rng = np.random.default_rng(SEED + 10 + anchored)
    x = np.linspace(-300.0, 300.0, 121)
    focus = np.linspace(-90.0, 90.0, 7)
    for bright in (True, False):
        nc = 20
        images = np.empty((nc, len(focus), len(x)))
        features = np.empty((nc, 2))
        searches = np.empty((nc, 2))
        for c in range(nc):
            w = rng.uniform(40.0, 160.0)
            lft = rng.uniform(-60.0, 60.0) - w / 2
            features[c] = (lft, lft + w)
            searches[c] = (lft - rng.uniform(20, 120), lft + w + rng.uniform(20, 120))
            for f, z in enumerate(focus):
                width = w * (1.0 + 0.004 * abs(z)) * rng.uniform(0.95, 1.05)
                bump = np.exp(-((x - lft - w / 2) ** 2) / (0.36 * width**2))
                level = (0.6 - 0.002 * abs(z)) * bump + 0.1 * np.cos(x / 37.0 + c)
                images[c, f] = level if bright else 1.0 - level
        i_e = rng.uniform(0.1, 0.5, (nc, 2))
        d_e = rng.normal(0.0, 0.01, (nc, 2))
        t_nom = 0.35 if anchored else None
        got = evaluate_batch(
            x, images, focus, features, searches, bright, t_nom, 0.1, 5.0, (i_e, d_e)
        )
        for c in range(nc):
            want = evaluate(
                x, images[c], focus, tuple(features[c]), tuple(searches[c]), bright,
                features[c, 1] - features[c, 0], t_nom, 0.1, 5.0, (i_e[c], d_e[c]),
            )  # fmt: skip
            for name in want.__dataclass_fields__:
                a, b = getattr(got[c], name), getattr(want, name)
                if isinstance(b, bool) or not (math.isfinite(a) and math.isfinite(b)):
                    assert a == b or (math.isnan(a) and math.isnan(b)), (name, a, b)
                else:
                    assert a == pytest.approx(b, rel=1e-9, abs=1e-9), (name, a, b)
        assert any(m.dof_nm > 0 for m in got) and any(m.el_pct > 0 for m in got)
