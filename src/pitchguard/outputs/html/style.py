"""Picture sizes, colours and small drawing helpers of the HTML report."""

from __future__ import annotations

import base64
import io
import math

from pitchguard.outputs.user_text import figure_text  # noqa: F401  (the pictures use it)

DPI = 90


LAYOUT_PX = (470, 340)


LAYOUT_AXES = (0.14, 0.13, 0.83, 0.80)


IMAGE_PX = (600, 340)


# Colours of this report.
SEVERITY_COLOUR = {"fail": "#b3261e", "risk": "#a85b00", "marginal": "#6a4c93"}


OWN_SHAPES = "#34495e"


NEIGHBOUR_SHAPES = "#a9b6c3"


FAR_SHAPES = "#eceff2"


CUT_COLOUR = "#00a19a"


IMAGE_COLOUR = "#1f4e79"


DEFOCUS_COLOUR = "#8aa9c6"


THRESHOLD_COLOUR = "#7d3c98"


PRINTED_COLOUR = "#c0392b"


def degrees_text(angle: float) -> str:
    return f"{round(angle % 180.0, 1) + 0.0:g}°"


def nice_length(target_nm: float) -> float:
    """1, 2 or 5 times a power of ten, at most ``target_nm``."""
    if target_nm <= 0 or not math.isfinite(target_nm):
        return 1.0
    p = 10 ** math.floor(math.log10(target_nm))
    for m in (5, 2, 1):
        if m * p <= target_nm:
            return m * p
    return p


def length_text(nm: float) -> str:
    return f"{nm / 1000:g} µm" if nm >= 1000 else f"{nm:g} nm"


def new_figure(px: tuple[int, int]):
    from matplotlib.figure import Figure

    return Figure(figsize=(px[0] / DPI, px[1] / DPI), dpi=DPI)


def png_base64(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    return base64.b64encode(buf.getvalue()).decode("ascii")


def white_halo(width: float = 2.5):
    from matplotlib import patheffects

    return [patheffects.withStroke(linewidth=width, foreground="white")]
