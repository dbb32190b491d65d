"""Dose windows between focus samples: a smooth curve through the samples' windows.

The depth of focus is the longest focus range over which a dose range of
``el_min_pct`` keeps the CD in tolerance.  Read off 9 focus samples it is
rounded to whole steps, and a straight line of the common latitude between the
last sample that holds and the next (which may have no window at all) can
overshoot by most of a step: dose windows drift with focus roughly as
parabolas (Bossung curves, common practice), so the common window of a span
closes sooner than a straight line says.

Each window edge (the lowest and highest dose in tolerance, per focus) is
carried between the samples by quadratics through three neighbouring samples
that have a window, the mean of the two such quadratics where both exist
(a cubic through four samples on an even grid), a straight line where only
two samples do.  Towards a sample with no window, the last three that have
one are carried on; the window there ends where the carried edges cross.
The depth of focus is then read off ``PER_STEP`` points per step.
"""

from __future__ import annotations

import numpy as np

PER_STEP = 8
"""Fine focus points per step between samples."""


def _quad(f, y, i0, i1, i2, at):
    """Values at ``at`` of the quadratic through samples ``i0, i1, i2`` (per row)."""
    x0, x1, x2 = f[i0], f[i1], f[i2]
    y0, y1, y2 = y[..., i0], y[..., i1], y[..., i2]
    with np.errstate(divide="ignore", invalid="ignore"):
        return (
            y0 * (at - x1) * (at - x2) / ((x0 - x1) * (x0 - x2))
            + y1 * (at - x0) * (at - x2) / ((x1 - x0) * (x1 - x2))
            + y2 * (at - x0) * (at - x1) / ((x2 - x0) * (x2 - x1))
        )


def _line(f, y, i0, i1, at):
    x0, x1 = f[i0], f[i1]
    with np.errstate(divide="ignore", invalid="ignore"):  # i0 == i1 off the ends: unused
        return y[..., i0] + (y[..., i1] - y[..., i0]) * (at - x0) / (x1 - x0)


def fine_grid(fs: np.ndarray, per_step: int = PER_STEP) -> np.ndarray:
    """The focus points the windows are carried to: ``per_step`` per step, samples kept."""
    fs = np.asarray(fs, dtype=np.float64)
    if len(fs) < 2:
        return fs.copy()
    u = np.arange(per_step) / per_step
    inner = (fs[:-1, None] + u[None, :] * np.diff(fs)[:, None]).ravel()
    return np.concatenate([inner, fs[-1:]])


