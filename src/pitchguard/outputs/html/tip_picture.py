"""Aerial-image pictures of findings judged on 2-D clips: line ends and features on
their own."""

from __future__ import annotations

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.judge.findings import Finding
from pitchguard.outputs.html.array_picture import image_2d_png
from pitchguard.outputs.html.style import figure_text
from pitchguard.outputs.html.text import feature_word


def tip_picture(f: Finding, rule: LayerRule, scale: float) -> tuple[str | None, str]:
    """PNG (base64) of the best-focus image of ``f``'s clip (the tip's frame, wafer
    nm) with the printed contour and the drawn shapes, and a caption."""
    from pitchguard.optics.aerial import Optics, mask_amplitudes
    from pitchguard.optics.aerial2d import (
        cell_spectra,
        coherent_systems_2d,
        default_samples,
        exposure_orders,
        image_axes,
    )
    from pitchguard.optics.tips import tip_cell, tip_window

    t = f.tip
    rects = np.array(t.rects_nm, dtype=np.float64).reshape(-1, 4) * scale
    cell = tip_cell(rule, rects)
    e = rule.exposure
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    nx, ny = default_samples(orders, Optics.of(e))
    feat, bg = mask_amplitudes(e, rule.field)
    spec = cell_spectra([cell], orders, feat, bg)
    sys = coherent_systems_2d(e, cell.px_nm, cell.py_nm, 0.0, t.angle_deg, rule.resist_blur_nm)
    image = sys.image(spec, nx, ny, (0.0, 0.0))[0]
    x, y = image_axes(orders, nx, ny, (0.0, 0.0))
    cx, cy = cell.origin_nm
    x, y = x + cx, y + cy  # the tip's frame
    (wx, wy), (hx, hy) = tip_window(rule)
    inside_x = (x >= wx - hx) & (x <= wx + hx)
    inside_y = (y >= wy - hy) & (y <= wy + hy)
    x, y, image = x[inside_x], y[inside_y], image[np.ix_(inside_y, inside_x)]
    png = image_2d_png(
        x,
        y,
        image,
        f.threshold,
        rects,
        "x (nm, wafer; the tip at 0, the gap towards +x)",
        f"Aerial image around the line end ({figure_text(rule.exposure_name)})",
    )
    fw = feature_word(rule)
    cap = (
        f"Best-focus image of the clip around the line end, bright = light (clear = 1). "
        f"Dashed: the drawn {fw}s. Solid line: what prints at the nominal threshold "
        f"{f.threshold:.3f}."
    )
    return png, cap


def alone_picture(f: Finding, rule: LayerRule, ps, boxes, scale: float) -> tuple[str | None, str]:
    """PNG (base64) of the best-focus image of the clip a feature on its own was judged
    on (rebuilt from the layout around it), and a caption."""
    import math

    from pitchguard.geometry.rectangles import frame_rectangles
    from pitchguard.optics.aerial import Optics, mask_amplitudes
    from pitchguard.optics.aerial2d import (
        cell_spectra,
        coherent_systems_2d,
        default_samples,
        exposure_orders,
        image_axes,
    )
    from pitchguard.optics.compact_clips import clip_window, feature_cell

    if ps is None:
        return None, "Layout geometry is not available for this layer."
    centre = np.asarray(f.cut_origin_nm, dtype=np.float64)
    angle = f.array.feature_angle_deg
    half = clip_window(rule) / scale
    r = half * math.sqrt(2.0)
    near = np.flatnonzero(
        (boxes[:, 0] <= centre[0] + r)
        & (boxes[:, 2] >= centre[0] - r)
        & (boxes[:, 1] <= centre[1] + r)
        & (boxes[:, 3] >= centre[1] - r)
    )
    rects = frame_rectangles(ps, near, centre, angle, (-half, -half, half, half), 1.01, {})
    if rects is None:
        return None, "The shapes around the feature are not Manhattan in its frame: no picture."
    rects = rects * scale
    cell = feature_cell(rule, rects)
    e = rule.exposure
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    nx, ny = default_samples(orders, Optics.of(e))
    spec = cell_spectra([cell], orders, *mask_amplitudes(e, rule.field))
    image = coherent_systems_2d(e, cell.px_nm, cell.py_nm, 0.0, angle, rule.resist_blur_nm).image(
        spec, nx, ny
    )[0]
    x, y = image_axes(orders, nx, ny)
    h = half * scale
    keep_x, keep_y = np.abs(x) <= h, np.abs(y) <= h
    png = image_2d_png(
        x[keep_x],
        y[keep_y],
        image[np.ix_(keep_y, keep_x)],
        f.threshold,
        rects,
        "x (nm, wafer; the feature's frame)",
        f"Aerial image around the feature ({figure_text(rule.exposure_name)})",
    )
    fw = feature_word(rule)
    cap = (
        f"Best-focus image of the clip around the feature, bright = light (clear = 1). "
        f"Dashed: the drawn {fw}s. Solid line: what prints at the nominal threshold "
        f"{f.threshold:.3f}."
    )
    return png, cap
