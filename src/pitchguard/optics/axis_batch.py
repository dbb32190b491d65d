"""The metrics of :func:`resist2d.axis_metrics` for many clips at once, as arrays over
clip x image x threshold: the same definitions, no Python loop per clip or threshold.

``axis_metrics`` is the plain twin, read one clip at a time; the tests hold the
two to each other on random images.  Each clip's feature is centred at 0 on
the shared sample line ``s``; ``rows`` and ``cols`` hold one image per
distinct focus image ``u`` (``zmap`` maps each focus sample to its image).
"""

from __future__ import annotations

import math

import numpy as np

from pitchguard.optics.cd_search import Sides, cd_windows, size_between
from pitchguard.optics.focus_windows import fine_windows
from pitchguard.optics.resist import THRESHOLD_SAMPLES
from pitchguard.optics.resist2d import Metrics2D
from pitchguard.optics.window_edges import focus_spans


def thresholds(lo: np.ndarray, hi: np.ndarray, count: int = THRESHOLD_SAMPLES) -> np.ndarray:
    """``(B, count)``: ``np.linspace(lo[b], hi[b], count)`` for every ``b``, the same
    arithmetic (``i * step + lo``, the last sample set to ``hi``)."""
    lo, hi = np.asarray(lo, dtype=np.float64), np.asarray(hi, dtype=np.float64)
    step = (hi - lo) / (count - 1)
    t = np.arange(count, dtype=np.float64)[None, :] * step[:, None] + lo[:, None]
    t[:, -1] = hi
    return t


def below(run: np.ndarray, t: np.ndarray) -> np.ndarray:
    """``k[r, j] = #{i: run[r, i] < t[r, j]}`` for rows ``run`` ``(R, m)`` that never fall
    and thresholds ``t`` ``(R, T)`` in order (rising or falling): per row, what
    ``np.searchsorted(run[r], t[r])`` gives, by placing each sample among the
    thresholds (a guess from their even spacing, then corrected exactly) and
    counting."""
    if t.shape[1] > 1 and np.any(t[:, 0] > t[:, -1]):
        return below(run, t[:, ::-1])[:, ::-1]
    r, n = t.shape
    lo, span = t[:, :1], t[:, -1:] - t[:, :1]
    with np.errstate(divide="ignore", invalid="ignore"):
        guess = np.where(span > 0, np.floor((run - lo) / span * (n - 1)) + 1, (run >= lo) * n)
    p = np.clip(guess, 0, n).astype(np.int64)  # p[i] = #{j: t[j] <= run[i]}
    rows = np.arange(r)[:, None]
    while True:
        up = (p < n) & (t[rows, np.minimum(p, n - 1)] <= run)
        down = (p > 0) & (t[rows, np.maximum(p - 1, 0)] > run)
        if not (up.any() or down.any()):
            break
        p += up.astype(np.int64) - down.astype(np.int64)
    # run[i] < t[j] exactly when j >= p[i]: count the p's at or below each j.
    counts = np.bincount((p + rows * (n + 1)).ravel(), minlength=r * (n + 1))
    return np.cumsum(counts.reshape(r, n + 1), axis=1)[:, :n]


def _side(part: np.ndarray, px: np.ndarray, length: np.ndarray, t: np.ndarray, beyond: float):
    """Edges going out from the centre (column 0 of ``part`` ``(R, m)``, row ``r`` holding
    ``length[r]`` samples at ``px[r]``, then padding that never reaches a threshold) for
    thresholds ``t`` ``(R, T)``, as ``resist._edges_for_thresholds`` finds them."""
    k = below(np.maximum.accumulate(part, axis=1), t)  # first index with run >= t
    m = length[:, None]
    ok = (k > 0) & (k < m)
    kk = np.clip(k, 1, np.maximum(m - 1, 1))
    g0 = np.take_along_axis(part, kk - 1, axis=1)
    g1 = np.take_along_axis(part, kk, axis=1) if part.shape[1] > 1 else g0
    with np.errstate(divide="ignore", invalid="ignore"):
        frac = np.where(g1 != g0, (t - g0) / (g1 - g0), 0.0)
    x0 = np.take_along_axis(px, kk - 1, axis=1)
    x1 = np.take_along_axis(px, kk, axis=1) if px.shape[1] > 1 else x0
    pos = x0 + frac * (x1 - x0)
    return np.where(ok, pos, np.where(k == 0, np.nan, beyond))


