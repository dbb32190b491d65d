"""The batched axis metrics (pitchguard.optics.axis_batch) against their plain twins.

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
from pitchguard.optics.resist import THRESHOLD_SAMPLES, cd_of_thresholds
from pitchguard.optics.resist2d import axis_metrics

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
