"""From aerial image to printed result: the constant-threshold resist stand-in."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from pitchguard.optics.focus_windows import fine_windows_plain
from pitchguard.optics.side_lobes import side_lobe_codes
from pitchguard.optics.window_edges import focus_span, refine_crossing

NOT_SIZED, SIZED, UNSIZED = 0, 1, 2
"""``Metrics.sizing`` codes."""

THRESHOLD_SAMPLES = 512
"""Thresholds tried per profile when inverting CD(threshold)."""


@dataclass(frozen=True)
class Metrics:
    """Printing metrics of one drawn feature; lengths in nm (wafer)."""

    contrast: float
    nils: float
    cd_nm: float  # printed CD at the nominal threshold, best focus (0: lost, inf: bridged)
    cd_error_pct: float  # (cd - drawn) / drawn, % (nan when the dose is not anchored)
    lost: bool
    bridged: bool
    el_pct: float  # at best focus
    dof_nm: float  # at el_min_pct
    threshold: float  # nominal threshold (relative to the open frame)
    dose_to_size: float  # relative to the nominal dose (nan when never on size)
    # Printing in the spaces beside the feature, apart from any feature
    # (optics.side_lobes codes: 0 none, 1 within the window, 2 at nominal),
    # and how deep: image over threshold (openings) or threshold over image.
    side_lobe: int = 0
    side_lobe_depth: float = 0.0
    # Printed minus drawn position of each edge along the cut (nm, best focus,
    # nominal dose; nan when the feature is lost or bridged).
    epe_left_nm: float = math.nan
    epe_right_nm: float = math.nan
    # Judged as sized (deck key sizing = "retarget"): the bias each edge of the
    # mask got (nm, + grows the feature), and whether it prints on size with it
    # (SIZED) or no bias within the space's room does (UNSIZED); NOT_SIZED as drawn.
    bias_nm: float = math.nan
    sizing: int = 0

    @property
    def shift_nm(self) -> float:
        """How far the printed feature's centre sits from the drawn one's (along the cut)."""
        return 0.5 * (self.epe_left_nm + self.epe_right_nm)

    @property
    def epe_nm(self) -> float:
        """The larger edge displacement, signed: + outward (the feature grows there)."""
        out_left, out_right = -self.epe_left_nm, self.epe_right_nm
        return out_left if abs(out_left) >= abs(out_right) else out_right


def _edges_for_thresholds(x, g, lo_idx, c_idx, hi_idx, t):
    """Printed edges around index ``c_idx`` for every threshold in ``t``.

    ``g`` ``(n,)`` or ``(B, n)`` (a few profiles on the same ``x``) prints where
    ``g < t``.  Going out from the centre, an edge is where ``g`` first
    reaches ``t``; found for all thresholds at once from the running maxima.
    Returns ``(left, right)`` arrays ``(T,)`` or ``(B, T)``: ``nan`` where the
    feature is lost (``g[c] >= t``), ``-inf`` (left) or ``+inf`` (right)
    where no crossing lies inside ``[lo_idx, hi_idx]`` (the feature runs into
    its neighbour).
    """
    left_part = g[..., lo_idx : c_idx + 1][..., ::-1]  # from the centre outward
    right_part = g[..., c_idx : hi_idx + 1]
    lx = x[lo_idx : c_idx + 1][::-1]
    rx = x[c_idx : hi_idx + 1]

    def side(part, px, beyond):
        run = np.maximum.accumulate(part, axis=-1)
        n = part.shape[-1]
        if part.ndim == 1:
            k = np.searchsorted(run, t, side="left")  # first index with run >= t
        else:
            k = np.stack([np.searchsorted(r, t, side="left") for r in run])
        if n == 1:  # no sample beyond the centre on this side: nothing to interpolate
            return np.where(k == 0, np.nan, beyond)
        ok = (k > 0) & (k < n)
        kk = np.clip(k, 1, n - 1)
        if part.ndim == 1:
            g0, g1 = part[kk - 1], part[kk]
        else:
            g0 = np.take_along_axis(part, kk - 1, axis=1)
            g1 = np.take_along_axis(part, kk, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            frac = np.where(g1 != g0, (t - g0) / (g1 - g0), 0.0)
        pos = px[kk - 1] + frac * (px[kk] - px[kk - 1])
        return np.where(ok, pos, np.where(k == 0, np.nan, beyond))

    return side(left_part, lx, -np.inf), side(right_part, rx, np.inf)


def cd_of_thresholds(x, inten, centre_nm, lo_nm, hi_nm, bright, t):
    """Printed CD for each threshold in ``t`` (0 where lost, inf where bridged): ``(T,)``
    for one profile ``inten`` ``(n,)``, ``(B, T)`` for ``B`` profiles ``(B, n)``."""
    g = -inten if bright else inten
    tt = -t if bright else t
    c_idx = int(np.argmin(np.abs(x - centre_nm)))
    lo_idx = int(np.searchsorted(x, lo_nm, side="left"))
    hi_idx = int(np.searchsorted(x, hi_nm, side="right")) - 1
    lo_idx = min(max(lo_idx, 0), c_idx)
    hi_idx = max(min(hi_idx, len(x) - 1), c_idx)
    left, right = _edges_for_thresholds(x, g, lo_idx, c_idx, hi_idx, tt)
    cd = right - left
    cd = np.where(np.isnan(cd), 0.0, cd)
    return np.where(np.isinf(left) | np.isinf(right), np.inf, cd)


class PrintedEdges(NamedTuple):
    """A feature's printed edges at one threshold (nm along the cut)."""

    left: float | None  # None: no crossing on this side anywhere along the cut
    right: float | None
    state: str  # "printed", "lost" or "bridged"


