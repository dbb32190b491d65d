"""The aerial-image picture of a finding: the image across its cut and the printed edges."""

from __future__ import annotations

import math

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.judge.findings import Finding
from pitchguard.optics.resist import printed_edges
from pitchguard.outputs.html.style import (
    DEFOCUS_COLOUR,
    IMAGE_COLOUR,
    IMAGE_PX,
    PRINTED_COLOUR,
    THRESHOLD_COLOUR,
    figure_text,
    new_figure,
    png_base64,
)
from pitchguard.outputs.html.text import feature_word


def oriented_bounds(f: Finding, mirrored: bool) -> np.ndarray:
    """The cut's material boundaries (wafer nm) with + along the picture's arrow."""
    b = np.asarray(f.cut_bounds_nm, dtype=float)
    return -b[::-1] if mirrored else b


def search_window(
    bounds: np.ndarray, feat: tuple[float, float] | None
) -> tuple[float, float] | None:
    """Where the feature's printed edges may lie: to the middle of each neighbouring space
    (the convention of :attr:`pitchguard.geometry.cuts.Cut.search`)."""
    if feat is None:
        return None
    b = [float(v) for v in bounds]
    k = b.index(feat[0])
    lo = 0.5 * (feat[0] + b[k - 1]) if k >= 1 else -math.inf
    hi = 0.5 * (feat[1] + b[k + 2]) if k + 2 < len(b) else math.inf
    return lo, hi


def draw_image(
    f: Finding,
    rule: LayerRule,
    x: np.ndarray,
    inten: np.ndarray,
    i_def: np.ndarray | None,
    mirrored: bool,
    scale: float,
) -> tuple[str, str]:
    """PNG (base64) of the image across ``f``'s cut and a caption.

    ``inten`` is the best-focus image at ``x`` (wafer nm, as stored), ``i_def``
    the image at the edge of the focus range or None; ``mirrored`` turns the
    plot to run along the layout picture's arrow.
    """
    bounds = oriented_bounds(f, mirrored)
    if mirrored:
        x, inten = -x[::-1], inten[::-1]
        i_def = i_def[::-1] if i_def is not None else None
    bright = rule.field == "dark"
    fw = feature_word(rule)
    pairs = [(bounds[k], bounds[k + 1]) for k in range(0, len(bounds) - 1, 2)]
    feat = next(((a, b) for a, b in pairs if a <= 1e-9 and b >= -1e-9), None)
    fig = new_figure(IMAGE_PX)
    ax = fig.add_axes((0.10, 0.15, 0.88, 0.76))
    if feat is not None:
        drawn_cd = f.width_nm * scale if math.isfinite(f.width_nm) else feat[1] - feat[0]
        ax.axvspan(feat[0], feat[1], color="#9aa7b4", lw=0, label=f"drawn {fw} ({drawn_cd:.0f} nm)")
    label = "drawn neighbours"
    for a, b in pairs:
        if (a, b) != feat:
            ax.axvspan(a, b, color="#d5dbe1", lw=0, label=label)
            label = None
    if i_def is not None:
        ax.plot(
            x,
            i_def,
            color=DEFOCUS_COLOUR,
            lw=1.1,
            ls="--",
            label=f"defocus {rule.focus_half_range_nm:.0f} nm",
        )
    ax.plot(x, inten, color=IMAGE_COLOUR, lw=1.8, label="image, best focus")
    t = f.threshold
    notes = []
    if math.isfinite(t):
        ax.axhline(t, color=THRESHOLD_COLOUR, lw=1.1, ls=(0, (5, 2)), label=f"threshold {t:.3f}")
        centre = 0.0 if feat is None else 0.5 * (feat[0] + feat[1])
        left, right, state = printed_edges(x, inten, t, bright, centre, search_window(bounds, feat))
        mark = "^" if bright else "v"
        for e in (left, right):
            if e is not None:
                ax.plot([e], [t], marker=mark, ms=7, color=PRINTED_COLOUR, zorder=5)
                ax.axvline(e, color=PRINTED_COLOUR, lw=0.9, ls=":")
        if state == "printed":
            ax.plot(
                [],
                [],
                marker=mark,
                ls=":",
                color=PRINTED_COLOUR,
                label=f"printed edges ({right - left:.1f} nm)",
            )
        elif left is not None or right is not None:
            span = f" ({right - left:.0f} nm)" if left is not None and right is not None else ""
            ax.plot(
                [],
                [],
                marker=mark,
                ls=":",
                color=PRINTED_COLOUR,
                label=f"threshold crossings{span}",
            )
        if state == "lost":
            notes.append(
                f"the {fw} does not print: at its centre the image stays on the "
                "wrong side of the threshold"
            )
        elif state == "bridged":
            notes.append(
                f"the printed {fw} runs into its neighbour: the nearest "
                "threshold crossing lies beyond the middle of the neighbouring "
                "space"
            )
    ymax = max(1.05, float(np.nanmax(inten)) * 1.08)
    if i_def is not None:
        ymax = max(ymax, float(np.nanmax(i_def)) * 1.08)
    ax.set_ylim(0, ymax * 1.18)
    ax.set_xlim(float(x[0]), float(x[-1]))
    ax.tick_params(labelsize=7, length=2)
    ax.set_xlabel(
        f"position along the cut (nm, wafer); 0 = centre of the drawn {fw}, + along the arrow",
        fontsize=7,
        labelpad=1,
    )
    ax.set_ylabel("intensity (clear = 1)", fontsize=7, labelpad=1)
    ax.set_title(
        f"Aerial image across the cut ({figure_text(rule.exposure_name)})", fontsize=8.5, pad=3
    )
    ax.legend(
        fontsize=7,
        loc="upper center",
        ncol=3,
        frameon=False,
        handlelength=1.8,
        columnspacing=1.2,
    )
    png = png_base64(fig)
    verdict = "".join(n[0].upper() + n[1:] + ". " for n in notes)
    cap = verdict + (
        f"x is along the cut, the {fw} centred at 0 (wafer nm). Grey bands: the drawn "
        f"{fw} (dark) and its neighbours (light). Markers: where the best-focus image "
        "crosses the threshold nearest the feature (the printed edges)."
    )
    return png, cap
