"""Line ends on a 2-D clip: where the printed tip ends, and whether the gap it faces
prints open, at best focus and through the layer's focus range.

The clip frame puts the drawn tip's middle at the origin with the line running
back along -x and the gap ahead along +x; the facing shape starts at
``x = gap``.  Every clip of a layer is imaged in one window (see
:func:`tip_window`), so all share their imaging systems; the image is taken
only along the line's axis (y = 0) and at two points on the line's drawn
edges, through :meth:`CoherentSystems2D.at`.

Threshold: the layer's anchor when it has one (the 1-D grating of
``optics.cut_images.anchor_threshold``); else the line is sized at its own
dose: the threshold is the mean image on its two drawn edges, half a
lambda/NA back from the tip (as OPC would size the line).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.optics.aerial import mask_amplitudes
from pitchguard.optics.aerial2d import cell_spectra, exposure_orders
from pitchguard.optics.cells2d import Cell, clip_cell
from pitchguard.optics.cut_images import anchor_threshold
from pitchguard.optics.point_images import PointImages

REACH_LAMBDA_NA = 1.0
"""Shapes within this many lambda/NA of the tip and the gap are drawn in a clip."""

GAP_MAX_LAMBDA_NA = 1.0
"""Gaps up to this many lambda/NA are imaged; wider ones are not judged."""

BODY_LAMBDA_NA = 0.5
"""How far back from the tip (lambda/NA, at most half the line's side) the line is
sized for the threshold."""

ROW_STEPS_PER_LAMBDA_NA = 32
"""Samples along the axis per lambda/NA (refined by interpolation at crossings)."""


@dataclass(frozen=True)
class TipMetrics:
    """What a line end's clip gives (wafer nm)."""

    threshold: float
    body_printed: bool  # the line prints where it is sized; else nothing is judged
    pullback_nm: float  # drawn tip minus printed tip at best focus (+ = short)
    gap_printed_nm: float  # the printed gap: from the printed tip to what it faces, best focus
    closed_at_best: bool  # the printed line runs into the facing shape
    closes_at_focus_nm: float  # least |focus| in the range at which it does; nan: never
    nils: float  # at the drawn tip along the axis, normalised by the line's width
    contrast: float  # of the image along the axis at best focus


def tip_window(rule: LayerRule) -> tuple[tuple[float, float], tuple[float, float]]:
    """The clip window of a layer (wafer nm, clip frame): centre and half extents.

    It holds the line back to REACH_LAMBDA_NA behind the tip, the widest gap
    imaged and REACH_LAMBDA_NA beyond it, and REACH_LAMBDA_NA either side of the
    widest line end (``compact_max_nm``)."""
    lam_na = rule.exposure.lambda_over_na_nm
    reach = REACH_LAMBDA_NA * lam_na
    gap = GAP_MAX_LAMBDA_NA * lam_na
    return (0.5 * gap, 0.0), (0.5 * gap + reach, 0.5 * rule.compact_max_nm + reach)


def tip_cell(rule: LayerRule, rects_nm: np.ndarray) -> Cell:
    """The clip of ``rects_nm`` (wafer nm, clip frame) in the layer's window."""
    centre, half = tip_window(rule)
    return clip_cell(
        rects_nm, rule.exposure.lambda_over_na_nm, centre_nm=centre, half_extent_nm=half
    )


def _crossing(x: np.ndarray, f: np.ndarray, k: int) -> float:
    """Where ``f`` (printed margin, > 0 printed) changes sign between samples k-1 and k."""
    a, b = f[k - 1], f[k]
    return float(x[k - 1] + (x[k] - x[k - 1]) * a / (a - b)) if a != b else float(x[k])


def tip_metrics(
    rule: LayerRule,
    rects_nm: np.ndarray,
    width_nm: float,
    gap_nm: float,
    side_nm: float,
    angle_deg: float,
    plain: bool = False,
) -> TipMetrics:
    """Metrics of a line end (see the module docstring); lengths wafer nm, the clip
    frame turned by ``angle_deg`` in the layout (it turns the source).

    ``plain`` takes every image by the plain Abbe sum (see
    :class:`point_images.PointImages`): the reference the tests hold the fast path to."""
    e = rule.exposure
    lam_na = e.lambda_over_na_nm
    cell = tip_cell(rule, rects_nm)
    cx, cy = cell.origin_nm
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    feat, bg = mask_amplitudes(e, rule.field)
    spec = cell_spectra([cell], orders, feat, bg)
    bright = rule.field == "dark"
    x_body = -min(BODY_LAMBDA_NA * lam_na, 0.5 * side_nm)
    step = lam_na / ROW_STEPS_PER_LAMBDA_NA
    # Along the axis from inside the line, across the gap and as far into what it
    # faces: the far side's own pullback opens the gap too.
    xs_all = np.arange(x_body, gap_nm - x_body, step)
    xs = xs_all[xs_all < gap_nm]  # the tip and the gap: what is judged
    h = 0.5 * width_nm
    # The axis, the two body edge points, and the tip.
    px = np.r_[xs, x_body, x_body, xs_all[len(xs) :]] - cx
    py = np.r_[np.zeros(len(xs)), -h, h, np.zeros(len(xs_all) - len(xs))] - cy
    focus = np.asarray(rule.focus_nm, dtype=np.float64)
    best = int(np.argmin(np.abs(focus)))
    images = PointImages(
        e, cell, spec[0], orders, px, py, angle_deg, plain, blur_nm=rule.resist_blur_nm
    )

    def image(k: int, points: slice = slice(None)) -> np.ndarray:
        return images(float(focus[k]), points)

    inten = image(best)
    t_anchor = anchor_threshold(rule)
    t = float(np.mean(inten[len(xs) : len(xs) + 2])) if t_anchor is None else t_anchor
    sign = 1.0 if bright else -1.0

    def margin(row: np.ndarray) -> np.ndarray:
        return sign * (row - t)  # > 0 where the line prints

    row = inten[: len(xs)]
    m = margin(row)
    m_all = np.r_[m, margin(inten[len(xs) + 2 :])]
    i_tip, d_tip, _ = images.at(float(focus[best]), [-cx], [-cy])
    nils = width_nm * abs(float(d_tip[0])) / float(i_tip[0]) if i_tip[0] > 0 else 0.0
    lo, hi = float(row.min()), float(row.max())
    contrast = (hi - lo) / (hi + lo) if hi + lo > 0 else 0.0
    if m[0] <= 0:
        return TipMetrics(t, False, math.nan, math.nan, False, math.nan, nils, contrast)
    off = np.flatnonzero(m <= 0)
    closed = not len(off)
    pullback = math.nan if closed else -_crossing(xs, m, int(off[0]))
    gap_printed = math.nan
    if not closed:
        # The unprinted run that starts at the tip, to where printing starts again.
        after = np.flatnonzero(m_all[off[0] :] > 0)
        far = _crossing(xs_all, m_all, int(off[0] + after[0])) if len(after) else xs_all[-1]
        gap_printed = float(far) + pullback
    closes_at = 0.0 if closed else math.nan
    if not closed:
        # A real mask under a point-symmetric source images alike at +z and -z
        # (``CoherentSystems2D.through_opposite_focus``; checked in the tests):
        # each |z| once.
        seen = {abs(float(focus[best]))}
        for k in np.argsort(np.abs(focus), kind="stable").tolist():
            if abs(float(focus[k])) in seen:
                continue
            seen.add(abs(float(focus[k])))
            if (margin(image(k, slice(0, len(xs)))) > 0).all():
                closes_at = abs(float(focus[k]))
                break
    return TipMetrics(
        threshold=t,
        body_printed=True,
        pullback_nm=pullback,
        gap_printed_nm=float(gap_printed),
        closed_at_best=closed,
        closes_at_focus_nm=closes_at,
        nils=nils,
        contrast=contrast,
    )