def printed_edges(
    x: np.ndarray,
    intensity: np.ndarray,
    threshold: float,
    bright: bool,
    centre_nm: float,
    search: tuple[float, float] | None = None,
) -> PrintedEdges:
    """Printed edges of the feature centred at ``centre_nm``, at one threshold.

    Parameters
    ----------
    x
        Sample positions (nm, increasing).
    intensity
        The image at ``x``.
    threshold
        Intensity at which the resist stand-in prints.
    bright
        True for an opening (prints where the image is above the threshold),
        False for a line (prints where it is below).
    centre_nm
        Centre of the drawn feature; the sample nearest it is the start.
    search
        Where the edges may lie ``(lo, hi)``: the middle of each neighbouring
        space.  None: anywhere along the cut.

    Returns
    -------
    PrintedEdges
        ``left`` and ``right`` are the first threshold crossings going out
        from the centre sample on each side, anywhere along the cut (linear
        interpolation between samples), None where there is none.  ``state``
        is ``lost`` when the centre does not print (both edges None),
        ``bridged`` when an edge is missing or lies beyond ``search`` (the
        printed feature runs into its neighbour), else ``printed``.

    Notes
    -----
    Built on the same edge search as :func:`cd_of_thresholds`, over the
    whole cut instead of the search window, so a picture can mark crossings
    that lie beyond it.
    """
    x = np.asarray(x, dtype=float)
    g = np.asarray(intensity, dtype=float)
    g, t = (-g, -threshold) if bright else (g, threshold)
    c_idx = int(np.argmin(np.abs(x - centre_nm)))
    left_a, right_a = _edges_for_thresholds(x, g, 0, c_idx, len(x) - 1, np.array([t], dtype=float))
    left, right = float(left_a[0]), float(right_a[0])
    if math.isnan(left):
        return PrintedEdges(None, None, "lost")
    edges = [None if math.isinf(e) else e for e in (left, right)]
    lo, hi = search if search is not None else (-math.inf, math.inf)
    ok = None not in edges and edges[0] >= lo and edges[1] <= hi
    return PrintedEdges(edges[0], edges[1], "printed" if ok else "bridged")


def _threshold_window(t, cd, target, tol, cd_at=None):
    """(t_size, t_a, t_b): threshold on size, and the range keeping CD in tolerance.

    CD grows with the threshold for a dark feature and shrinks for a bright
    one; either way the window is the contiguous threshold range around
    ``t_size`` where ``|cd - target| <= tol target``.  ``nan`` when never in
    tolerance.  With ``cd_at(threshold)`` (the CD at any threshold) the ends are
    carried from the last samples in tolerance to where the CD meets it
    (:func:`window_edges.refine_crossing`).
    """
    ok = np.isfinite(cd) & (np.abs(cd - target) <= tol * target)
    if not ok.any():
        return math.nan, math.nan, math.nan
    # Threshold on size: where cd - target changes sign (linear interpolation).
    diff = np.where(np.isfinite(cd), cd - target, np.nan)
    size = math.nan
    best = np.nanargmin(np.abs(diff))
    for k in (best - 1, best):
        if (
            0 <= k < len(t) - 1
            and np.isfinite(diff[k])
            and np.isfinite(diff[k + 1])
            and diff[k] * diff[k + 1] <= 0
            and diff[k] != diff[k + 1]
        ):
            size = t[k] + (t[k + 1] - t[k]) * (-diff[k]) / (diff[k + 1] - diff[k])
            break
    if math.isnan(size):
        size = t[best]
    # Contiguous run of in-tolerance thresholds that contains the size threshold.
    k0 = int(np.argmin(np.abs(t - size)))
    if not ok[k0]:
        k0 = int(np.flatnonzero(ok)[np.argmin(np.abs(np.flatnonzero(ok) - k0))])
    a = k0
    while a > 0 and ok[a - 1]:
        a -= 1
    b = k0
    while b < len(t) - 1 and ok[b + 1]:
        b += 1
    if cd_at is None:
        return size, t[a], t[b]
    ends = ((a, a - 1), (b, b + 1))
    return size, *(exact_end(t, cd, k, out, target, tol, cd_at) for k, out in ends)


