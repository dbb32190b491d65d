"""The bisection over threshold samples (optics/cd_search.py) against its plain twin:
the CD at every sample (``axis_batch.cds``) read by ``axis_batch.size_thresholds``
and ``axis_batch.windows``, sample for sample, on random profiles."""

from __future__ import annotations

import numpy as np

from pitchguard.optics.axis_batch import cds, size_thresholds, thresholds, windows
from pitchguard.optics.cd_search import cd_windows

SEED = 20261205


def _profiles(rng, x, rows, bright, coarse):
    """Random lines or openings among ripples; ``coarse`` rounds the intensities so
    that CDs repeat across threshold samples (runs of equal CDs)."""
    out = np.empty((rows, len(x)))
    for r in range(rows):
        w, c0 = rng.uniform(30, 200), rng.uniform(-50, 50)
        bump = np.exp(-((x - c0) ** 2) / (0.36 * w * w))
        level = rng.uniform(0.2, 0.8) * bump + rng.uniform(0, 0.2) * np.cos(x / rng.uniform(20, 60))
        if coarse:
            level = np.round(level, 1)
        out[r] = level if bright else 1.0 - level
    return out


def test_bisection_finds_what_every_sample_gives():
    rng = np.random.default_rng(SEED)
    x = np.linspace(-300.0, 300.0, 241)
    ties = 0
    for trial in range(320):
        rows = int(rng.integers(1, 25))
        bright, coarse = bool(trial % 2), trial % 8 < 4
        prof = _profiles(rng, x, rows, bright, coarse)
        t = thresholds(prof.min(axis=1), prof.max(axis=1), int(rng.choice([2, 5, 17, 512])))
        if trial % 5 == 0:  # repeated samples: equal CDs on either side of size
            t = t[:, np.sort(rng.integers(0, t.shape[1], t.shape[1]))]
        if trial % 4 >= 2:
            t = t[:, ::-1].copy()  # falling thresholds
        centre = rng.uniform(-20, 20, rows)
        lo, hi = centre - rng.uniform(50, 250, rows), centre + rng.uniform(50, 250, rows)
        target, tol = rng.uniform(30, 200, rows), float(rng.choice([0.02, 0.1, 0.3]))

        cd = cds(x, prof, centre, lo, hi, bright, t)
        ok = np.isfinite(cd) & (np.abs(cd - target[:, None]) <= tol * target[:, None])
        size = size_thresholds(t, cd, target)
        low, high = windows(t, ok, size)
        got = cd_windows(x, prof, centre, lo, hi, bright, t, target, tol, exact=False)
        for want, have in zip((size, low, high), got, strict=True):
            np.testing.assert_array_equal(have, want)
        # Runs of equal distance to size, where the first in sample order counts.
        d = np.where(np.isfinite(cd), np.abs(cd - target[:, None]), np.inf)
        best = d.min(axis=1, keepdims=True)
        ties += int(((d == best).sum(axis=1) > 1)[np.isfinite(best[:, 0])].sum())
    assert ties > 20  # the tie-breaking paths were exercised


def test_exact_window_ends_are_where_the_cd_meets_the_tolerance():
    """Between the samples, the window's ends are where the CD (itself measured at any
    threshold) meets target -+ tolerance: checked against the CD on a grid 4,000
    times finer than the samples around each end, where the crossing is read off
    by linear interpolation (the CD is linear in the threshold between kinks)."""
    rng = np.random.default_rng(SEED + 9)
    x = np.linspace(-300.0, 300.0, 601)
    checked = 0
    for trial in range(40):
        bright = bool(trial % 2)
        prof = _profiles(rng, x, 6, bright, False)
        t = thresholds(prof.min(axis=1), prof.max(axis=1), 64)
        centre = np.zeros(6)
        lo, hi = centre - 250.0, centre + 250.0
        target, tol = rng.uniform(60, 160, 6), 0.1
        _, low, high = cd_windows(x, prof, centre, lo, hi, bright, t, target, tol)
        _, s_low, s_high = cd_windows(x, prof, centre, lo, hi, bright, t, target, tol, exact=False)
        step = t[:, 1] - t[:, 0]
        for r in range(6):
            for end, sample, outward in ((low[r], s_low[r], -1), (high[r], s_high[r], 1)):
                if not np.isfinite(end):
                    continue
                assert outward * (end - sample) >= 0  # carried outward, never inward
                assert abs(end - sample) <= step[r] * (1 + 1e-9)  # and not past the next sample
                fine = sample + outward * np.linspace(0.0, step[r], 4001)
                cd = cds(x, prof[r : r + 1], 0.0, lo[r], hi[r], bright, fine[None, :])[0]
                inside = np.isfinite(cd) & (np.abs(cd - target[r]) <= tol * target[r])
                k = int(np.argmin(inside)) if not inside.all() else len(fine) - 1
                # The first fine threshold out of tolerance, and the last in it.
                assert fine[k - 1] - 1e-12 <= end if outward > 0 else end <= fine[k - 1] + 1e-12
                assert end <= fine[k] + 1e-12 if outward > 0 else fine[k] - 1e-12 <= end
                checked += 1
    assert checked > 200
