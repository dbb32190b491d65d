""":func:`resist.evaluate` for many cuts at once, as arrays over cut x focus x threshold:
the same definitions, no Python loop per cut or threshold.

``resist.evaluate`` is the plain twin, one cut at a time; the tests hold the two to
each other on random images.  The cuts share their sample positions ``x`` and focus
values; each has its own feature, search window and drawn CD.
"""

from __future__ import annotations

import math

import numpy as np

from pitchguard.optics.axis_batch import edges, latitudes, thresholds
from pitchguard.optics.cd_search import cd_windows
from pitchguard.optics.focus_windows import fine_windows
from pitchguard.optics.resist import Metrics
from pitchguard.optics.side_lobes import side_lobe_codes
from pitchguard.optics.window_edges import focus_spans


def _interp(x: np.ndarray, rows: np.ndarray, at: np.ndarray) -> np.ndarray:
    """``np.interp(at[r], x, rows[r])`` for every row (``x`` shared, increasing)."""
    k = np.clip(np.searchsorted(x, at, side="right") - 1, 0, len(x) - 2)
    x0, x1 = x[k], x[k + 1]
    r = np.arange(len(rows))[:, None]
    y0, y1 = rows[r, k], rows[r, k + 1]
    frac = np.clip((at - x0) / (x1 - x0), 0.0, 1.0)
    return y0 + frac * (y1 - y0)