def exact_end(t, cd, k, out, target, tol, cd_at) -> float:
    """The window end between sample ``k`` (in tolerance) and ``out`` (beyond it, or
    off the samples: then ``t[k]``), where the CD meets the bound it crosses."""
    if not 0 <= out < len(t):
        return float(t[k])
    below = np.isfinite(cd[out]) and cd[out] < target
    bound = target * (1 - tol) if below else target * (1 + tol)
    one = np.zeros(1, dtype=np.int64)
    return float(
        refine_crossing(lambda _, tt: cd_at(tt), one, t[k : k + 1], t[out : out + 1], bound)[0]
    )


def evaluate(
    x: np.ndarray,
    images: np.ndarray,
    focus_nm: np.ndarray,
    feature: tuple[float, float],
    search: tuple[float, float],
    bright: bool,
    drawn_cd: float,
    nominal_threshold: float | None,
    tol: float,
    el_min_pct: float,
    edge_values: tuple[np.ndarray, np.ndarray] | None = None,
    reach_nm: float = math.inf,
    values_at=None,
) -> Metrics:
    """Metrics of one feature from its images through focus.

    Parameters
    ----------
    x
        Sample positions (nm, increasing) shared by all images.
    images
        ``(n_focus, len(x))`` intensities; ``focus_nm`` the matching focus
        values; the one closest to 0 is best focus.
    feature
        Drawn feature ``(left, right)`` in nm.
    search
        Where its printed edges may lie ``(lo, hi)``: beyond, it has run into
        a neighbour (the middle of each neighbouring space).
    bright
        True for an opening (prints where the image is above threshold).
    nominal_threshold
        The anchored threshold; None to size every feature at its own dose.
    edge_values
        ``(I, dI/dx)`` at the two drawn edges at best focus (exact values from
        the engine; estimated from the samples when not given): the NILS of a
        feature that is lost or bridged.  Where it prints, NILS is taken at the
        printed edges, where the resist sees it.
    reach_nm
        How far from the feature the image stands for the layout (a cut's
        interaction range): side lobes are looked for within it.
    values_at
        ``values_at(positions (1, 2)) -> (I, dI/dx)`` exact from the engine at
        best focus: the printed edges' slope; estimated from the samples
        when not given.
    """
    best = int(np.argmin(np.abs(focus_nm)))
    inten0 = images[best]
    left, right = feature
    centre = 0.5 * (left + right)
    lo, hi = search
    region = (x >= min(lo, left)) & (x <= max(hi, right))
    imax, imin = float(inten0[region].max()), float(inten0[region].min())
    contrast = (imax - imin) / (imax + imin) if imax + imin > 0 else 0.0
    if edge_values is None:
        i_e = np.interp([left, right], x, inten0)
        d_e = np.interp([left, right], x, np.gradient(inten0, x))
    else:
        i_e, d_e = edge_values

    span_lo, span_hi = float(images.min()), float(images.max())
    t = np.linspace(span_lo, span_hi, THRESHOLD_SAMPLES)
    windows = []
    for f in range(len(focus_nm)):
        cd = cd_of_thresholds(x, images[f], centre, lo, hi, bright, t)

        def cd_at(tt, img=images[f]):
            return cd_of_thresholds(x, img, centre, lo, hi, bright, tt)

        windows.append(_threshold_window(t, cd, drawn_cd, tol, cd_at))
    t_size, ta, tb = windows[best]
    if nominal_threshold is None:
        edge_mean = float(np.interp([left, right], x, inten0).mean())
        t_nom = t_size if math.isfinite(t_size) else edge_mean
    else:
        t_nom = nominal_threshold
    cd_nom = float(cd_of_thresholds(x, inten0, centre, lo, hi, bright, np.array([t_nom]))[0])
    lost = cd_nom <= 0.0
    bridged = math.isinf(cd_nom)
    epe = (math.nan, math.nan)
    if not (lost or bridged):
        edges = printed_edges(x, inten0, t_nom, bright, centre, (lo, hi))
        epe = (edges.left - left, edges.right - right)
        # NILS where the resist sees it: at the printed edges.
        if values_at is not None:
            i_p, d_p = values_at(np.array([[edges.left, edges.right]]))
            i_e, d_e = np.asarray(i_p)[0], np.asarray(d_p)[0]
        else:
            i_e = np.array([t_nom, t_nom])
            d_e = np.interp([edges.left, edges.right], x, np.gradient(inten0, x))
    with np.errstate(divide="ignore", invalid="ignore"):
        nils_each = drawn_cd * np.abs(d_e) / i_e
    nils = float(np.nanmin(nils_each)) if np.all(i_e > 0) else 0.0
    cd_err = math.nan
    if nominal_threshold is not None and not lost and not bridged:
        cd_err = 100.0 * (cd_nom - drawn_cd) / drawn_cd
    el = _el_pct(windows[best : best + 1], t_size)
    dof = _dof(focus_nm, windows, t_size, el_min_pct)
    # Dose D prints like threshold t_nom / D, so the dose on size is t_nom / t_size.
    dts = t_nom / t_size if (math.isfinite(t_size) and t_size > 0) else math.nan
    lobe, depth = side_lobe_codes(
        x,
        images[None],
        np.asarray(focus_nm, dtype=np.float64),
        *(np.array([v]) for v in (left, right, lo, hi)),
        bright,
        np.array([t_nom]),
        el_min_pct,
        np.array([reach_nm]),
    )
    # Python floats, not numpy scalars: metrics travel between processes in
    # every tiled scan, and a numpy scalar pickles to 5x the bytes, slower.
    return Metrics(
        contrast=float(contrast),
        nils=nils,
        cd_nm=cd_nom,
        cd_error_pct=float(cd_err),
        lost=lost,
        bridged=bridged,
        el_pct=float(el),
        dof_nm=float(dof),
        threshold=float(t_nom),
        dose_to_size=float(dts),
        side_lobe=int(lobe[0]),
        side_lobe_depth=float(depth[0]),
        epe_left_nm=float(epe[0]),
        epe_right_nm=float(epe[1]),
    )


