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

from functools import lru_cache

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.optics.aerial import mask_amplitudes
from pitchguard.optics.aerial2d import CellOrders, cell_spectra, exposure_orders
from pitchguard.optics.axis_batch import axis_metrics_batch
from pitchguard.optics.cells2d import Cell, clip_cell
from pitchguard.optics.point_images import PointImages, PointImagesBatch, plane_waves
from pitchguard.optics.resist2d import Metrics2D, anchor_threshold_2d, axis_metrics

REACH_LAMBDA_NA = 1.0
"""Shapes within this many lambda/NA of the feature are drawn in its clip."""

STEPS_PER_LAMBDA_NA = 24
"""Samples per lambda/NA along each line through the centre (crossings interpolated)."""

PRINTS = 1e9
"""An intensity far beyond any threshold: where a line through the feature is not imaged
at a focus, it is taken to print (no edge there)."""


def clip_window(rule: LayerRule) -> float:
    """Half the side of the layer's square clip window (wafer nm, centred on the feature)."""
    return 0.5 * rule.compact_max_nm + REACH_LAMBDA_NA * rule.exposure.lambda_over_na_nm


def feature_cell(rule: LayerRule, rects_nm: np.ndarray) -> Cell:
    """The clip of ``rects_nm`` (wafer nm, feature frame) in the layer's window."""
    h = clip_window(rule)
    return clip_cell(
        rects_nm, rule.exposure.lambda_over_na_nm, centre_nm=(0.0, 0.0), half_extent_nm=(h, h)
    )


@lru_cache(maxsize=16)
def _lines(orders: CellOrders, half: float, step: float):
    """Samples ``s`` along each line through the centre, the points of the x, y and two
    diagonal lines (best focus: sizes and the printed state; x and y near the feature
    at every other focus), and their plane waves: the same for every clip of a layer."""
    s = np.arange(-half, half + 1e-9, step)
    d = s / np.sqrt(2.0)
    zero = np.zeros(len(s))
    px = np.concatenate([s, zero, d, d])
    py = np.concatenate([zero, s, d, -d])
    basis = plane_waves(orders, px, py)
    for a in (s, px, py, basis):
        a.flags.writeable = False
    return s, px, py, basis


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
    :class:`point_images.PointImages`): the reference the tests hold the fast path to."""
    e = rule.exposure
    lam_na = e.lambda_over_na_nm
    cell = feature_cell(rule, rects_nm)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    spec = cell_spectra([cell], orders, *mask_amplitudes(e, rule.field))
    w, h = feature_nm
    feature = (-0.5 * w, -0.5 * h, 0.5 * w, 0.5 * h)
    s, px, py, basis = _lines(orders, clip_window(rule), lam_na / STEPS_PER_LAMBDA_NA)
    step = float(s[1] - s[0])
    n = len(s)
    focus = np.asarray(rule.focus_nm, dtype=np.float64)
    best = int(np.argmin(np.abs(focus)))
    image = PointImages(
        e, cell, spec[0], orders, px, py, angle_deg, plain, basis, rule.resist_blur_nm
    )
    lines = image(float(focus[best]))  # x, y, both diagonals
    tol = rule.cd_tolerance_pct / 100.0
    # A size within tolerance has both edges within (1 + tol) of the larger side
    # of the centre (the printed run holds the centre): the samples beyond are
    # set to print, so thresholds crossing there read as too large.
    close = np.abs(s) <= max(w, h) * (1.0 + tol) + 2.0 * step
    local = np.flatnonzero(np.concatenate([close, close]))
    bright = rule.field == "dark"
    beyond = np.full(2 * n, PRINTS if bright else -PRINTS)
    done: dict[float, np.ndarray] = {abs(float(focus[best])): lines[: 2 * n]}
    lo_, hi_ = float(lines.min()), float(lines.max())
    for z in np.abs(focus).tolist():
        if z not in done:
            row = beyond.copy()
            row[local] = image(z, local)
            lo_, hi_ = min(lo_, float(row[local].min())), max(hi_, float(row[local].max()))
            done[z] = row
    stack = np.stack([done[abs(float(z))] for z in focus])  # (F, 2n)
    rows, cols = stack[:, :n], stack[:, n:]
    t_range = (lo_, hi_)
    # Exact values and slopes at the drawn edge midpoints, best focus.
    ex = np.array([feature[0], feature[2], 0.0, 0.0])
    ey = np.array([0.0, 0.0, feature[1], feature[3]])
    i_e, d_x, d_y = image.at(float(focus[best]), ex, ey)
    slopes = np.concatenate([d_x[:2], d_y[2:]])
    anchor = rule.anchor
    t_nom = (
        anchor_threshold_2d(e, rule.field, anchor, rule.resist_blur_nm)
        if anchor is not None
        else None
    )
    m = axis_metrics(
        s,
        s,
        rows,
        cols,
        focus,
        feature,
        bright,
        t_nom,
        tol,
        rule.el_min_pct,
        (i_e, slopes),
        ((float(s[0]), float(s[-1])), (float(s[0]), float(s[-1]))),
        t_range,
    )
    return m.with_printing(*_printing(lines, m.threshold, bright, feature, cell, px, py))


def _printing(lines, t, bright, feature, cell: Cell, px, py) -> tuple[float, bool, bool]:
    """Contrast, missing and merged from the best-focus image ``lines`` along x, y and
    both diagonals through the feature's centre (threshold ``t``)."""
    n = len(lines) // 4
    printed = lines > t if bright else lines < t
    centre = n // 2  # the samples are symmetric about 0, so the middle one is the centre
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
            sel = slice(k * n + lo, k * n + hi + 1)
            if _inside_others(px[sel], py[sel], others).any():
                merged = True
                break
    hi_, lo_ = float(lines[: 2 * n].max()), float(lines[: 2 * n].min())
    contrast = (hi_ - lo_) / (hi_ + lo_) if hi_ + lo_ > 0 else 0.0
    return contrast, missing, merged


