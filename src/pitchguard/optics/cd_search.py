"""Dose-to-size thresholds and CD windows by bisection over the threshold samples.

:func:`axis_batch.cds` measures a profile's CD at every threshold sample:
``(rows, 512)`` edge searches per call, most of a scan of unique wires.  The
printed CD is monotone in the threshold, though: an edge is where the running
extreme of the profile, walking out from the centre, first passes the
threshold, so a higher threshold (a lower one, for bright features) moves
both edges outward.  The samples where the CD meets the drawn size, and the
run within tolerance of it, are therefore found by bisection: about 50 CDs
per row instead of 512, each from two bisections along the profile.

:func:`cd_windows` gives what ``cds`` followed by :func:`axis_batch.size_thresholds`
and :func:`axis_batch.windows` give, sample for sample (the tests hold the two
to each other on random images).
"""

from __future__ import annotations

import numpy as np

from pitchguard.optics.window_edges import refine_crossing


class Sides:
    """Both halves of each profile, walked out from its centre (``-profile`` for bright
    features), with their running maxima: per side ``(part, x, samples, run,
    beyond)``, the rows padded with -inf past their own samples."""

    def __init__(self, x, profiles, centre_nm, lo_nm, hi_nm, bright):
        r = len(profiles)
        g = -profiles if bright else profiles
        centre, lo_nm, hi_nm = (
            np.broadcast_to(np.asarray(v, float), (r,)) for v in (centre_nm, lo_nm, hi_nm)
        )
        c = np.abs(x[None, :] - centre[:, None]).argmin(axis=1)
        lo = np.minimum(np.maximum(np.searchsorted(x, lo_nm, side="left"), 0), c)
        hi = np.maximum(np.minimum(np.searchsorted(x, hi_nm, side="right") - 1, len(x) - 1), c)
        rows = np.arange(r)[:, None]
        self.sides = []
        for n_side, step, beyond in ((c - lo + 1, -1, -np.inf), (hi - c + 1, 1, np.inf)):
            width = int(n_side.max(initial=1))
            i = np.arange(width)[None, :]
            at = np.clip(c[:, None] + step * i, 0, len(x) - 1)
            part = np.where(i < n_side[:, None], g[rows, at], -np.inf)
            run = np.maximum.accumulate(part, axis=1)
            self.sides.append((part, x[at], n_side, run, beyond))
        self.sign = -1.0 if bright else 1.0

    def _edge(self, side, rr: np.ndarray, tt: np.ndarray) -> np.ndarray:
        """``axis_batch._side`` for rows ``rr`` at one threshold each (``tt``)."""
        part, px, m, run, beyond = side
        width = run.shape[1]
        lo = np.zeros(len(rr), dtype=np.int64)
        hi = np.full(len(rr), width, dtype=np.int64)
        for _ in range(int(width).bit_length()):  # k = #{i: run[i] < tt}
            mid = (lo + hi) >> 1
            less = run[rr, np.minimum(mid, width - 1)] < tt
            go = less & (lo < hi)
            stay = ~less & (lo < hi)
            lo = np.where(go, mid + 1, lo)
            hi = np.where(stay, mid, hi)
        k = lo
        m = m[rr]
        ok = (k > 0) & (k < m)
        kk = np.clip(k, 1, np.maximum(m - 1, 1))
        g0 = part[rr, kk - 1]
        g1 = part[rr, kk] if width > 1 else g0
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(g1 != g0, (tt - g0) / (g1 - g0), 0.0)
        x0 = px[rr, kk - 1]
        x1 = px[rr, kk] if width > 1 else x0
        pos = x0 + frac * (x1 - x0)
        return np.where(ok, pos, np.where(k == 0, np.nan, beyond))

    def cd(self, rr: np.ndarray, t: np.ndarray) -> np.ndarray:
        """The CD of rows ``rr`` at thresholds ``t`` (one each), as ``cds`` gives it."""
        tt = self.sign * t
        left = self._edge(self.sides[0], rr, tt)
        right = self._edge(self.sides[1], rr, tt)
        with np.errstate(invalid="ignore"):
            d = right - left
        cd = np.where(np.isnan(d), 0.0, d)
        return np.where(np.isinf(left) | np.isinf(right), np.inf, cd)


