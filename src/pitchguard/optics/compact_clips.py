"""A compact feature on its own (a via or contact with no other of its shape within
reach) imaged on a 2-D clip of its surroundings.

The clip frame puts the feature's centre at the origin with its edges along
the axes.  Every clip of a layer is imaged in one window (``clip_window``:
the widest compact feature and REACH_LAMBDA_NA around it, padded by lambda/NA),
so the coherent systems are shared.  The image is evaluated only where the
metrics read it: along x and y through the centre (sizes, exposure latitude,
depth of focus by :func:`resist2d.axis_metrics`), on the two diagonals
(whether the printed feature runs into a neighbour), and at the four drawn
edge midpoints (NILS), each focus once per |z| (a real mask under a
point-symmetric source images alike at +z and -z).
"""

from __future__ import annotations

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.optics.aerial import mask_amplitudes
from pitchguard.optics.aerial2d import (
    PointImages,
    cell_spectra,
    exposure_orders,
)
from pitchguard.optics.cells2d import Cell, clip_cell
from pitchguard.optics.resist2d import Metrics2D, anchor_threshold_2d, axis_metrics

REACH_LAMBDA_NA = 1.0
"""Shapes within this many lambda/NA of the feature are drawn in its clip."""

STEPS_PER_LAMBDA_NA = 24
"""Samples per lambda/NA along each line through the centre (crossings interpolated)."""


def clip_window(rule: LayerRule) -> float:
    """Half the side of the layer's square clip window (wafer nm, centred on the feature)."""
    return 0.5 * rule.compact_max_nm + REACH_LAMBDA_NA * rule.exposure.lambda_over_na_nm


def feature_cell(rule: LayerRule, rects_nm: np.ndarray) -> Cell:
    """The clip of ``rects_nm`` (wafer nm, feature frame) in the layer's window."""
    h = clip_window(rule)
    return clip_cell(
        rects_nm, rule.exposure.lambda_over_na_nm, centre_nm=(0.0, 0.0), half_extent_nm=(h, h)
    )


def _inside_others(px, py, others: np.ndarray) -> np.ndarray:
    """Which points lie inside one of the rectangles ``others`` (k, 4)."""
    if not len(others):
        return np.zeros(len(px), dtype=bool)
    o = others[None, :, :]
    return (
        (px[:, None] > o[..., 0])
        & (px[:, None] < o[..., 2])
        & (py[:, None] > o[..., 1])
        & (py[:, None] < o[..., 3])
    ).any(axis=1)


def alone_metrics(
    rule: LayerRule,
    rects_nm: np.ndarray,
    feature_nm: tuple[float, float],
    angle_deg: float,
    plain: bool = False,
) -> Metrics2D:
    """Metrics of the ``w x h`` feature centred at the origin of a clip of ``rects_nm``
    (wafer nm, feature frame turned by ``angle_deg`` in the layout).

    ``plain`` takes every image by the plain Abbe sum (see
    :class:`aerial2d.PointImages`): the reference the tests hold the fast path to."""
    e = rule.exposure
    lam_na = e.lambda_over_na_nm
    cell = feature_cell(rule, rects_nm)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    spec = cell_spectra([cell], orders, *mask_amplitudes(e, rule.field))
    w, h = feature_nm
    feature = (-0.5 * w, -0.5 * h, 0.5 * w, 0.5 * h)
    half = clip_window(rule)
    s = np.arange(-half, half + 1e-9, lam_na / STEPS_PER_LAMBDA_NA)
    n = len(s)
    sx = sy = s
    d = s / np.sqrt(2.0)
    zero = np.zeros(n)
    # Along x and y (every focus); along x, y and the two diagonals (best focus,
    # for the printed state).
    px = np.concatenate([sx, np.zeros(len(sy)), s, zero, d, d])
    py = np.concatenate([np.zeros(len(sx)), sy, zero, s, d, -d])
    near = slice(0, len(sx) + len(sy))
    lines_at = slice(near.stop, near.stop + 4 * n)
    focus = np.asarray(rule.focus_nm, dtype=np.float64)
    best = int(np.argmin(np.abs(focus)))
    image = PointImages(e, cell, spec[0], orders, px, py, angle_deg, plain=plain)

    done: dict[float, np.ndarray] = {}
    for z in np.abs(focus).tolist():
        if z not in done:
            done[z] = image(z, near)
    stack = np.stack([done[abs(float(z))] for z in focus])  # (F, near)
    rows, cols = stack[:, : len(sx)], stack[:, len(sx) :]
    lines = image(float(focus[best]), lines_at)  # x, y, both diagonals
    t_range = (float(min(stack.min(), lines.min())), float(max(stack.max(), lines.max())))
    # Exact values and slopes at the drawn edge midpoints, best focus.
    ex = np.array([feature[0], feature[2], 0.0, 0.0])
    ey = np.array([0.0, 0.0, feature[1], feature[3]])
    i_e, d_x, d_y = image.at(float(focus[best]), ex, ey)
    slopes = np.concatenate([d_x[:2], d_y[2:]])
    anchor = rule.anchor
    t_nom = anchor_threshold_2d(e, rule.field, anchor) if anchor is not None else None
    bright = rule.field == "dark"
    m = axis_metrics(
        sx,
        sy,
        rows,
        cols,
        focus,
        feature,
        bright,
        t_nom,
        rule.cd_tolerance_pct / 100.0,
        rule.el_min_pct,
        (i_e, slopes),
        ((float(sx[0]), float(sx[-1])), (float(sy[0]), float(sy[-1]))),
        t_range,
    )
    t = m.threshold
    printed = lines > t if bright else lines < t
    centre = n // 2  # s is symmetric about 0, so the middle sample is the centre
    missing = not bool(printed[centre])
    # Merged: along a line, the printed run through the centre reaches another
    # shape, or the window's edge (a copy of the feature, or a shape beyond reach).
    box = np.array(feature)
    c = cell.rect_array()
    touch = (c[:, 0] < box[2]) & (c[:, 2] > box[0]) & (c[:, 1] < box[3]) & (c[:, 3] > box[1])
    others = c[~touch]
    merged = False
    if not missing:
        for k in range(4):
            p = printed[k * n : (k + 1) * n]
            off = np.flatnonzero(~p)
            lo = off[off < centre].max() + 1 if (off < centre).any() else 0
            hi = off[off > centre].min() - 1 if (off > centre).any() else n - 1
            if lo == 0 or hi == n - 1:
                merged = True
                break
            sel = slice(lines_at.start + k * n + lo, lines_at.start + k * n + hi + 1)
            if _inside_others(px[sel], py[sel], others).any():
                merged = True
                break
    hi_, lo_ = float(lines[: 2 * n].max()), float(lines[: 2 * n].min())
    contrast = (hi_ - lo_) / (hi_ + lo_) if hi_ + lo_ > 0 else 0.0
    return m.with_printing(contrast, missing, merged)