def alone_metrics_batch(
    rule: LayerRule,
    clips: list[tuple[np.ndarray, tuple[float, float]]],
    angle_deg: float,
) -> list[Metrics2D]:
    """:func:`alone_metrics` of many clips ``(rects_nm, (w, h))`` turned alike, as
    arrays over clip x focus x threshold (:class:`point_images.PointImagesBatch`,
    :func:`axis_batch.axis_metrics_batch`); ``alone_metrics`` is its plain twin."""
    e = rule.exposure
    lam_na = e.lambda_over_na_nm
    cells = [feature_cell(rule, r) for r, _ in clips]
    orders = exposure_orders(e, cells[0].px_nm, cells[0].py_nm)
    spec = cell_spectra(cells, orders, *mask_amplitudes(e, rule.field))
    s, px, py, basis = _lines(orders, clip_window(rule), lam_na / STEPS_PER_LAMBDA_NA)
    step = float(s[1] - s[0])
    n, nb = len(s), len(clips)
    sizes = np.array([f for _, f in clips], dtype=np.float64).reshape(nb, 2)
    focus = np.asarray(rule.focus_nm, dtype=np.float64)
    best = int(np.argmin(np.abs(focus)))
    images = PointImagesBatch(e, cells[0], spec, orders, angle_deg, basis, rule.resist_blur_nm)
    lines = images(float(focus[best]))  # (B, 4n): x, y, both diagonals
    tol = rule.cd_tolerance_pct / 100.0
    bright = rule.field == "dark"
    zs = sorted(set(np.abs(focus).tolist()), key=lambda z: z != abs(float(focus[best])))
    zmap = np.array([zs.index(abs(float(z))) for z in focus])
    stack = np.full((nb, len(zs), 2 * n), PRINTS if bright else -PRINTS)
    stack[:, 0] = lines[:, : 2 * n]
    t_lo, t_hi = lines.min(axis=1), lines.max(axis=1)
    # As alone_metrics: at other focus only the samples a size within tolerance
    # can reach, per distinct feature size.
    kinds, which = np.unique(sizes.max(axis=1), return_inverse=True)
    for g, big in enumerate(kinds.tolist()):
        members = np.flatnonzero(which.ravel() == g)
        close = np.abs(s) <= big * (1.0 + tol) + 2.0 * step
        local = np.flatnonzero(np.concatenate([close, close]))
        for u, z in enumerate(zs[1:], start=1):
            part = images(z, local, members)
            stack[members[:, None], u, local[None, :]] = part
            t_lo[members] = np.minimum(t_lo[members], part.min(axis=1))
            t_hi[members] = np.maximum(t_hi[members], part.max(axis=1))
    w, h = sizes[:, 0], sizes[:, 1]
    zero = np.zeros(nb)
    ex = np.stack([-0.5 * w, 0.5 * w, zero, zero], axis=1)
    ey = np.stack([zero, zero, -0.5 * h, 0.5 * h], axis=1)
    i_e, d_x, d_y = images.at(float(focus[best]), ex, ey)
    slopes = np.concatenate([d_x[:, :2], d_y[:, 2:]], axis=1)
    anchor = rule.anchor
    t_nom = (
        anchor_threshold_2d(e, rule.field, anchor, rule.resist_blur_nm)
        if anchor is not None
        else None
    )
    ms = axis_metrics_batch(
        s,
        stack[:, :, :n],
        stack[:, :, n:],
        zmap,
        focus,
        sizes,
        bright,
        t_nom,
        tol,
        rule.el_min_pct,
        (i_e, slopes),
        np.stack([t_lo, t_hi], axis=1),
    )
    out = []
    for b, m in enumerate(ms):
        feature = (-0.5 * w[b], -0.5 * h[b], 0.5 * w[b], 0.5 * h[b])
        state = _printing(lines[b], m.threshold, bright, feature, cells[b], px, py)
        out.append(m.with_printing(*state))
    return out