def cds(x, profiles, centre_nm, lo_nm, hi_nm, bright, t) -> np.ndarray:
    """``resist.cd_of_thresholds`` for profiles ``(R, n)`` on ``x``, each with its own
    thresholds ``t`` ``(R, T)`` and its own (or a shared) centre and search bounds:
    ``(R, T)``."""
    left, right = edges(x, profiles, centre_nm, lo_nm, hi_nm, bright, t)
    cd = np.where(np.isnan(right - left), 0.0, right - left)
    return np.where(np.isinf(left) | np.isinf(right), np.inf, cd)


def edges(x, profiles, centre_nm, lo_nm, hi_nm, bright, t) -> tuple[np.ndarray, np.ndarray]:
    """The printed edges ``(left, right)`` ``(R, T)`` behind :func:`cds` (as
    ``resist._edges_for_thresholds``: nan where lost, -inf / inf where bridged)."""
    sides = Sides(x, profiles, centre_nm, lo_nm, hi_nm, bright)
    tt = sides.sign * t
    left, right = (_side(part, px, n, tt, beyond) for part, px, n, _, beyond in sides.sides)
    return left, right


def size_thresholds(t: np.ndarray, cd: np.ndarray, target: np.ndarray) -> np.ndarray:
    """``resist2d._size_threshold`` per row: the threshold printing ``cd == target``."""
    diff = np.where(np.isfinite(cd), cd - target[:, None], np.nan)
    finite = np.isfinite(diff)
    best = np.where(finite, np.abs(diff), np.inf).argmin(axis=1)
    rows = np.arange(len(t))
    n = t.shape[1]
    near = [diff[rows, np.clip(best + k, 0, n - 1)] for k in (-1, 0, 1)]
    return np.where(finite.any(axis=1), size_between(t, best, *near), np.nan)


