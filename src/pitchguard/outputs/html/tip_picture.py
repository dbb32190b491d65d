"""The aerial-image picture of a line-end finding: the 2-D image of its clip."""

from __future__ import annotations

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.judge.findings import Finding
from pitchguard.outputs.html.array_picture import image_2d_png
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
    sys = coherent_systems_2d(e, cell.px_nm, cell.py_nm, 0.0, t.angle_deg)
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
        f"Aerial image around the line end ({rule.exposure_name})",
    )
    fw = feature_word(rule)
    cap = (
        f"Best-focus image of the clip around the line end, bright = light (clear = 1). "
        f"Dashed: the drawn {fw}s. Solid line: what prints at the nominal threshold "
        f"{f.threshold:.3f}."
    )
    return png, cap