def fine_windows(
    fs: np.ndarray, lows: np.ndarray, highs: np.ndarray, per_step: int = PER_STEP
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(g, lows_g, highs_g)``: the dose windows ``(C, F)`` over sorted focus ``fs``
    (nan where a sample has none) carried to the points ``g`` of :func:`fine_grid`
    (``(C, M)``, inf / -inf where there is none)."""
    fs = np.asarray(fs, dtype=np.float64)
    lows = np.atleast_2d(np.asarray(lows, dtype=np.float64))
    highs = np.atleast_2d(np.asarray(highs, dtype=np.float64))
    n = len(fs)
    g = fine_grid(fs, per_step)
    if n < 2:
        return g, np.where(np.isnan(lows), np.inf, lows), np.where(np.isnan(highs), -np.inf, highs)
    valid = np.isfinite(lows) & np.isfinite(highs)  # (C, F)
    k = np.minimum(np.arange(len(g)) // per_step, n - 2)  # interval of each fine point
    at = g[None, :]

    def ok(i):
        """Whether sample ``i`` (per fine point, may run off the ends) has a window."""
        inside = (i >= 0) & (i < n)
        return valid[:, np.clip(i, 0, n - 1)] & inside[None, :]

    def carried(y):
        out = np.full((len(y), len(g)), np.nan)
        y = np.where(valid, y, 0.0)  # unused where not valid
        ic = lambda i: np.clip(i, 0, n - 1)  # noqa: E731
        a, b = k, k + 1
        both = ok(a) & ok(b)
        # Inside a step whose two samples have windows.
        qa = ok(a - 1) & both
        qb = ok(b + 1) & both
        va = _quad(fs, y, ic(a - 1), a, b, at)
        vb = _quad(fs, y, a, b, ic(b + 1), at)
        lin = _line(fs, y, a, b, at)
        out = np.where(both, np.where(qa & qb, 0.5 * (va + vb), lin), out)
        out = np.where(qa & ~qb, va, out)
        out = np.where(qb & ~qa, vb, out)
        # Towards a sample without a window: the last samples with one carried on.
        left_only = ok(a) & ~ok(b)
        e2 = _quad(fs, y, ic(a - 2), ic(a - 1), a, at)
        e1 = _line(fs, y, ic(a - 1), a, at)
        ext = np.where(ok(a - 2) & ok(a - 1), e2, np.where(ok(a - 1), e1, y[:, a]))
        out = np.where(left_only, ext, out)
        right_only = ok(b) & ~ok(a)
        e2 = _quad(fs, y, b, ic(b + 1), ic(b + 2), at)
        e1 = _line(fs, y, b, ic(b + 1), at)
        ext = np.where(ok(b + 1) & ok(b + 2), e2, np.where(ok(b + 1), e1, y[:, b]))
        out = np.where(right_only, ext, out)
        # A sample without a window has none, whatever the curves say.
        on_sample = (np.arange(len(g)) % per_step == 0) | (np.arange(len(g)) == len(g) - 1)
        sample_of = np.minimum(np.arange(len(g)) // per_step, n - 1)
        closed = on_sample[None, :] & ~valid[:, sample_of]
        return np.where(closed, np.nan, out)

    with np.errstate(invalid="ignore"):  # quadratics through clipped (repeated) samples
        lo_g, hi_g = carried(lows), carried(highs)
    has = np.isfinite(lo_g) & np.isfinite(hi_g) & (hi_g > lo_g)
    return g, np.where(has, lo_g, np.inf), np.where(has, hi_g, -np.inf)


def fine_windows_plain(
    fs: np.ndarray, lows: np.ndarray, highs: np.ndarray, per_step: int = PER_STEP
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`fine_windows` of one row of windows, point by point (the plain twin)."""
    fs = np.asarray(fs, dtype=np.float64)
    n = len(fs)
    g = fine_grid(fs, per_step)
    valid = [bool(np.isfinite(a) and np.isfinite(b)) for a, b in zip(lows, highs, strict=True)]

    def has(i: int) -> bool:
        return 0 <= i < n and valid[i]

    def quad(y, i0, i1, i2, x):
        (x0, x1, x2), (y0, y1, y2) = fs[[i0, i1, i2]], (y[i0], y[i1], y[i2])
        return (
            y0 * (x - x1) * (x - x2) / ((x0 - x1) * (x0 - x2))
            + y1 * (x - x0) * (x - x2) / ((x1 - x0) * (x1 - x2))
            + y2 * (x - x0) * (x - x1) / ((x2 - x0) * (x2 - x1))
        )

    def line(y, i0, i1, x):
        return y[i0] + (y[i1] - y[i0]) * (x - fs[i0]) / (fs[i1] - fs[i0])

    def value(y, m: int) -> float:
        x = g[m]
        if n < 2:
            return y[0] if valid[0] else np.nan
        a = min(m // per_step, n - 2)
        b = a + 1
        sample = m == len(g) - 1 or m % per_step == 0
        if sample and not valid[min(m // per_step, n - 1)]:
            return np.nan
        if has(a) and has(b):
            qa, qb = has(a - 1), has(b + 1)
            if qa and qb:
                return 0.5 * (quad(y, a - 1, a, b, x) + quad(y, a, b, b + 1, x))
            if qa:
                return quad(y, a - 1, a, b, x)
            if qb:
                return quad(y, a, b, b + 1, x)
            return line(y, a, b, x)
        if has(a):
            if has(a - 1) and has(a - 2):
                return quad(y, a - 2, a - 1, a, x)
            return line(y, a - 1, a, x) if has(a - 1) else y[a]
        if has(b):
            if has(b + 1) and has(b + 2):
                return quad(y, b, b + 1, b + 2, x)
            return line(y, b, b + 1, x) if has(b + 1) else y[b]
        return np.nan

    lo = np.array([value(lows, m) for m in range(len(g))])
    hi = np.array([value(highs, m) for m in range(len(g))])
    ok = np.isfinite(lo) & np.isfinite(hi) & (hi > lo)
    return g, np.where(ok, lo, np.inf), np.where(ok, hi, -np.inf)
