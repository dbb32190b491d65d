"""The layout picture of a finding: its region, the neighbours in range and the imaged cut."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pitchguard.deck import Deck, LayerRule
from pitchguard.judge.findings import Finding
from pitchguard.layout.polygons import PolygonSet
from pitchguard.outputs.html import PICTURED_GROUPS
from pitchguard.outputs.html.groups import group_findings
from pitchguard.outputs.html.style import (
    CUT_COLOUR,
    FAR_SHAPES,
    LAYOUT_AXES,
    LAYOUT_PX,
    NEIGHBOUR_SHAPES,
    OWN_SHAPES,
    SEVERITY_COLOUR,
    figure_text,
    length_text,
    new_figure,
    nice_length,
    png_base64,
    white_halo,
)
from pitchguard.outputs.html.text import feature_word
from pitchguard.run.scan import ScanResult

MAX_VIEW_RANGES = 10.0
"""A layout picture spans at most this many interaction ranges; larger regions are shown around the
worst site."""


MAX_DRAWN_SHAPES = 4000
"""Shapes drawn per layout picture at most (the nearest to the cut)."""


@dataclass
class CutPicture:
    """What the layout picture learned about the cut, for the image picture."""

    mirrored: bool = False


def draw_layout(
    f: Finding, rule: LayerRule, polygons: PolygonSet, boxes: np.ndarray, scale: float
) -> tuple[str, str, CutPicture]:
    """PNG (base64) of the layout around ``f``, a caption, and the cut's orientation.

    ``polygons`` are the layer's shapes (nm as drawn), ``boxes`` their
    bounding boxes, ``scale`` the deck's drawn-to-wafer factor.
    """
    info = CutPicture()
    reach = rule.interaction_range_nm / scale
    x0, y0, x1, y1 = f.bbox_nm
    (vx0, vy0, vx1, vy1), clamped, (cx_focus, cy_focus) = view_window(f, reach)
    ox, oy = f.cut_origin_nm
    has_cut = math.isfinite(ox) and math.isfinite(oy) and math.isfinite(f.cut_angle_deg)
    hit = np.flatnonzero(
        (boxes[:, 2] >= vx0) & (boxes[:, 0] <= vx1) & (boxes[:, 3] >= vy0) & (boxes[:, 1] <= vy1)
    )
    dropped = 0
    if len(hit) > MAX_DRAWN_SHAPES:
        mid = (boxes[hit, :2] + boxes[hit, 2:]) / 2
        dist = np.hypot(mid[:, 0] - cx_focus, mid[:, 1] - cy_focus)
        dropped = len(hit) - MAX_DRAWN_SHAPES
        hit = hit[np.argsort(dist, kind="stable")[:MAX_DRAWN_SHAPES]]
    polys = [polygons.polygon(int(k)) for k in hit]
    # The region's own shapes overlap its outline; neighbours overlap the outline grown
    # by the interaction range (tested in the outline's frame); the rest are context.
    out = np.asarray(f.outline_nm, dtype=float)
    # Kinds: 0 own, 1 within the interaction range, 2 beyond.
    kind = np.full(len(polys), 1, dtype=np.int8)
    grown = None
    if out.shape == (4, 2):
        kind = np.array([_overlap_class(p, out, reach) for p in polys], dtype=np.int8)
        grown = _grow_outline(out, reach)

    fig = new_figure(LAYOUT_PX)
    ax = fig.add_axes(LAYOUT_AXES)
    from matplotlib.collections import PolyCollection

    styles = (
        (2, FAR_SHAPES, "#c3cbd3"),
        (1, NEIGHBOUR_SHAPES, "#7f8c99"),
        (0, OWN_SHAPES, "#1c2833"),
    )
    for code, face, edge in styles:
        chosen = [p for p, c in zip(polys, kind, strict=True) if c == code]
        if chosen:
            ax.add_collection(
                PolyCollection(chosen, facecolors=face, edgecolors=edge, linewidths=0.3)
            )
    if grown is not None:
        ring = np.vstack([grown, grown[:1]])
        ax.plot(ring[:, 0], ring[:, 1], color="#7f8c99", lw=0.9, ls=(0, (1, 2)))
    colour = SEVERITY_COLOUR.get(f.severity, "#333333")
    if out.shape == (4, 2):
        ring = np.vstack([out, out[:1]])
        ax.plot(ring[:, 0], ring[:, 1], color=colour, lw=1.6, ls=(0, (4, 2)))
    if has_cut:
        a = math.radians(f.cut_angle_deg)
        n = np.array([math.cos(a), math.sin(a)])
        centre = np.array([ox, oy]) - n * (f.width_nm / 2 if math.isfinite(f.width_nm) else 0.0)
        p0, p1 = centre - n * reach, centre + n * reach
        halo = white_halo(3.5)
        ax.annotate(
            "",
            xy=tuple(p1),
            xytext=tuple(p0),
            zorder=4,
            arrowprops={
                "arrowstyle": "-|>,head_length=0.7,head_width=0.35",
                "color": CUT_COLOUR,
                "lw": 2.0,
                "shrinkA": 0,
                "shrinkB": 0,
                "path_effects": halo,
            },
        )
        t = np.array([-n[1], n[0]]) * reach * 0.08
        ax.plot(
            [p0[0] - t[0], p0[0] + t[0]],
            [p0[1] - t[1], p0[1] + t[1]],
            color=CUT_COLOUR,
            lw=2.0,
            zorder=4,
            path_effects=halo,
        )
        ax.plot([ox], [oy], marker="o", ms=6, mfc="white", mec=CUT_COLOUR, mew=2.0, zorder=5)
        info.mirrored = _imaged_cut_mirrored(f, polys, centre, n, reach, scale)
    ax.set_xlim(vx0, vx1)
    ax.set_ylim(vy0, vy1)
    ax.set_aspect("equal", adjustable="box")
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    fmt = FuncFormatter(lambda v, _pos: f"{v / 1000:.2f}")
    for axis in (ax.xaxis, ax.yaxis):
        axis.set_major_formatter(fmt)
        axis.set_major_locator(MaxNLocator(4))
    ax.tick_params(labelsize=7, length=2)
    ax.set_xlabel("x (µm, as drawn)", fontsize=7, labelpad=1)
    ax.set_ylabel("y (µm, as drawn)", fontsize=7, labelpad=1)
    # Scale bar: bottom left, on a white patch.
    width = vx1 - vx0
    bar = nice_length(width / 4)
    bx, by = vx0 + 0.04 * width, vy0 + 0.05 * (vy1 - vy0)
    ax.plot(
        [bx, bx + bar],
        [by, by],
        color="black",
        lw=3,
        solid_capstyle="butt",
        path_effects=white_halo(),
    )
    ax.text(
        bx + bar / 2,
        by + 0.025 * (vy1 - vy0),
        length_text(bar),
        ha="center",
        va="bottom",
        fontsize=7.5,
        path_effects=white_halo(),
    )
    ax.set_title(f"{figure_text(f.layer)} ({f.source}) around the region", fontsize=8.5, pad=3)
    png = png_base64(fig)
    fw = feature_word(rule)
    cap = (
        f"Dark: the region's drawn {fw}s (dashed outline); grey: neighbours within the "
        f"optical interaction range ({rule.interaction_range_nm:.0f} nm, wafer; dotted); "
        "pale: farther shapes."
    )
    if has_cut:
        cap += (
            " Arrow: the cut through the worst edge (circle), ±range, pointing along +x of "
            "the image plot."
        )
    if clamped:
        cap += (
            f" The region ({(x1 - x0) / 1000:.2f} × {(y1 - y0) / 1000:.2f} µm) is "
            "larger than the picture: shown around the worst edge."
        )
    if dropped:
        cap += f" {dropped} farther shapes are not drawn."
    return png, cap, info


def _imaged_cut_mirrored(f: Finding, polys, centre, n, reach, scale: float) -> bool:
    """Whether the imaged (canonical) cut runs against the arrow.

    Cuts are stored as the smaller of a profile and its mirror image; the
    drawn material along the arrow tells which one this is.
    """
    if not f.cut_bounds_nm or not polys:
        return False
    from matplotlib.path import Path as MplPath

    t = np.linspace(-reach, reach, 401)[1:-1] + reach * 1e-4
    pts = centre[None, :] + t[:, None] * n[None, :]
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    drawn = np.zeros(len(t), dtype=bool)
    for p in polys:
        if (
            p[:, 0].max() < lo[0]
            or p[:, 0].min() > hi[0]
            or p[:, 1].max() < lo[1]
            or p[:, 1].min() > hi[1]
        ):
            continue
        drawn |= MplPath(p).contains_points(pts)
    tw = t * scale
    b = np.asarray(f.cut_bounds_nm)

    def material(x):
        k = np.searchsorted(b, x, side="right")
        return (k % 2) == 1

    forward = int((material(tw) == drawn).sum())
    backward = int((material(-tw) == drawn).sum())
    return backward > forward


def _grow_outline(out: np.ndarray, pad: float) -> np.ndarray:
    """The oriented rectangle ``out`` (4 corners) grown by ``pad`` on every side."""
    u, v = out[1] - out[0], out[3] - out[0]
    lu, lv = float(np.hypot(*u)), float(np.hypot(*v))
    du = u / lu if lu > 0 else np.array([1.0, 0.0])
    dv = v / lv if lv > 0 else np.array([-du[1], du[0]])
    o = out[0] - pad * du - pad * dv
    su, sv = du * (lu + 2 * pad), dv * (lv + 2 * pad)
    return np.array([o, o + su, o + su + sv, o + sv])


def _overlap_class(poly: np.ndarray, out: np.ndarray, pad: float) -> int:
    """0: the polygon overlaps the oriented rectangle ``out``; 1: it overlaps it grown by
    ``pad``; 2: neither (projections on the rectangle's axes)."""
    u, v = out[1] - out[0], out[3] - out[0]
    best = 0
    for axis in (u, v):
        length = float(np.hypot(*axis))
        if length <= 0:
            continue
        t = (poly - out[0]) @ (axis / length)
        gap = max(float(t.min()) - length, -float(t.max()), 0.0)
        if gap > pad + 1e-9:
            return 2
        if gap > 1e-9:
            best = 1
    return best


def view_window(f: Finding, reach: float) -> tuple[tuple, bool, tuple[float, float]]:
    """The layout window (nm) a finding's picture shows: ``(window, clamped, focus)``.

    The region plus one interaction range, clamped to ``MAX_VIEW_RANGES`` interaction ranges around
    the worst site's cut (``clamped``), widened to the axes' aspect ratio.
    """
    x0, y0, x1, y1 = f.bbox_nm
    vx0, vy0, vx1, vy1 = x0 - reach, y0 - reach, x1 + reach, y1 + reach
    ox, oy = f.cut_origin_nm
    has_cut = math.isfinite(ox) and math.isfinite(oy) and math.isfinite(f.cut_angle_deg)
    limit = MAX_VIEW_RANGES * reach
    clamped = False
    cx, cy = (ox, oy) if has_cut else ((x0 + x1) / 2, (y0 + y1) / 2)
    if vx1 - vx0 > limit:
        vx0, vx1 = cx - limit / 2, cx + limit / 2
        clamped = True
    if vy1 - vy0 > limit:
        vy0, vy1 = cy - limit / 2, cy + limit / 2
        clamped = True
    # Fill the axes: widen the shorter side of the view to the axes' aspect ratio.
    box_w, box_h = LAYOUT_AXES[2] * LAYOUT_PX[0], LAYOUT_AXES[3] * LAYOUT_PX[1]
    w, h = vx1 - vx0, vy1 - vy0
    if w / h < box_w / box_h:
        grow = (h * box_w / box_h - w) / 2
        vx0, vx1 = vx0 - grow, vx1 + grow
    else:
        grow = (w * box_h / box_w - h) / 2
        vy0, vy1 = vy0 - grow, vy1 + grow
    return (vx0, vy0, vx1, vy1), clamped, (cx, cy)


def picture_windows(
    result: ScanResult, deck: Deck, max_groups: int = PICTURED_GROUPS
) -> list[tuple]:
    """Layout windows (nm) the pictures of the HTML report show (:func:`view_window`).

    For scans that kept no geometry (tiled scans): the caller reads these
    windows back from the layout before rendering.
    """
    rules = {r.name: r for r in deck.layers}
    out = []
    for g in group_findings(result.findings)[: max(0, max_groups)]:
        rule = rules.get(g.first.layer)
        if rule is not None:
            out.append(view_window(g.first, rule.interaction_range_nm / deck.scale_to_wafer)[0])
    return out
