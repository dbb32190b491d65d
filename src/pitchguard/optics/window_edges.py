"""Exact ends of a CD window and of a depth of focus, between the samples that bracket them.

The threshold samples (``resist.THRESHOLD_SAMPLES`` over the image's range) find
which thresholds keep the printed CD within tolerance; read off the samples, the
window's ends fall short by up to a sample each, which made exposure latitude
0.2-2.2 % (absolute) low.  Between two samples the CD is piecewise linear in the
threshold (edges are interpolated linearly between image samples), so a few
steps of false position (Illinois), bisection where the CD is not finite (a
feature bridged or lost), find where it meets the tolerance's bound.

Depth of focus is read off focus samples the same way: each end of the span is
carried past its last sample by linear interpolation of the common latitude
towards the next one (:func:`focus_span`).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

MAX_STEPS = 40
"""Refinement steps per window end at most.  Real images are smooth, their CD nearly
linear in the threshold between samples, and false position meets the bound in a few
steps; a noisy profile with many kinks takes up to about 30."""

CD_TOL = 1e-10
"""A window end is found when the CD there is within this fraction of the bound."""


def refine_crossing(
    cd_at: Callable[[np.ndarray, np.ndarray], np.ndarray],
    rows: np.ndarray,
    t_in: np.ndarray,
    t_out: np.ndarray,
    bound: np.ndarray,
    rel_tol: float = CD_TOL,
) -> np.ndarray:
    """The threshold between ``t_in`` (CD within tolerance) and ``t_out`` (beyond it)
    where the CD of each of ``rows`` meets ``bound`` (the tolerance's edge it
    crosses there), or where it stops being finite, whichever comes first.

    ``cd_at(rows, t)`` gives the CD of rows ``rows`` at one threshold each.
    Illinois false position, bisection where the CD is not finite; rows leave the
    loop once within ``rel_tol`` of the bound.
    """
    a = np.asarray(t_in, float).copy()
    b = np.asarray(t_out, float).copy()
    bound = np.broadcast_to(np.asarray(bound, float), a.shape)
    rows = np.asarray(rows)
    fa = cd_at(rows, a) - bound
    fb = cd_at(rows, b) - bound
    last = np.zeros(len(a), dtype=np.int8)  # which end the previous step kept
    found = np.full(len(a), np.nan)  # where the CD met the bound, either side of it
    tol = np.broadcast_to(np.asarray(rel_tol, float), a.shape)
    live = np.flatnonzero(np.abs(fa) > tol * np.abs(bound))
    for _ in range(MAX_STEPS):
        if not len(live):
            break
        la, lb, lfa, lfb = a[live], b[live], fa[live], fb[live]
        finite = np.isfinite(lfa) & np.isfinite(lfb) & (lfa != lfb)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            guess = np.where(finite, lb - lfb * (lb - la) / (lfb - lfa), 0.5 * (la + lb))
        inner = (guess > np.minimum(la, lb)) & (guess < np.maximum(la, lb))
        guess = np.where(inner, guess, 0.5 * (la + lb))
        fg = cd_at(rows[live], guess) - bound[live]
        keep_b = (np.isfinite(fg) & (np.sign(fg) == np.sign(lfa))) | (fg == 0)
        # Illinois: halve the value kept at an end that stays twice running.
        lfb = np.where(keep_b & (last[live] == 1), 0.5 * lfb, lfb)
        lfa = np.where(~keep_b & (last[live] == -1), 0.5 * lfa, lfa)
        a[live] = np.where(keep_b, guess, la)
        fa[live] = np.where(keep_b, fg, lfa)
        b[live] = np.where(keep_b, lb, guess)
        fb[live] = np.where(keep_b, lfb, fg)
        last[live] = np.where(keep_b, 1, -1)
        met = np.abs(fg) <= tol[live] * np.abs(bound[live])
        found[live[met]] = guess[met]
        done = met | (np.abs(b[live] - a[live]) <= 1e-15 * np.abs(a[live]))
        live = live[~done]
    return np.where(np.isnan(found), a, found)


def focus_span(fs: np.ndarray, lat: np.ndarray, el_min_pct: float) -> float:
    """Longest focus span (sorted samples ``fs``) whose common latitude ``lat[i, j]``
    (samples ``i..j``; -inf for ``i > j``) stays at ``el_min_pct``, each end carried
    past its last sample by linear interpolation of the latitude towards the next
    one (the samples alone round the span down by up to two steps)."""
    n = len(fs)
    i, j = np.nonzero(lat >= el_min_pct)
    if not len(i):
        return 0.0
    here = lat[i, j]
    gap = np.diff(fs)

    def beyond(go: np.ndarray, nxt: np.ndarray, step: np.ndarray) -> np.ndarray:
        out = np.zeros(len(i))
        h = here[go]
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(nxt < el_min_pct, (h - el_min_pct) / (h - nxt), 0.0)
        out[go] = np.clip(frac, 0.0, 1.0) * step
        return out

    r = j + 1 < n
    right = beyond(r, lat[i[r], j[r] + 1], gap[j[r]])
    left_go = i >= 1
    left = beyond(left_go, lat[i[left_go] - 1, j[left_go]], gap[i[left_go] - 1])
    return float((fs[j] - fs[i] + right + left).max())


def focus_spans(fs: np.ndarray, lat: np.ndarray, el_min_pct: float) -> np.ndarray:
    """:func:`focus_span` of many latitude tables: ``lat`` ``(B, F, F)`` over sorted
    focus ``fs``, ``(B,)``."""
    b, n, _ = lat.shape
    good = lat >= el_min_pct
    gap = np.diff(fs)

    def beyond(here: np.ndarray, nxt: np.ndarray, step: np.ndarray) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            frac = np.where(nxt < el_min_pct, (here - el_min_pct) / (here - nxt), 0.0)
        return np.clip(frac, 0.0, 1.0) * step

    right = np.zeros(lat.shape)
    right[:, :, :-1] = beyond(lat[:, :, :-1], lat[:, :, 1:], gap[None, None, :])
    left = np.zeros(lat.shape)
    left[:, 1:, :] = beyond(lat[:, 1:, :], lat[:, :-1, :], gap[None, :, None])
    span = fs[None, None, :] - fs[None, :, None] + right + left
    return np.where(good, span, -np.inf).reshape(b, -1).max(axis=1, initial=0.0)
