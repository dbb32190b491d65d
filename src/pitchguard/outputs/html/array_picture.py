"""The aerial-image picture of an array finding: the 2-D image of its unit cell."""

from __future__ import annotations

import math

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.judge.findings import Finding
from pitchguard.outputs.html.style import (
    IMAGE_PX,
    PRINTED_COLOUR,
    figure_text,
    new_figure,
    png_base64,
)
from pitchguard.outputs.html.text import feature_word

SNAP_TOL_NM = 3.0
"""Basis components this close to an axis are on it (the extraction's tolerance at 1 nm)."""


def image_2d_png(x, y, image, threshold: float, boxes, xlabel: str, title: str) -> str:
    """PNG (base64) of a 2-D aerial image with its printed contour at ``threshold``
    and drawn rectangles ``boxes`` (x0, y0, x1, y1) dashed, equal axes."""
    from matplotlib.patches import Rectangle

    fig = new_figure(IMAGE_PX)
    ax = fig.add_axes((0.10, 0.15, 0.88, 0.76))
    ax.pcolormesh(x, y, image, shading="nearest", cmap="magma")
    if math.isfinite(threshold) and image.min() < threshold < image.max():
        ax.contour(x, y, image, levels=[threshold], colors=PRINTED_COLOUR, linewidths=1.2)
    for x0, y0, x1, y1 in boxes:
        ax.add_patch(
            Rectangle((x0, y0), x1 - x0, y1 - y0, fill=False, ec="#dddddd", ls="--", lw=0.8)
        )
    ax.set_aspect("equal")
    ax.set_xlim(float(x[0]), float(x[-1]))
    ax.set_ylim(float(y[0]), float(y[-1]))
    ax.tick_params(labelsize=7, length=2)
    ax.set_xlabel(xlabel, fontsize=7, labelpad=1)
    ax.set_ylabel("y (nm)", fontsize=7, labelpad=1)
    ax.set_title(title, fontsize=8.5, pad=3)
    return png_base64(fig)


def array_picture(f: Finding, rule: LayerRule, scale: float) -> tuple[str | None, str]:
    """PNG (base64) of the best-focus image of ``f``'s unit cell, 3 x 3 periods,
    with the printed contour and the drawn features, and a caption."""
    from pitchguard.judge.arrays import finding_cell
    from pitchguard.optics.resist2d import cell_metrics

    cell = finding_cell(rule, f, scale, SNAP_TOL_NM * scale)
    if cell is None or not rule.image_checks:
        return None, (
            "Not imaged (image checks off, or the lattice has no rectangular cell in the "
            "features' frame): judged by its diffraction orders and k1 only."
        )
    m, x, y, image = cell_metrics(rule, cell, angle_deg=f.array.feature_angle_deg, focus_nm=(0.0,))
    px, py = cell.px_nm, cell.py_nm
    tiled = np.tile(image, (3, 3))
    xs = np.concatenate([x - px, x, x + px])
    ys = np.concatenate([y - py, y, y + py])
    cx, cy = cell.centre_of(0)
    boxes = [
        (x0 - cx + i * px, y0 - cy + j * py, x1 - cx + i * px, y1 - cy + j * py)
        for x0, y0, x1, y1 in cell.rects_nm
        for i in (-1, 0, 1)
        for j in (-1, 0, 1)
    ]
    png = image_2d_png(
        xs,
        ys,
        tiled,
        m.threshold,
        boxes,
        "x (nm, wafer, the features' frame)",
        f"Aerial image of the unit cell ({figure_text(rule.exposure_name)})",
    )
    fw = feature_word(rule)
    printed = (
        "Nothing prints at the nominal threshold."
        if m.missing
        else f"Solid line: the printed {fw}s at the nominal threshold {m.threshold:.3f}."
    )
    cap = (
        f"Best-focus image of the array's periodic cell, 3 x 3 periods, bright = light "
        f"(clear = 1). Dashed: the drawn {fw}s. {printed} The array's last rows and "
        "columns see fewer neighbours than this."
    )
    return png, cap
