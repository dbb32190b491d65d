"""The HTML report's pictures: the layout around a finding and its aerial image."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pitchguard.deck import Deck, LayerRule
from pitchguard.judge.findings import Finding
from pitchguard.outputs.html.groups import group_findings
from pitchguard.outputs.html.style import (
    CUT_COLOUR,
    DEFOCUS_COLOUR,
    FAR_SHAPES,
    IMAGE_COLOUR,
    IMAGE_PX,
    LAYOUT_AXES,
    LAYOUT_PX,
    NEIGHBOUR_SHAPES,
    OWN_SHAPES,
    PRINTED_COLOUR,
    SEVERITY_COLOUR,
    THRESHOLD_COLOUR,
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


class FindingPictures:
    """Pictures for findings, with per-layer and per-cut caches."""

    def __init__(self, result: ScanResult, deck: Deck):
        self.result = result
        self.deck = deck
        self.scale = deck.scale_to_wafer
        self.rules = {r.name: r for r in deck.layers}
        self._bboxes: dict[tuple[int, int], np.ndarray] = {}
        self._images: dict[tuple, tuple[np.ndarray, np.ndarray, np.ndarray | None]] = {}

    # ---- layout clip

    def _layer(self, rule: LayerRule):
        lay = self.result.layout
        if lay is None:
            return None, None
        key = (rule.layer, rule.datatype)
        ps = lay.layers.get(key)
        if ps is None or len(ps) == 0:
            return None, None
        if key not in self._bboxes:
            self._bboxes[key] = ps.bounding_boxes()
        return ps, self._bboxes[key]

    def layout_picture(self, f: Finding) -> tuple[str | None, str, CutPicture]:
        """PNG (base64) of the layout around ``f``, a caption, and the cut's orientation."""
        rule = self.rules.get(f.layer)
        info = CutPicture()
        if rule is None:
            return None, "The deck has no layer of this name: no picture.", info
        ps, bb = self._layer(rule)
        if ps is None:
            return None, "Layout geometry is not available for this layer.", info
        reach = rule.interaction_range_nm / self.scale
        x0, y0, x1, y1 = f.bbox_nm
        (vx0, vy0, vx1, vy1), clamped, (cx_focus, cy_focus) = view_window(f, reach)
        ox, oy = f.cut_origin_nm
        has_cut = math.isfinite(ox) and math.isfinite(oy) and math.isfinite(f.cut_angle_deg)
        hit = np.flatnonzero(
            (bb[:, 2] >= vx0) & (bb[:, 0] <= vx1) & (bb[:, 3] >= vy0) & (bb[:, 1] <= vy1)
        )
        dropped = 0
        if len(hit) > MAX_DRAWN_SHAPES:
            mid = (bb[hit, :2] + bb[hit, 2:]) / 2
            dist = np.hypot(mid[:, 0] - cx_focus, mid[:, 1] - cy_focus)
            dropped = len(hit) - MAX_DRAWN_SHAPES
            hit = hit[np.argsort(dist, kind="stable")[:MAX_DRAWN_SHAPES]]
        polys = [ps.polygon(int(k)) for k in hit]
        # The region's own shapes overlap its outline; neighbours overlap the outline grown
        # by the interaction range (tested in the outline's frame); the rest are context.
        out = np.asarray(f.outline_nm, dtype=float)
        kind = np.full(
            len(polys), 1, dtype=np.int8
        )  # 0 own, 1 within the interaction range, 2 beyond
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
            info.mirrored = self._mirrored(f, rule, polys, centre, n, reach)
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
        ax.set_title(f"{f.layer} ({f.source}) around the region", fontsize=8.5, pad=3)
        png = png_base64(fig)
        fw = feature_word(rule)
        cap = (
            f"Dark: the region's drawn {fw}s (dashed outline); grey: neighbours within the "
            f"optical interaction range ({rule.interaction_range_nm:.0f} nm, wafer; dotted); "
            "pale: farther shapes. "
            "Arrow: the cut through the worst edge (circle), ±range, pointing along +x of "
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

    def _mirrored(self, f: Finding, rule: LayerRule, polys, centre, n, reach) -> bool:
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
        tw = t * self.scale
        b = np.asarray(f.cut_bounds_nm)

        def material(x):
            k = np.searchsorted(b, x, side="right")
            return (k % 2) == 1

        forward = int((material(tw) == drawn).sum())
        backward = int((material(-tw) == drawn).sum())
        return backward > forward

    # ---- aerial image

    def image(self, f: Finding, rule: LayerRule):
        """Best-focus image and the image at the edge of the focus range (cached per cut)."""
        from pitchguard.optics.cut_images import cut_image

        key = (rule.name, tuple(f.cut_bounds_nm), round(f.cut_angle_deg % 180.0, 1))
        hit = self._images.get(key)
        if hit is None:
            x, i0 = cut_image(rule, f.cut_bounds_nm, f.cut_angle_deg, 0.0)
            i_def = None
            if rule.focus_half_range_nm > 0 and len(rule.focus_nm) > 1:
                _, i_def = cut_image(
                    rule, f.cut_bounds_nm, f.cut_angle_deg, rule.focus_half_range_nm
                )
            hit = self._images[key] = (np.asarray(x), np.asarray(i0), i_def)
        return hit

    def image_picture(self, f: Finding, mirrored: bool) -> tuple[str | None, str]:
        rule = self.rules.get(f.layer)
        if rule is None or not f.cut_bounds_nm:
            return None, (
                "Not imaged (image checks off for this layer, or the site has no "
                "finite width): judged by diffraction orders and k1 only."
            )
        x, inten, i_def = self.image(f, rule)
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
            drawn_cd = f.width_nm * self.scale if math.isfinite(f.width_nm) else feat[1] - feat[0]
            ax.axvspan(
                feat[0], feat[1], color="#9aa7b4", lw=0, label=f"drawn {fw} ({drawn_cd:.0f} nm)"
            )
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
            ax.axhline(
                t, color=THRESHOLD_COLOUR, lw=1.1, ls=(0, (5, 2)), label=f"threshold {t:.3f}"
            )
            window = search_window(bounds, feat)
            left, right, state = printed_edges(x, inten, t, bright, feat, window)
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
        ax.set_title(f"Aerial image across the cut ({rule.exposure_name})", fontsize=8.5, pad=3)
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


def oriented_bounds(f: Finding, mirrored: bool) -> np.ndarray:
    """The cut's material boundaries (wafer nm) with + along the picture's arrow."""
    b = np.asarray(f.cut_bounds_nm, dtype=float)
    return -b[::-1] if mirrored else b


def cut_mirrored(result: ScanResult, deck: Deck, f: Finding) -> bool:
    """Whether ``f``'s stored (canonical) cut runs against the arrow drawn in its picture."""
    return FindingPictures(result, deck).layout_picture(f)[2].mirrored


def search_window(
    bounds: np.ndarray, feat: tuple[float, float] | None
) -> tuple[float, float] | None:
    """Where the feature's printed edges may lie: to the middle of each neighbouring space
    (the convention of :attr:`pitchguard.cuts.Cut.search`)."""
    if feat is None:
        return None
    b = [float(v) for v in bounds]
    k = b.index(feat[0])
    lo = 0.5 * (feat[0] + b[k - 1]) if k >= 1 else -math.inf
    hi = 0.5 * (feat[1] + b[k + 2]) if k + 2 < len(b) else math.inf
    return lo, hi


def printed_edges(
    x: np.ndarray,
    inten: np.ndarray,
    threshold: float,
    bright: bool,
    feature: tuple[float, float] | None,
    search: tuple[float, float] | None = None,
):
    """Printed edges nearest the feature: ``(left, right, state)``.

    The feature prints where the image is below the threshold (a line on a
    clear field) or above it (an opening on a dark field).  From the centre
    of the drawn feature the edges are the first threshold crossings on each
    side, anywhere along the cut.  ``state`` is ``printed``, ``lost`` (the
    centre does not print) or ``bridged`` (a crossing lies beyond ``search``,
    the middle of the neighbouring spaces, or there is none within the cut:
    the printed feature runs into its neighbour).
    """
    g = -inten if bright else inten
    t = -threshold if bright else threshold
    centre = 0.0 if feature is None else 0.5 * (feature[0] + feature[1])
    c = int(np.argmin(np.abs(x - centre)))
    if g[c] >= t:
        return None, None, "lost"

    def crossing(step: int) -> float | None:
        k = c
        while 0 <= k + step < len(x):
            if g[k + step] >= t:
                g0, g1 = g[k], g[k + step]
                frac = (t - g0) / (g1 - g0) if g1 != g0 else 0.0
                return float(x[k] + frac * (x[k + step] - x[k]))
            k += step
        return None

    left, right = crossing(-1), crossing(1)
    lo, hi = search if search is not None else (-math.inf, math.inf)
    ok = left is not None and right is not None and left >= lo and right <= hi
    return left, right, "printed" if ok else "bridged"


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


def picture_windows(result: ScanResult, deck: Deck, max_groups: int = 500) -> list[tuple]:
    """Layout windows (nm) the pictures of :func:`render_html` show (:func:`view_window`).

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