def evaluate_batch(
    x: np.ndarray,
    images: np.ndarray,
    focus_nm: np.ndarray,
    features: np.ndarray,
    searches: np.ndarray,
    bright: bool,
    nominal_threshold: float | None,
    tol: float,
    el_min_pct: float,
    edge_values: tuple[np.ndarray, np.ndarray],
    reach_nm=math.inf,
    values_at=None,
) -> list[Metrics]:
    """:func:`resist.evaluate` of ``C`` cuts: ``images`` ``(C, F, len(x))``,
    ``features`` and ``searches`` ``(C, 2)``, the drawn CD each feature's width,
    ``edge_values`` ``(I, dI/dx)`` ``(C, 2)`` at the drawn edges at best focus,
    ``reach_nm`` (scalar or ``(C,)``) how far side lobes are looked for,
    ``values_at(positions (C, 2)) -> (I, dI/dx)`` exact at best focus (the
    printed edges' slope; estimated from the samples without it)."""
    focus_nm = np.asarray(focus_nm, dtype=np.float64)
    nc, nf, _ = images.shape
    best = int(np.argmin(np.abs(focus_nm)))
    inten0 = images[:, best]
    left, right = features[:, 0], features[:, 1]
    drawn = right - left
    centre = 0.5 * (left + right)
    lo, hi = searches[:, 0], searches[:, 1]
    region = (x[None, :] >= np.minimum(lo, left)[:, None]) & (
        x[None, :] <= np.maximum(hi, right)[:, None]
    )
    imax = np.where(region, inten0, -np.inf).max(axis=1)
    imin = np.where(region, inten0, np.inf).min(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        contrast = np.where(imax + imin > 0, (imax - imin) / (imax + imin), 0.0)
    i_e, d_e = (np.array(v, dtype=np.float64) for v in edge_values)

    t = thresholds(images.min(axis=(1, 2)), images.max(axis=(1, 2)))  # (C, T)
    tf = np.repeat(t, nf, axis=0)  # (C F, T)
    rep = lambda v: np.repeat(v, nf)  # noqa: E731
    size, ta, tb = cd_windows(
        x, images.reshape(nc * nf, -1), rep(centre), rep(lo), rep(hi), bright, tf, rep(drawn), tol
    )
    size = np.where(np.isfinite(ta), size, np.nan)  # no sample in tolerance: no size
    size, ta, tb = (v.reshape(nc, nf) for v in (size, ta, tb))
    t_size = size[:, best]

    if nominal_threshold is None:
        edge_mean = _interp(x, inten0, features).mean(axis=1)
        t_nom = np.where(np.isfinite(t_size), t_size, edge_mean)
    else:
        t_nom = np.full(nc, float(nominal_threshold))
    e_left, e_right = (v[:, 0] for v in edges(x, inten0, centre, lo, hi, bright, t_nom[:, None]))
    cd_nom = np.where(np.isnan(e_right - e_left), 0.0, e_right - e_left)
    cd_nom = np.where(np.isinf(e_left) | np.isinf(e_right), np.inf, cd_nom)
    lost = cd_nom <= 0.0
    bridged = np.isinf(cd_nom)
    # NILS where the resist sees it: at the printed edges where the feature prints.
    printed = ~(lost | bridged)
    where = np.stack([np.where(printed, e_left, left), np.where(printed, e_right, right)], axis=1)
    if values_at is not None:
        i_p, d_p = (np.asarray(v, dtype=np.float64) for v in values_at(where))
    else:
        i_p = np.broadcast_to(t_nom[:, None], where.shape)
        d_p = _interp(x, np.gradient(inten0, x, axis=1), where)
    i_e = np.where(printed[:, None], i_p, i_e)
    d_e = np.where(printed[:, None], d_p, d_e)
    with np.errstate(divide="ignore", invalid="ignore"):
        nils_each = drawn[:, None] * np.abs(d_e) / i_e
    nils = np.where(np.all(i_e > 0, axis=1), np.fmin.reduce(nils_each, axis=1), 0.0)
    epe_l = np.where(printed, e_left - left, np.nan)
    epe_r = np.where(printed, e_right - right, np.nan)
    cd_err = np.full(nc, math.nan)
    if nominal_threshold is not None:
        cd_err = np.where(lost | bridged, math.nan, 100.0 * (cd_nom - drawn) / drawn)

    # Dose windows per focus: threshold window [ta, tb] is the doses [1/tb, 1/ta].
    valid = np.isfinite(ta) & np.isfinite(tb) & (ta > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        d_lo = np.where(valid, 1.0 / tb, np.inf)
        d_hi = np.where(valid, 1.0 / ta, -np.inf)
    usable = np.isfinite(t_size) & (t_size > 0)
    t_use = np.where(usable, t_size, 0.0)
    with np.errstate(invalid="ignore"):  # -inf x 0 where neither is usable: masked
        el = np.maximum(0.0, 100.0 * (d_hi[:, best] - d_lo[:, best]) * t_use)
    el = np.where(usable & valid[:, best], el, 0.0)
    order = np.argsort(focus_nm)
    fs = focus_nm[order]
    g, lo_g, hi_g = fine_windows(
        fs, np.where(valid, d_lo, np.nan)[:, order], np.where(valid, d_hi, np.nan)[:, order]
    )
    dof = focus_spans(g, latitudes(lo_g, hi_g, t_use), el_min_pct)  # -inf below the diagonal
    with np.errstate(divide="ignore", invalid="ignore"):
        dts = np.where(usable, t_nom / t_use, np.nan)
    lobe, depth = side_lobe_codes(
        x, images, focus_nm, left, right, lo, hi, bright, t_nom, el_min_pct, reach_nm
    )
    # Python floats: metrics travel between processes (see resist.evaluate).
    return [
        Metrics(
            contrast=float(contrast[c]),
            nils=float(nils[c]),
            cd_nm=float(cd_nom[c]),
            cd_error_pct=float(cd_err[c]),
            lost=bool(lost[c]),
            bridged=bool(bridged[c]),
            el_pct=float(el[c]),
            dof_nm=float(dof[c]),
            threshold=float(t_nom[c]),
            dose_to_size=float(dts[c]),
            side_lobe=int(lobe[c]),
            side_lobe_depth=float(depth[c]),
            epe_left_nm=float(epe_l[c]),
            epe_right_nm=float(epe_r[c]),
        )
        for c in range(nc)
    ]