def windows(t: np.ndarray, ok: np.ndarray, t_size: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``resist2d._window`` per row: the run of in-tolerance thresholds around ``t_size``."""
    r, n = t.shape
    rows = np.arange(r)
    idx = np.arange(n)
    k0 = np.where(
        np.isfinite(t_size),
        np.abs(t - np.where(np.isfinite(t_size), t_size, 0.0)[:, None]).argmin(axis=1),
        0,
    )
    away = np.where(ok, np.abs(idx[None, :] - k0[:, None]), n + 1)
    k0 = np.where(ok[rows, k0], k0, away.argmin(axis=1))
    run = np.cumsum(~ok, axis=1)
    members = ok & (run == run[rows, k0][:, None])
    first = members.argmax(axis=1)
    last = n - 1 - members[:, ::-1].argmax(axis=1)
    some = ok.any(axis=1)
    return np.where(some, t[rows, first], np.nan), np.where(some, t[rows, last], np.nan)


def latitudes(lows: np.ndarray, highs: np.ndarray, t_size: np.ndarray) -> np.ndarray:
    """``resist2d._latitudes`` per clip: ``(B, F, F)`` from ``(B, F)`` windows."""
    f = lows.shape[1]
    upper = np.triu(np.ones((f, f), dtype=bool))[None]
    lo = np.maximum.accumulate(np.where(upper, lows[:, None, :], -np.inf), axis=2)
    hi = np.minimum.accumulate(np.where(upper, highs[:, None, :], np.inf), axis=2)
    with np.errstate(invalid="ignore"):  # an empty window (-inf) at t_size 0: no latitude
        el = np.maximum(0.0, 100.0 * (hi - lo) * t_size[:, None, None])
    return np.where(upper, np.nan_to_num(el, nan=0.0), -np.inf)


def axis_metrics_batch(
    s: np.ndarray,
    rows: np.ndarray,
    cols: np.ndarray,
    zmap: np.ndarray,
    focus: np.ndarray,
    sizes_nm: np.ndarray,
    bright: bool,
    nominal_threshold: float | None,
    tol: float,
    el_min_pct: float,
    edges: tuple[np.ndarray, np.ndarray],
    t_range: np.ndarray,
) -> list[Metrics2D]:
    """:func:`resist2d.axis_metrics` of ``B`` clips: ``rows``, ``cols`` ``(B, U, n)``
    along x and y through each feature's centre (at 0 on ``s``, the search box
    ``s``'s ends), ``zmap`` ``(F,)`` the image of each focus, ``sizes_nm``
    ``(B, 2)`` the drawn ``w, h``, ``edges`` the intensity and slope ``(B, 4)``
    at the drawn edge midpoints (x-, x+, y-, y+), ``t_range`` ``(B, 2)``."""
    focus = np.asarray(focus, dtype=np.float64)
    zmap = np.asarray(zmap)
    nb, nu, n = rows.shape
    best = int(np.argmin(np.abs(focus)))
    ub = int(zmap[best])
    wx, wy = sizes_nm[:, 0], sizes_nm[:, 1]
    i_e, d_e = edges
    with np.errstate(divide="ignore", invalid="ignore"):
        nils = np.stack([wx, wx, wy, wy], axis=1) * np.abs(d_e) / i_e
    lit = np.all(i_e > 0, axis=1)
    nils_x = np.where(lit, nils[:, :2].min(axis=1), 0.0)
    nils_y = np.where(lit, nils[:, 2:].min(axis=1), 0.0)

    t = thresholds(t_range[:, 0], t_range[:, 1])  # (B, T)
    tu = np.repeat(t, nu, axis=0)  # (B U, T)
    lo, hi = float(s[0]), float(s[-1])
    size = np.empty((2, nb, nu))
    low = np.full((2, nb, nu), np.nan)
    high = np.full((2, nb, nu), np.nan)
    for a, (prof, w) in enumerate(((rows, wx), (cols, wy))):
        ww = np.repeat(w, nu)
        st, ta, tb = cd_windows(s, prof.reshape(nb * nu, n), 0.0, lo, hi, bright, tu, ww, tol)
        size[a] = st.reshape(nb, nu)
        usable = np.isfinite(ta) & (ta > 0)
        with np.errstate(divide="ignore"):
            low[a] = np.where(usable, 1.0 / tb, np.nan).reshape(nb, nu)
            high[a] = np.where(usable, 1.0 / ta, np.nan).reshape(nb, nu)
    sizes, lows, highs = size[:, :, zmap], low[:, :, zmap], high[:, :, zmap]  # (2, B, F)
    t_size = sizes[0, :, best]

    if nominal_threshold is None:
        t_nom = np.where(np.isfinite(t_size), t_size, i_e[:, :2].mean(axis=1))
    else:
        t_nom = np.full(nb, float(nominal_threshold))
    tn = t_nom[:, None]
    size_x = cds(s, rows[:, ub], 0.0, lo, hi, bright, tn)[:, 0]
    size_y = cds(s, cols[:, ub], 0.0, lo, hi, bright, tn)[:, 0]
    if nominal_threshold is not None:
        err_x, err_y = 100.0 * (size_x - wx) / wx, 100.0 * (size_y - wy) / wy
    else:
        err_x = err_y = np.full(nb, math.nan)

    order = np.argsort(focus)
    el = np.full(nb, np.inf)
    dof = np.full(nb, np.inf)
    dead = np.zeros(nb, dtype=bool)
    for a in range(2):
        t_a = sizes[a, :, best]
        dead |= ~(np.isfinite(t_a) & (t_a > 0) & np.isfinite(lows[a, :, best]))
        with np.errstate(invalid="ignore"):
            el = np.minimum(
                el, np.maximum(0.0, 100.0 * (highs[a, :, best] - lows[a, :, best]) * t_a)
            )
        g, lo_a, hi_a = fine_windows(focus[order], lows[a][:, order], highs[a][:, order])
        t_safe = np.where(np.isfinite(t_a), t_a, 0.0)
        dof = np.minimum(dof, focus_spans(g, latitudes(lo_a, hi_a, t_safe), el_min_pct))
    el = np.where(dead, 0.0, el)
    dof = np.where(dead, 0.0, dof)
    with np.errstate(divide="ignore", invalid="ignore"):
        dts = np.where(np.isfinite(t_size) & (t_size > 0), t_nom / t_size, np.nan)
    # Python floats: metrics travel between processes (see resist.evaluate).
    return [
        Metrics2D(
            contrast=math.nan,
            nils_x=float(nils_x[b]),
            nils_y=float(nils_y[b]),
            size_x_nm=float(size_x[b]),
            size_y_nm=float(size_y[b]),
            size_error_x_pct=float(err_x[b]),
            size_error_y_pct=float(err_y[b]),
            missing=False,
            merged=False,
            el_pct=float(el[b]),
            dof_nm=float(dof[b]),
            threshold=float(t_nom[b]),
            dose_to_size=float(dts[b]),
        )
        for b in range(nb)
    ]