def cd_windows(x, profiles, centre_nm, lo_nm, hi_nm, bright, t, target, tol, exact=True):
    """``(size, low, high)`` per row: the threshold printing the drawn ``target``
    (``axis_batch.size_thresholds`` of the CDs at thresholds ``t`` ``(R, T)``,
    not masked where no sample is in tolerance) and the ends of the run within
    ``tol * target``: the first and last sample of it (``axis_batch.windows``;
    nan for none), carried to where the CD meets the tolerance between those
    samples and the next ones out with ``exact``
    (:func:`window_edges.refine_crossing`)."""
    sides = Sides(x, profiles, centre_nm, lo_nm, hi_nm, bright)
    r, n = t.shape
    rows = np.arange(r)
    target = np.asarray(target, dtype=np.float64)
    # u runs the samples in the order the CD grows: the thresholds rising for
    # dark features and falling for bright ones.
    tt = sides.sign * t
    rising = tt[:, 0] <= tt[:, -1]

    def j_of(rr, u):
        return np.where(rising[rr], u, n - 1 - u)

    def diff(rr, u):
        """``cd - target`` at sample ``u`` of rows ``rr`` (+inf for an unbounded CD),
        and whether the CD is finite there."""
        uc = np.clip(u, 0, n - 1)
        cd = sides.cd(rr, t[rr, j_of(rr, uc)])
        return cd - target[rr], np.isfinite(cd)

    def first(rr, pred):
        """Per row of ``rr``: the first ``u`` in ``0..n`` where ``pred`` holds (``n``: none)."""
        lo = np.zeros(len(rr), dtype=np.int64)
        hi = np.full(len(rr), n, dtype=np.int64)
        for _ in range(int(n).bit_length()):
            mid = (lo + hi) >> 1
            p = pred(rr, mid)
            live = lo < hi
            lo = np.where(live & ~p, mid + 1, lo)
            hi = np.where(live & p, mid, hi)
        return lo

    band = tol * target

    def inside(d, fin, rr):
        return fin & (np.abs(d) <= band[rr])

    # Three searches in one: the first sample at or above size, the first not
    # below the window, the first beyond it.
    rr3 = np.concatenate([rows, rows, rows])
    which = np.repeat(np.arange(3), r)

    def pred3(rr, u):
        d, fin = diff(rr, u)
        ins = inside(d, fin, rr)
        return np.select(
            [which == 0, which == 1],
            [d >= 0, ~((d < 0) & ~ins)],
            ~fin | ((d >= 0) & ~ins),
        )

    u_star, u_a, u_b = first(rr3, pred3).reshape(3, r)

    some = u_a < u_b
    j_first = np.where(rising, u_a, n - u_b)
    j_last = np.where(rising, u_b - 1, n - 1 - u_a)
    low = np.where(some, t[rows, np.clip(j_first, 0, n - 1)], np.nan)
    high = np.where(some, t[rows, np.clip(j_last, 0, n - 1)], np.nan)
    if exact:
        low, high = _exact_ends(sides, t, rows, rising, u_a, u_b, some, target * tol, target)

    # The sample nearest to size, the first of equals in sample order, as argmin finds it.
    d_lo, f_lo = diff(rows, u_star - 1)
    d_hi, f_hi = diff(rows, u_star)
    a = np.where((u_star >= 1) & f_lo, np.abs(d_lo), np.inf)
    b = np.where((u_star < n) & f_hi, np.abs(d_hi), np.inf)
    lower = (a < b) | ((a == b) & rising)
    best_u = np.where(lower, u_star - 1, u_star)
    # Equal differences may run on past the sample next to size: further down
    # (rising) or up (falling), where argmin would meet them first.
    flat_lo = lower & rising & (u_star >= 2)
    flat_hi = ~lower & ~rising & (u_star < n - 1)
    if flat_lo.any():
        rr = rows[flat_lo]
        rr = rr[diff(rr, u_star[rr] - 2)[0] == d_lo[rr]]
        best_u[rr] = first(rr, lambda q, u: diff(q, u)[0] >= d_lo[q])
    if flat_hi.any():
        rr = rows[flat_hi]
        rr = rr[diff(rr, u_star[rr] + 1)[0] == d_hi[rr]]
        best_u[rr] = first(rr, lambda q, u: diff(q, u)[0] > d_hi[q]) - 1
    best = np.where(np.isfinite(np.minimum(a, b)), j_of(rows, np.clip(best_u, 0, n - 1)), 0)

    # axis_batch.size_thresholds from here on, on the three samples it reads.
    def dj(j):
        jc = np.clip(j, 0, n - 1)
        cd = sides.cd(rows, t[rows, jc])
        return np.where(np.isfinite(cd), cd - target, np.nan)

    out = size_between(t, best, dj(best - 1), dj(best), dj(best + 1))
    size = np.where(np.isfinite(np.minimum(a, b)), out, np.nan)
    return size, low, high


def _exact_ends(sides, t, rows, rising, u_a, u_b, some, band, target):
    """The window's ends between the run's first and last samples (``u_a``,
    ``u_b - 1`` in the order the CD grows) and the samples next out, where the
    CD meets ``target -+ band``; a run reaching the first or last sample ends there."""
    n = t.shape[1]

    def t_of(rr, u):
        u = np.clip(u, 0, n - 1)
        return t[rr, np.where(rising[rr], u, n - 1 - u)]

    small = t_of(rows, u_a)  # the end where the CD is smallest
    big = t_of(rows, u_b - 1)
    ra = rows[some & (u_a >= 1)]
    if len(ra):
        small[ra] = refine_crossing(
            sides.cd, ra, t_of(ra, u_a[ra]), t_of(ra, u_a[ra] - 1), target[ra] - band[ra]
        )
    rb = rows[some & (u_b < n)]
    if len(rb):
        big[rb] = refine_crossing(
            sides.cd, rb, t_of(rb, u_b[rb] - 1), t_of(rb, u_b[rb]), target[rb] + band[rb]
        )
    low = np.where(some, np.where(rising, small, big), np.nan)
    high = np.where(some, np.where(rising, big, small), np.nan)
    return low, high


def size_between(t, best, d_m, d_0, d_p) -> np.ndarray:
    """The threshold printing on size per row, from the sample ``best`` nearest to size
    and the CD's difference from size (nan: unbounded) at ``best - 1``, ``best`` and
    ``best + 1``: interpolated at the sign change just below ``best``, else just
    above, else ``t[best]`` (``resist2d._size_threshold``)."""
    rows = np.arange(len(t))
    n = t.shape[1]
    out = t[rows, best].copy()
    done = np.zeros(len(t), dtype=bool)
    for k, d0, d1 in ((best - 1, d_m, d_0), (best, d_0, d_p)):
        valid = (k >= 0) & (k < n - 1) & ~done
        kc = np.clip(k, 0, n - 2)
        with np.errstate(invalid="ignore"):
            hit = valid & np.isfinite(d0) & np.isfinite(d1) & (d0 * d1 <= 0) & (d0 != d1)
        with np.errstate(divide="ignore", invalid="ignore"):
            val = t[rows, kc] + (t[rows, kc + 1] - t[rows, kc]) * (-d0) / (d1 - d0)
        out = np.where(hit, val, out)
        done |= hit
    return out