def _dose_range(window):
    """Relative dose range (1/threshold) of a threshold window (the same for both tones)."""
    _, ta, tb = window
    if not (math.isfinite(ta) and math.isfinite(tb)) or ta <= 0:
        return math.nan, math.nan
    # Dose D prints like threshold t0 / D: the window [ta, tb] is doses [1/tb, 1/ta].
    return 1.0 / tb, 1.0 / ta


def _el_pct(windows, t_size) -> float:
    """Common dose latitude of several focus windows, in % of the dose-to-size."""
    if not math.isfinite(t_size) or t_size <= 0:
        return 0.0
    lows, highs = [], []
    for w in windows:
        d0, d1 = _dose_range(w)
        if math.isnan(d0):
            return 0.0
        lows.append(d0)
        highs.append(d1)
    width = min(highs) - max(lows)
    return max(0.0, 100.0 * width * t_size)


def _dof(focus_nm, windows, t_size, el_min_pct) -> float:
    """Longest contiguous focus span (containing best focus or not) keeping EL >= el_min,
    the dose windows carried between focus samples (:mod:`focus_windows`)."""
    order = np.argsort(focus_nm)
    f = np.asarray(focus_nm, dtype=np.float64)[order]
    lows, highs = np.array([_dose_range(windows[k]) for k in order], dtype=np.float64).T
    g, lo, hi = fine_windows_plain(f, lows, highs)
    if not (math.isfinite(t_size) and t_size > 0):
        return 0.0
    n = len(g)
    lat = np.full((n, n), -np.inf)
    for i in range(n):
        common_lo, common_hi = -np.inf, np.inf
        for j in range(i, n):
            common_lo, common_hi = max(common_lo, lo[j]), min(common_hi, hi[j])
            lat[i, j] = max(0.0, 100.0 * (common_hi - common_lo) * t_size)
    return focus_span(g, lat, el_min_pct)
