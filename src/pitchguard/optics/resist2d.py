"""From a 2-D aerial image to the printed result: the constant-threshold stand-in for
compact features (contacts, vias, posts).

The definitions are those of ``optics.resist`` carried to two axes: the
printed size is read along x and along y through the feature centre (the
same edge search, :func:`resist.cd_of_thresholds`).  Exposure latitude and
depth of focus are worked out per axis, each size around its own
dose-to-size (a size the other axis misses at that dose is a bias OPC
corrects; with an anchor it shows as ``cd-error``), and the smaller of the
two axes is reported.  Depth of focus is the longest focus span keeping
the latitude at ``el_min_pct``, its ends interpolated between focus samples.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import ndimage

from pitchguard.deck import Anchor, Exposure, LayerRule
from pitchguard.optics.aerial import Optics, mask_amplitudes
from pitchguard.optics.aerial2d import (
    cell_spectra,
    coherent_systems_2d,
    default_samples,
    exposure_orders,
    image_axes,
)
from pitchguard.optics.cells2d import Cell, array_cell
from pitchguard.optics.focus_windows import fine_windows_plain
from pitchguard.optics.resist import THRESHOLD_SAMPLES, cd_of_thresholds, exact_end
from pitchguard.optics.window_edges import focus_span


@dataclass(frozen=True)
class Metrics2D:
    """Printing metrics of one drawn compact feature; lengths in nm (wafer)."""

    contrast: float  # (max - min) / (max + min) over the search box, best focus
    nils_x: float  # w_x |dI/dx| / I at the drawn x edges through the centre (the smaller)
    nils_y: float  # w_y |dI/dy| / I at the drawn y edges through the centre
    size_x_nm: float  # printed along x through the centre, nominal threshold, best focus
    size_y_nm: float  # (0: missing at the centre; inf: runs past the search box)
    size_error_x_pct: float  # (size - drawn) / drawn, % (nan when the dose is not anchored)
    size_error_y_pct: float
    missing: bool  # the feature's centre does not print (nominal threshold, best focus)
    merged: bool  # the printed feature connects to another feature or its own copy
    el_pct: float  # at best focus, the smaller of the two axes'
    dof_nm: float  # at el_min_pct, the smaller of the two axes'
    threshold: float  # nominal threshold (relative to the open frame)
    dose_to_size: float  # relative to the nominal dose: the x size on size (nan when never)

    def with_printing(self, contrast: float, missing: bool, merged: bool) -> Metrics2D:
        """These metrics with the contrast and the printed state set."""
        return replace(self, contrast=float(contrast), missing=bool(missing), merged=bool(merged))


def _size_threshold(t: np.ndarray, cd: np.ndarray, target: float) -> float:
    """The threshold printing ``cd == target`` (linear interpolation at the sign change
    nearest the best sample, as ``resist`` does); nan when never within reach."""
    diff = np.where(np.isfinite(cd), cd - target, np.nan)
    if not np.isfinite(diff).any():
        return math.nan
    best = int(np.nanargmin(np.abs(diff)))
    for k in (best - 1, best):
        if 0 <= k < len(t) - 1:
            d0, d1 = diff[k], diff[k + 1]
            if np.isfinite(d0) and np.isfinite(d1) and d0 * d1 <= 0 and d0 != d1:
                return float(t[k] + (t[k + 1] - t[k]) * (-d0) / (d1 - d0))
    return float(t[best])


def _window(t: np.ndarray, cd: np.ndarray, target: float, tol: float, t_size: float, cd_at):
    """The contiguous run of in-tolerance thresholds around ``t_size`` (or the nearest
    in-tolerance one), its ends carried to where the CD meets the tolerance
    (``resist.exact_end``, the CD at any threshold from ``cd_at``): ``(t_a, t_b)``,
    nan when none."""
    ok = np.abs(cd - target) <= tol * target
    if not ok.any():
        return math.nan, math.nan
    k0 = int(np.argmin(np.abs(t - t_size))) if math.isfinite(t_size) else 0
    if not ok[k0]:
        good = np.flatnonzero(ok)
        k0 = int(good[np.argmin(np.abs(good - k0))])
    run = np.cumsum(~ok)  # equal within a run of ok thresholds
    members = np.flatnonzero(ok & (run == run[k0]))
    a, b = int(members[0]), int(members[-1])
    return (
        exact_end(t, cd, a, a - 1, target, tol, cd_at),
        exact_end(t, cd, b, b + 1, target, tol, cd_at),
    )


def _latitudes(lows: np.ndarray, highs: np.ndarray, t_size: float) -> np.ndarray:
    """``el[i, j]``: common dose latitude (%) of focus samples ``i..j`` (sorted), -inf for i > j.

    Dose ``D`` prints like threshold ``t / D``: a threshold window ``[t_a, t_b]``
    is the doses ``[1 / t_b, 1 / t_a]``; the common range over several focus
    values, in % of the dose-to-size (as ``resist``).
    """
    f = len(lows)
    upper = np.triu(np.ones((f, f), dtype=bool))
    lo = np.maximum.accumulate(np.where(upper, lows[None, :], -np.inf), axis=1)
    hi = np.minimum.accumulate(np.where(upper, highs[None, :], np.inf), axis=1)
    el = np.maximum(0.0, 100.0 * (hi - lo) * t_size)
    return np.where(upper, el, -np.inf)


def _joined(printed, x, y, centre, others) -> bool:
    """True when the printed region at ``centre`` reaches a periodic copy of it or one of
    the ``others`` (feature centres, any copy).

    Regions are labelled (4-connected) on a 3 x 3 tiling of the period, so a
    region can reach the neighbouring copies of the cell.
    """
    ny, nx = printed.shape
    labels, _ = ndimage.label(np.tile(printed, (3, 3)))
    dx, dy = x[1] - x[0], y[1] - y[0]

    def copies(px: float, py: float) -> np.ndarray:
        jx = int(round((px - x[0]) / dx)) % nx
        jy = int(round((py - y[0]) / dy)) % ny
        return labels[jy::ny, jx::nx].copy()  # the point in each of the 9 tiles

    own_copies = copies(*centre)
    own = own_copies[1, 1]
    own_copies[1, 1] = 0
    if np.any(own_copies == own):
        return True
    pts = np.zeros((0, 2)) if others is None else np.reshape(others, (-1, 2))
    return any(np.any(copies(px, py) == own) for px, py in pts)


def _nearest(axis: np.ndarray, value: float) -> int:
    return int(np.argmin(np.abs(axis - value)))


def evaluate_2d(
    x: np.ndarray,
    y: np.ndarray,
    images: np.ndarray,
    focus_nm: np.ndarray,
    feature: tuple[float, float, float, float],
    bright: bool,
    nominal_threshold: float | None,
    tol: float,
    el_min_pct: float,
    others: np.ndarray | None = None,
    search: tuple[tuple[float, float], tuple[float, float]] | None = None,
    edge_values: tuple[np.ndarray, np.ndarray] | None = None,
) -> Metrics2D:
    """Metrics of one compact feature from its images through focus.

    Parameters
    ----------
    x, y
        Sample positions (nm, increasing, uniform) covering one period of the
        cell; ``images`` is ``(n_focus, len(y), len(x))`` (axis -2 is y).
    focus_nm
        The focus of each image; the one closest to 0 is best focus.
    feature
        The drawn feature ``(x0, y0, x1, y1)``.
    bright
        True for an opening (prints where the image is above the threshold).
    nominal_threshold
        The anchored threshold; None to size the feature at its own dose
        (its x size on size at best focus).
    others
        ``(k, 2)`` centres of the cell's other features: the printed feature
        is merged when it reaches one of them, or a periodic copy of itself.
    search
        ``((x_lo, x_hi), (y_lo, y_hi))``: where the edges along the centre
        lines may lie (default: the sampled period).
    edge_values
        ``(I, slope)`` at the drawn edges ``(x0, yc), (x1, yc), (xc, y0), (xc,
        y1)`` at best focus, the slope along x for the first two and along y
        for the last two (exact values from the engine); estimated from the
        samples when not given.
    """
    x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    focus = np.asarray(focus_nm, dtype=np.float64)
    best = int(np.argmin(np.abs(focus)))
    x0, y0, x1, y1 = feature
    xc, yc = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    if search is None:
        search = ((float(x[0]), float(x[-1])), (float(y[0]), float(y[-1])))
    (xlo, xhi), (ylo, yhi) = search
    iy, ix = _nearest(y, yc), _nearest(x, xc)
    inten0 = images[best]
    box = inten0[(y >= ylo) & (y <= yhi)][:, (x >= xlo) & (x <= xhi)]
    imax, imin = float(box.max()), float(box.min())
    contrast = (imax - imin) / (imax + imin) if imax + imin > 0 else 0.0

    if edge_values is None:
        gx = np.gradient(inten0[iy], x)
        gy = np.gradient(inten0[:, ix], y)
        i_e = np.concatenate(
            [np.interp([x0, x1], x, inten0[iy]), np.interp([y0, y1], y, inten0[:, ix])]
        )
        d_e = np.concatenate([np.interp([x0, x1], x, gx), np.interp([y0, y1], y, gy)])
        edge_values = (i_e, d_e)
    ax = axis_metrics(
        x,
        y,
        images[:, iy, :],
        images[:, :, ix],
        focus,
        feature,
        bright,
        nominal_threshold,
        tol,
        el_min_pct,
        edge_values,
        search,
        (float(images.min()), float(images.max())),
    )
    t_nom = ax.threshold
    printed = inten0 > t_nom if bright else inten0 < t_nom
    missing = not bool(printed[iy, ix])  # as resist: the centre does not print
    merged = not missing and _joined(printed, x, y, (xc, yc), others)
    return ax.with_printing(contrast, missing, merged)


def axis_metrics(
    x: np.ndarray,
    y: np.ndarray,
    rows: np.ndarray,
    cols: np.ndarray,
    focus: np.ndarray,
    feature: tuple[float, float, float, float],
    bright: bool,
    nominal_threshold: float | None,
    tol: float,
    el_min_pct: float,
    edge_values: tuple[np.ndarray, np.ndarray],
    search: tuple[tuple[float, float], tuple[float, float]],
    t_range: tuple[float, float],
) -> Metrics2D:
    """The metrics read along the feature's two axes (see :func:`evaluate_2d`):
    ``rows`` ``(F, len(x))`` through the centre along x, ``cols`` ``(F, len(y))``
    along y, one per focus; thresholds sampled over ``t_range``.  Contrast,
    missing and merged are left for the caller (:meth:`Metrics2D.with_printing`)."""
    focus = np.asarray(focus, dtype=np.float64)
    best = int(np.argmin(np.abs(focus)))
    x0, y0, x1, y1 = feature
    xc, yc = 0.5 * (x0 + x1), 0.5 * (y0 + y1)
    wx, wy = x1 - x0, y1 - y0
    (xlo, xhi), (ylo, yhi) = search
    i_e, d_e = (np.asarray(v, dtype=np.float64).ravel() for v in edge_values)
    with np.errstate(divide="ignore", invalid="ignore"):
        nils = np.array([wx, wx, wy, wy]) * np.abs(d_e) / i_e
    if np.all(i_e > 0):
        nils_x, nils_y = float(np.min(nils[:2])), float(np.min(nils[2:]))
    else:
        nils_x = nils_y = 0.0

    t = np.linspace(t_range[0], t_range[1], THRESHOLD_SAMPLES)
    # Per axis (0: x, 1: y), per focus: the dose window keeping that size within
    # tolerance around its own dose-to-size (as OPC would size each axis).
    lows = np.full((2, len(focus)), np.nan)
    highs = np.full((2, len(focus)), np.nan)
    sizes = np.full((2, len(focus)), np.nan)
    # One edge search per axis for every distinct focus image (+z and -z alike).
    seen: dict[bytes, int] = {}
    back = np.array(
        [seen.setdefault(rows[f].tobytes() + cols[f].tobytes(), f) for f in range(len(focus))]
    )
    first = np.unique(back)
    back = np.searchsorted(first, back)
    cds = (
        cd_of_thresholds(x, rows[first], xc, xlo, xhi, bright, t),
        cd_of_thresholds(y, cols[first], yc, ylo, yhi, bright, t),
    )
    lines = ((x, rows, xc, xlo, xhi), (y, cols, yc, ylo, yhi))
    for u in range(len(first)):
        for a, w in enumerate((wx, wy)):
            cd = cds[a][u]
            size = _size_threshold(t, cd, w)
            s_ax, prof, c_ax, lo_ax, hi_ax = lines[a]

            def cd_at(tt, s_ax=s_ax, img=prof[first[u]], c=c_ax, lo_=lo_ax, hi_=hi_ax):
                return cd_of_thresholds(s_ax, img, c, lo_, hi_, bright, tt)

            ta, tb = _window(t, cd, w, tol, size, cd_at)
            at = back == u
            sizes[a, at] = size
            if math.isfinite(ta) and ta > 0:
                lows[a, at], highs[a, at] = 1.0 / tb, 1.0 / ta
    t_size = sizes[0, best]

    if nominal_threshold is None:
        t_nom = t_size if math.isfinite(t_size) else float(np.mean(i_e[:2]))
    else:
        t_nom = float(nominal_threshold)
    tn = np.array([t_nom])
    size_x = float(cd_of_thresholds(x, rows[best], xc, xlo, xhi, bright, tn)[0])
    size_y = float(cd_of_thresholds(y, cols[best], yc, ylo, yhi, bright, tn)[0])
    err_x = err_y = math.nan
    if nominal_threshold is not None:
        err_x = 100.0 * (size_x - wx) / wx
        err_y = 100.0 * (size_y - wy) / wy

    el, dof = math.inf, math.inf
    order = np.argsort(focus)
    for a in range(2):
        t_a = sizes[a, best]
        if not (math.isfinite(t_a) and t_a > 0 and math.isfinite(lows[a, best])):
            el = dof = 0.0
            break
        el = min(el, float(max(0.0, 100.0 * (highs[a, best] - lows[a, best]) * t_a)))
        g, lo, hi = fine_windows_plain(focus[order], lows[a, order], highs[a, order])
        dof = min(dof, focus_span(g, _latitudes(lo, hi, t_a), el_min_pct))
    dts = t_nom / t_size if (math.isfinite(t_size) and t_size > 0) else math.nan
    # Python floats: metrics travel between processes (see resist.evaluate).
    return Metrics2D(
        contrast=math.nan,
        nils_x=nils_x,
        nils_y=nils_y,
        size_x_nm=size_x,
        size_y_nm=size_y,
        size_error_x_pct=float(err_x),
        size_error_y_pct=float(err_y),
        missing=False,
        merged=False,
        el_pct=el,
        dof_nm=dof,
        threshold=float(t_nom),
        dose_to_size=float(dts),
    )


# --------------------------------------------------------------------------- driving the engine


def anchor_threshold_2d(
    exposure: Exposure, field: str, anchor: Anchor, blur_nm: float = 0.0
) -> float:
    """Nominal threshold from an anchor square array: ``cd x cd`` features at ``pitch x
    pitch``, the image (blurred by ``blur_nm``) at the middle of a drawn edge, best focus."""
    p, cd = anchor.pitch_nm, anchor.cd_nm
    orders = exposure_orders(exposure, p, p)
    feat, bg = mask_amplitudes(exposure, field)
    spec = cell_spectra([array_cell(p, p, cd, cd)], orders, feat, bg)
    inten, _, _ = coherent_systems_2d(exposure, p, p, 0.0, 0.0, blur_nm).at(spec, [cd / 2.0], [0.0])
    return float(inten[0, 0])


def cell_metrics(
    rule: LayerRule,
    cell: Cell,
    index: int = 0,
    angle_deg: float = 0.0,
    samples: tuple[int, int] | None = None,
    focus_nm: tuple[float, ...] | None = None,
) -> tuple[Metrics2D, np.ndarray, np.ndarray, np.ndarray]:
    """Metrics of feature ``index`` of a cell (wafer nm), and its best-focus image.

    Images the cell at every focus of the layer (``coherent_systems_2d``,
    kept per process), centred on the feature, and evaluates it with the
    layer's anchor, tolerance and latitude floor.  Returns ``(metrics, x, y,
    image)``.
    """
    e = rule.exposure
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    nx, ny = samples if samples is not None else default_samples(orders, Optics.of(e))
    feat, bg = mask_amplitudes(e, rule.field)
    spec = cell_spectra([cell], orders, feat, bg)
    centre = cell.centre_of(index)
    focus = np.array(focus_nm if focus_nm is not None else rule.focus_nm, dtype=np.float64)
    best = int(np.argmin(np.abs(focus)))
    stack = np.stack(
        [
            coherent_systems_2d(
                e, cell.px_nm, cell.py_nm, float(z), angle_deg, rule.resist_blur_nm
            ).image(spec, nx, ny, centre)[0]
            for z in focus
        ]
    )
    x, y = image_axes(orders, nx, ny, centre)
    x0, y0, x1, y1 = cell.rects_nm[index]
    px = np.array([x0, x1, centre[0], centre[0]])
    py = np.array([centre[1], centre[1], y0, y1])
    inten, d_x, d_y = coherent_systems_2d(
        e, cell.px_nm, cell.py_nm, float(focus[best]), angle_deg, rule.resist_blur_nm
    ).at(spec, px, py)
    slopes = np.concatenate([d_x[0, :2], d_y[0, 2:]])
    others = np.array([cell.centre_of(k) for k in range(len(cell.rects_nm)) if k != index]).reshape(
        -1, 2
    )
    anchor = rule.anchor
    t_nom = (
        anchor_threshold_2d(e, rule.field, anchor, rule.resist_blur_nm)
        if anchor is not None
        else None
    )
    m = evaluate_2d(
        x,
        y,
        stack,
        focus,
        cell.rects_nm[index],
        rule.field == "dark",
        t_nom,
        rule.cd_tolerance_pct / 100.0,
        rule.el_min_pct,
        others=others,
        edge_values=(inten[0], slopes),
    )
    return m, x, y, stack[best]
