"""The designer-facing report: one self-contained HTML file with pictures.

:func:`write_html` renders the :class:`~pitchguard.classify.Finding` records
of a scan (it recomputes no verdict).  The file fetches nothing: styles and a
little filter script are inline, pictures are PNG data URIs, fonts are the
reader's own.

Layout of the page:

* the summary (verdict line, layout and deck, counts per layer and severity)
  and the screening caution (sign-off stays with the fab's calibrated models);
* the findings, worst first, grouped: findings of one layer, check and
  severity with the same rounded pitch, width, space, line direction and
  worst-line context are one group, drawn once, with every location listed;
* per group, a picture of the layout around the first region (its shapes,
  the neighbours within the optical ambit, the region outline, the cut and
  a scale bar), the aerial image across the cut (threshold, drawn feature,
  printed edges), the numbers, every limit that tripped and the fix hint;
* at most ``max_groups`` groups get pictures; the rest are listed in a table.

Pictures use matplotlib's Agg renderer through :class:`matplotlib.figure.Figure`
(no pyplot state).  The page is written through
:func:`pitchguard.report.atomic_write`.
"""

from __future__ import annotations

import base64
import html
import io
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from pitchguard import __version__
from pitchguard.classify import CHECKS, Finding, FindingSet
from pitchguard.deck import SEVERITIES, Deck, LayerRule
from pitchguard.report import (
    CAUTION,
    atomic_write,
    exit_code,
    one_line_summary,
    severity_counts,
)
from pitchguard.scan import ScanResult

DPI = 90
LAYOUT_PX = (470, 340)
LAYOUT_AXES = (0.14, 0.13, 0.83, 0.80)
IMAGE_PX = (600, 340)
LOCATIONS_LISTED = 1000
"""Locations listed per group (the JSON output has them all)."""
OPEN_GROUPS = 8
"""The first groups are expanded when the page opens; the rest are collapsed."""
MAX_VIEW_AMBITS = 10.0
"""A layout picture spans at most this many ambits; larger regions are shown around the
worst site."""
MAX_DRAWN_SHAPES = 4000
"""Shapes drawn per layout picture at most (the nearest to the cut)."""
REMAINING_LISTED = 2000
"""Groups beyond ``max_groups`` listed in the table at the end at most."""

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


# --------------------------------------------------------------------------- grouping


def _q(value: float, digits: int = 1) -> str:
    """A rounded number as a hashable, nan-safe text key."""
    if value is None or not math.isfinite(value):
        return str(value)
    return f"{round(float(value), digits) + 0.0:.{digits}f}"


def group_key(f: Finding) -> tuple:
    """Findings with equal keys are drawn once and listed together."""
    return (
        f.layer,
        f.check,
        f.severity,
        _q(f.pitch_nm),
        _q(f.width_nm),
        _q(f.space_nm),
        _q(f.orientation_deg % 180.0),
        f.context,
    )


@dataclass
class Group:
    key: tuple
    findings: Sequence[Finding] = field(default_factory=list)

    @property
    def first(self) -> Finding:
        return self.findings[0]


def group_findings(findings: Sequence[Finding]) -> list[Group]:
    """Groups in the order of their first (worst) finding.

    A :class:`FindingSet` is grouped by its distinct findings (a copy's key is
    its distinct finding's) and each group is a FindingSet of its items.
    """
    if isinstance(findings, FindingSet):
        return _group_set(findings)
    groups: dict[tuple, Group] = {}
    for f in findings:
        k = group_key(f)
        g = groups.get(k)
        if g is None:
            g = groups[k] = Group(k)
        g.findings.append(f)
    return list(groups.values())


def _group_set(findings: FindingSet) -> list[Group]:
    keys: dict[tuple, int] = {}
    of_distinct = np.array(
        [keys.setdefault(group_key(f), len(keys)) for f in findings.distinct], dtype=np.int64
    )
    n = len(findings)
    if n == 0:
        return []
    gid = of_distinct[findings.which]
    first = np.full(len(keys), n, dtype=np.int64)
    np.minimum.at(first, gid, np.arange(n))
    rank = np.empty(len(keys), dtype=np.int64)
    rank[np.argsort(first, kind="stable")] = np.arange(len(keys))
    order = np.lexsort((np.arange(n), rank[gid]))
    bounds = np.flatnonzero(np.diff(rank[gid][order])) + 1
    key_of = list(keys)
    return [
        Group(key_of[int(gid[idx[0]])], findings.select(idx)) for idx in np.split(order, bounds)
    ]


# --------------------------------------------------------------------------- formatting


def _esc(text) -> str:
    """Text content (quotes stay readable)."""
    return html.escape(str(text), quote=False)


def _attr(text) -> str:
    """An attribute value (quotes escaped too)."""
    return html.escape(str(text), quote=True)


def _num(v: float, fmt: str = ".1f", unit: str = "") -> str:
    if v is None or not math.isfinite(v):
        return "&ndash;"
    return f"{v:{fmt}}{unit}"


def _orders_text(orders: tuple[int, ...]) -> str:
    if not orders:
        return "none"
    top = max(abs(o) for o in orders)
    if set(orders) == set(range(-top, top + 1)):
        return "0 only" if top == 0 else ("0, ±1" if top == 1 else f"0, ±1 … ±{top}")
    return ", ".join(f"{o:+d}" if o else "0" for o in sorted(orders))


def _value_vs_limit(check: str, value: float, limit: float) -> str:
    """A violation's value against its limit, in words a designer reads."""
    forms = {
        "unresolvable-pitch": lambda v, lim: (
            f"pitch {v:.1f} nm &lt; smallest imageable {lim:.1f} nm"
        ),
        "low-k1": lambda v, lim: f"k1 {v:.3f} &lt; {lim:g}",
        "feature-not-printed": lambda v, lim: f"image contrast {v:.3f}; no threshold crossing",
        "features-bridged": lambda v, lim: f"image contrast {v:.3f}; printed into neighbour",
        "low-nils": lambda v, lim: f"NILS {v:.2f} &lt; {lim:g}",
        "low-exposure-latitude": lambda v, lim: f"EL {v:.1f} % &lt; {lim:g} %",
        "low-depth-of-focus": lambda v, lim: f"DOF {v:.0f} nm &lt; {lim:.0f} nm",
        "cd-error": lambda v, lim: f"CD error {v:+.1f} % outside ±{lim:g} %",
    }
    if not (math.isfinite(value) and math.isfinite(limit)):
        return f"{_esc(value)} against {_esc(limit)}"
    form = forms.get(check)
    return form(value, limit) if form else f"{value:.4g} against {limit:.4g}"


def _feature_word(rule: LayerRule | None) -> str:
    return "opening" if rule is not None and rule.field == "dark" else "line"


def _deg(angle: float) -> str:
    return f"{round(angle % 180.0, 1) + 0.0:g}°"


def _nice_length(target_nm: float) -> float:
    """1, 2 or 5 times a power of ten, at most ``target_nm``."""
    if target_nm <= 0 or not math.isfinite(target_nm):
        return 1.0
    p = 10 ** math.floor(math.log10(target_nm))
    for m in (5, 2, 1):
        if m * p <= target_nm:
            return m * p
    return p


def _length_text(nm: float) -> str:
    return f"{nm / 1000:g} µm" if nm >= 1000 else f"{nm:g} nm"


# --------------------------------------------------------------------------- pictures


def _figure(px: tuple[int, int]):
    from matplotlib.figure import Figure

    return Figure(figsize=(px[0] / DPI, px[1] / DPI), dpi=DPI)


def _png(fig) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI)
    return base64.b64encode(buf.getvalue()).decode("ascii")


@dataclass
class CutPicture:
    """What the layout picture learned about the cut, for the image picture."""

    mirrored: bool = False


class _Renderer:
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
        ambit = rule.ambit_nm / self.scale
        x0, y0, x1, y1 = f.bbox_nm
        (vx0, vy0, vx1, vy1), clamped, (cx_focus, cy_focus) = view_window(f, ambit)
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
        # by the ambit (tested in the outline's frame); the rest are context.
        out = np.asarray(f.outline_nm, dtype=float)
        kind = np.full(len(polys), 1, dtype=np.int8)  # 0 own, 1 within the ambit, 2 beyond
        grown = None
        if out.shape == (4, 2):
            kind = np.array([_overlap_class(p, out, ambit) for p in polys], dtype=np.int8)
            grown = _grow_outline(out, ambit)

        fig = _figure(LAYOUT_PX)
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
            p0, p1 = centre - n * ambit, centre + n * ambit
            halo = _halo(3.5)
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
            t = np.array([-n[1], n[0]]) * ambit * 0.08
            ax.plot(
                [p0[0] - t[0], p0[0] + t[0]],
                [p0[1] - t[1], p0[1] + t[1]],
                color=CUT_COLOUR,
                lw=2.0,
                zorder=4,
                path_effects=halo,
            )
            ax.plot([ox], [oy], marker="o", ms=6, mfc="white", mec=CUT_COLOUR, mew=2.0, zorder=5)
            info.mirrored = self._mirrored(f, rule, polys, centre, n, ambit)
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
        bar = _nice_length(width / 4)
        bx, by = vx0 + 0.04 * width, vy0 + 0.05 * (vy1 - vy0)
        ax.plot(
            [bx, bx + bar],
            [by, by],
            color="black",
            lw=3,
            solid_capstyle="butt",
            path_effects=_halo(),
        )
        ax.text(
            bx + bar / 2,
            by + 0.025 * (vy1 - vy0),
            _length_text(bar),
            ha="center",
            va="bottom",
            fontsize=7.5,
            path_effects=_halo(),
        )
        ax.set_title(f"{f.layer} ({f.source}) around the region", fontsize=8.5, pad=3)
        png = _png(fig)
        fw = _feature_word(rule)
        cap = (
            f"Dark: the region's drawn {fw}s (dashed outline); grey: neighbours within the "
            f"optical ambit ({rule.ambit_nm:.0f} nm, wafer; dotted); pale: farther shapes. "
            "Arrow: the cut through the worst edge (circle), ±ambit, pointing along +x of "
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

    def _mirrored(self, f: Finding, rule: LayerRule, polys, centre, n, ambit) -> bool:
        """Whether the imaged (canonical) cut runs against the arrow.

        Cuts are stored as the smaller of a profile and its mirror image; the
        drawn material along the arrow tells which one this is.
        """
        if not f.cut_bounds_nm or not polys:
            return False
        from matplotlib.path import Path as MplPath

        t = np.linspace(-ambit, ambit, 401)[1:-1] + ambit * 1e-4
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
        from pitchguard.measure import cut_image

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
        fw = _feature_word(rule)
        pairs = [(bounds[k], bounds[k + 1]) for k in range(0, len(bounds) - 1, 2)]
        feat = next(((a, b) for a, b in pairs if a <= 1e-9 and b >= -1e-9), None)
        fig = _figure(IMAGE_PX)
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
        png = _png(fig)
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
    return _Renderer(result, deck).layout_picture(f)[2].mirrored


def _halo(width: float = 2.5):
    from matplotlib import patheffects

    return [patheffects.withStroke(linewidth=width, foreground="white")]


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


# --------------------------------------------------------------------------- page


CSS = (
    """
:root { --fail: %(fail)s; --risk: %(risk)s; --marginal: %(marginal)s; --ink: #1d2733;
        --muted: #5b6673; --line: #d8dee4; --panel: #f6f8fa; }
* { box-sizing: border-box; }
body { font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
       color: var(--ink); margin: 0; background: #fff; }
main { max-width: 1200px; margin: 0 auto; padding: 18px 22px 40px; }
h1 { font-size: 22px; margin: 0 0 2px; }
h2 { font-size: 17px; margin: 26px 0 8px; border-bottom: 1px solid var(--line);
     padding-bottom: 4px; }
.sub { color: var(--muted); margin: 0 0 12px; }
.caution { border-left: 5px solid #c9a227; background: #fff8e1; padding: 8px 12px;
           margin: 10px 0 14px; }
.verdict { font: 600 13px/1.4 ui-monospace, "DejaVu Sans Mono", monospace; padding: 8px 12px;
           border-radius: 4px; background: var(--panel); border: 1px solid var(--line); }
.verdict.bad { border-color: var(--fail); color: var(--fail); }
.verdict.good { border-color: #2e7d32; color: #2e7d32; }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; margin: 10px 0; }
dl.facts dt { color: var(--muted); } dl.facts dd { margin: 0; }
table { border-collapse: collapse; font-size: 13px; }
th, td { padding: 3px 9px; border-bottom: 1px solid var(--line); text-align: left;
         vertical-align: top; }
th { background: var(--panel); font-weight: 600; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; }
tr.total td { font-weight: 600; border-top: 2px solid var(--ink); }
.sev { display: inline-block; min-width: 64px; text-align: center; border-radius: 3px;
       color: #fff; font-weight: 600; font-size: 12px; padding: 0 6px; }
.sev.fail { background: var(--fail); } .sev.risk { background: var(--risk); }
.sev.marginal { background: var(--marginal); }
td.c-fail { color: var(--fail); font-weight: 600; } td.c-risk { color: var(--risk);
  font-weight: 600; } td.c-marginal { color: var(--marginal); font-weight: 600; }
td.zero { color: #a0a8b0; }
#filters { background: var(--panel); border: 1px solid var(--line); border-radius: 4px;
           padding: 6px 10px; margin: 8px 0 12px; display: flex; flex-wrap: wrap;
           gap: 6px 18px; align-items: center; position: sticky; top: 0; z-index: 2; }
#filters[hidden] { display: none; }
#filters label { margin-right: 8px; white-space: nowrap; }
#filters button { font: inherit; font-size: 12px; padding: 1px 8px; }
details.group { border: 1px solid var(--line); border-left: 6px solid #999; border-radius: 4px;
                margin: 10px 0; background: #fff; }
details.group.fail { border-left-color: var(--fail); }
details.group.risk { border-left-color: var(--risk); }
details.group.marginal { border-left-color: var(--marginal); }
details.group[hidden] { display: none; }
details.group > summary { cursor: pointer; padding: 7px 10px; list-style-position: inside; }
details.group > summary .what { font-weight: 600; margin: 0 6px; }
details.group > summary .meta { color: var(--muted); }
details.group > summary .count { float: right; color: var(--muted); }
.body { padding: 2px 12px 12px; }
.message { margin: 4px 0 10px; }
.pics { display: flex; flex-wrap: wrap; gap: 12px; }
figure { margin: 0; max-width: 600px; }
figure img { border: 1px solid var(--line); display: block; max-width: 100%%; height: auto; }
figcaption { font-size: 12px; color: var(--muted); margin-top: 3px; }
.cols { display: flex; flex-wrap: wrap; gap: 10px 28px; margin-top: 12px; }
.cols > div { flex: 1 1 330px; }
h3 { font-size: 14px; margin: 6px 0 4px; }
.hint { background: #eef6ee; border-left: 4px solid #2e7d32; padding: 6px 10px; margin: 8px 0 0; }
details.locs { margin-top: 10px; }
#index { margin: 4px 0 12px; } #index > summary { cursor: pointer; font-weight: 600; }
#index table { margin-top: 6px; } #index tr[hidden], #more-groups tr[hidden] { display: none; }
details.locs > summary { cursor: pointer; color: var(--muted); }
.note { color: var(--muted); font-size: 13px; }
footer { margin-top: 30px; color: var(--muted); font-size: 12px; border-top: 1px solid var(--line);
         padding-top: 8px; }
@media print { #filters { display: none; } details.group { break-inside: avoid; } }
"""
    % SEVERITY_COLOUR
)  # noqa: UP031 - CSS braces make str.format awkward

JS = """
(function () {
  var nav = document.getElementById('filters');
  if (!nav || !document.querySelectorAll) { return; }
  nav.hidden = false;
  function picked(name) {
    var on = {};
    var boxes = nav.querySelectorAll('input[name="' + name + '"]');
    for (var i = 0; i < boxes.length; i++) { if (boxes[i].checked) { on[boxes[i].value] = 1; } }
    return on;
  }
  function apply() {
    var sev = picked('severity'), lay = picked('layer'), shown = 0, locs = 0;
    var items = document.querySelectorAll('[data-severity][data-layer]');
    for (var i = 0; i < items.length; i++) {
      var el = items[i];
      var ok = sev[el.getAttribute('data-severity')] && lay[el.getAttribute('data-layer')];
      el.hidden = !ok;
      if (ok && el.classList.contains('group')) {
        shown++; locs += parseInt(el.getAttribute('data-count'), 10) || 0;
      }
    }
    var out = document.getElementById('shown');
    if (out) { out.textContent = shown + ' groups (' + locs + ' findings) shown'; }
  }
  // A link may preset the filter: report.html#severity=fail,risk&layer=metal1
  var hash = (window.location.hash || '').replace(/^#/, '');
  if (hash.indexOf('=') > 0) {
    var parts = hash.split('&');
    for (var p = 0; p < parts.length; p++) {
      var kv = parts[p].split('='), want = {}, vals = decodeURIComponent(kv[1] || '').split(',');
      for (var v = 0; v < vals.length; v++) { want[vals[v]] = 1; }
      var boxes = nav.querySelectorAll('input[name="' + kv[0] + '"]');
      for (var b = 0; b < boxes.length; b++) { boxes[b].checked = !!want[boxes[b].value]; }
    }
  }
  nav.addEventListener('change', apply);
  function openAll(state) {
    var gs = document.querySelectorAll('details.group');
    for (var i = 0; i < gs.length; i++) { if (!gs[i].hidden) { gs[i].open = state; } }
  }
  document.getElementById('expand').addEventListener('click', function () { openAll(true); });
  document.getElementById('collapse').addEventListener('click', function () { openAll(false); });
  function openTarget() {
    var id = (window.location.hash || '').replace(/^#/, '');
    var el = id && id.indexOf('=') < 0 ? document.getElementById(id) : null;
    if (el && el.tagName === 'DETAILS') { el.open = true; el.hidden = false; }
  }
  window.addEventListener('hashchange', openTarget);
  apply();
  openTarget();
  document.documentElement.setAttribute('data-filters', 'ready');
})();
"""


def _summary_html(result: ScanResult, deck: Deck, fail_on: str, groups: list[Group]) -> str:
    counts = severity_counts(result.findings)
    line = one_line_summary(result, fail_on)
    bad = exit_code(result.findings, fail_on) != 0
    lay = result.layout
    parts = ['<section id="summary"><h2>Summary</h2>']
    parts.append(f'<p class="verdict {"bad" if bad else "good"}" id="one-line">{_esc(line)}</p>')
    facts = []
    if lay is not None:
        cells = ", ".join(lay.cells) or "–"
        facts.append(
            (
                "Layout",
                f"<strong>{_esc(Path(lay.path).name)}</strong> "
                f"<span class='note'>({_esc(lay.path)})</span>",
            )
        )
        facts.append(("Format, top cells", f"{_esc(lay.format.upper())}, {_esc(cells)}"))
        facts.append(("Database grid", f"{lay.grid_nm:g} nm"))
    facts.append(
        (
            "Rule deck",
            f"<strong>{_esc(deck.name)}</strong>"
            + (f" <span class='note'>({_esc(deck.path)})</span>" if deck.path else ""),
        )
    )
    scale = (
        "wafer scale"
        if deck.drawn_scale == "wafer"
        else f"mask scale, {deck.reduction:g}× reduction"
    )
    facts.append(("Drawn at", scale))
    facts.append(
        (
            "Findings",
            f"{len(result.findings)} regions in {len(groups)} groups of identical findings",
        )
    )
    facts.append(("Gate", f"fail-on <code>{_esc(fail_on)}</code>"))
    parts.append(
        '<dl class="facts">' + "".join(f"<dt>{k}</dt><dd>{v}</dd>" for k, v in facts) + "</dl>"
    )

    rules = {r.name: r for r in deck.layers}
    head = "".join(f'<th class="n">{s}</th>' for s in SEVERITIES)
    rows = []
    for st in result.layers:
        c = severity_counts(result.findings, st.name)
        rule = rules.get(st.name)
        if rule is not None:
            e = rule.exposure
            expo = (
                f"{_esc(rule.exposure_name)}: {e.wavelength_nm:g} nm, NA {e.na:g}, "
                f"{_esc(e.illumination.shape)}; {_esc(rule.field)} field"
            )
        else:
            expo = "–"
        ex = st.extract
        cells = "".join(
            f'<td class="n {"c-" + s if c[s] else "zero"}">{c[s]}</td>' for s in SEVERITIES
        )
        rows.append(
            f"<tr><td><strong>{_esc(st.name)}</strong></td><td>{_esc(st.source)}</td>"
            f"<td>{expo}</td>{cells}<td class='n'>{ex.sites:,}</td>"
            f"<td class='n'>{ex.isolated_sites:,}</td>"
            f"<td class='n'>{ex.short_edges + ex.pieces_2d:,}</td><td class='n'>{st.shapes:,}</td>"
            "</tr>"
        )
    total = "".join(f'<td class="n">{counts[s]}</td>' for s in SEVERITIES)
    rows.append(
        f'<tr class="total"><td colspan="3">all layers</td>{total}'
        f"<td class='n'>{sum(s.extract.sites for s in result.layers):,}</td><td></td>"
        f"<td></td><td class='n'>{sum(s.shapes for s in result.layers):,}</td></tr>"
    )
    parts.append(
        '<table id="counts"><thead><tr><th>layer</th><th>source</th><th>exposure</th>'
        f"{head}<th class='n'>sites</th><th class='n'>isolated edges</th>"
        "<th class='n'>2-D edges</th><th class='n'>shapes</th></tr></thead><tbody>"
        + "".join(rows)
        + "</tbody></table>"
    )
    if result.warnings:
        items = "".join(f"<li>{_esc(w)}</li>" for w in result.warnings[:20])
        more = f"<li>… {len(result.warnings) - 20} more</li>" if len(result.warnings) > 20 else ""
        parts.append(f"<h3>Layout reader warnings</h3><ul class='note'>{items}{more}</ul>")
    parts.append("</section>")
    return "".join(parts)


def _filters_html(result: ScanResult, groups: list[Group]) -> str:
    present = {g.first.severity for g in groups}
    sev = "".join(
        f'<label><input type="checkbox" name="severity" value="{s}" checked> '
        f'<span class="sev {s}">{s}</span></label>'
        for s in SEVERITIES
        if s in present
    )
    layers = [st.name for st in result.layers]
    for g in groups:
        if g.first.layer not in layers:
            layers.append(g.first.layer)
    lay = "".join(
        f'<label><input type="checkbox" name="layer" value="{_attr(n)}" checked> {_esc(n)}</label>'
        for n in layers
    )
    return (
        '<nav id="filters" hidden aria-label="Filter findings">'
        f"<span><strong>Show:</strong> {sev}</span><span><strong>Layers:</strong> {lay}</span>"
        '<span><button type="button" id="expand">expand all</button> '
        '<button type="button" id="collapse">collapse all</button></span>'
        '<span id="shown" class="note"></span></nav>'
    )


def _numbers_html(f: Finding, rule: LayerRule | None, scale: float) -> str:
    fw = _feature_word(rule)
    rows = [
        (
            "pitch (drawn)",
            f"{f.pitch_nm:.1f} nm"
            + (
                f" … {f.pitch_max_nm:.1f} nm"
                if math.isfinite(f.pitch_max_nm) and f.pitch_max_nm - f.pitch_nm > 0.05
                else ""
            ),
        ),
    ]
    if abs(scale - 1.0) > 1e-12:
        rows.append(("pitch (wafer)", f"{f.wafer_pitch_nm:.1f} nm"))
    rows += [
        (f"{fw} width / space (drawn)", f"{_num(f.width_nm)} / {_num(f.space_nm)} nm"),
        ("smallest imageable pitch", f"{_num(f.cutoff_pitch_nm)} nm (wafer, this direction)"),
        ("k1", _num(f.k1, ".3f")),
        (
            "diffraction orders captured",
            f"{_orders_text(f.orders)} "
            f"<span class='note'>(on axis: {_orders_text(f.orders_on_axis)}; two-beam source "
            f"fraction {f.two_beam_fraction:.0%})</span>",
        ),
        ("image contrast", _num(f.contrast, ".3f")),
        ("NILS at the drawn edges", _num(f.nils, ".2f")),
        ("exposure latitude (EL)", _num(f.el_pct, ".1f", " %")),
        ("depth of focus (DOF)", _num(f.dof_nm, ".0f", " nm")),
        ("printed CD (wafer)", _printed_cd(f, scale)),
        (
            "CD error at the anchored dose",
            _num(f.cd_error_pct, "+.1f", " %")
            if math.isfinite(f.cd_error_pct)
            else "not judged (no dose anchor, or not printed)",
        ),
        ("lines, sites", f"{f.lines} lines ({_esc(f.periodicity)}), {f.sites} sites"),
        ("line direction", f"{_deg(f.orientation_deg)} (0° = along x)"),
        (
            "worst line",
            _esc(
                {
                    "outer": "last line of the array",
                    "interior": "inside the array",
                    "alone": "isolated line",
                }.get(f.context, f.context or "–")
            ),
        ),
    ]
    body = "".join(f"<tr><th>{_esc(k)}</th><td>{v}</td></tr>" for k, v in rows)
    return f'<h3>Numbers (worst site)</h3><table class="numbers">{body}</table>'


def _printed_cd(f: Finding, scale: float) -> str:
    drawn = f.width_nm * scale
    if not math.isfinite(f.cd_nm):
        bridged = any(v.check == "features-bridged" for v in f.violations)
        return "runs into its neighbour (bridged)" if bridged else "&ndash;"
    if f.cd_nm <= 0:
        return "not printed"
    return f"{f.cd_nm:.1f} nm <span class='note'>(drawn {drawn:.1f} nm)</span>"


def _violations_html(f: Finding) -> str:
    rows = "".join(
        f'<tr><td><span class="sev {_attr(v.severity)}">{_esc(v.severity)}</span></td>'
        f'<td><code title="{_attr(CHECKS.get(v.check, ""))}">{_esc(v.check)}</code></td>'
        f"<td>{_value_vs_limit(v.check, v.value, v.limit)}</td><td>{_esc(v.message)}</td></tr>"
        for v in f.violations
    )
    if not rows:
        rows = (
            f"<tr><td><span class='sev {_attr(f.severity)}'>{_esc(f.severity)}</span></td>"
            f"<td><code>{_esc(f.check)}</code></td><td>{_esc(f.limit)}</td>"
            f"<td>{_esc(f.message)}</td></tr>"
        )
    return (
        "<h3>Limits tripped</h3><table class='violations'><thead><tr><th>severity</th>"
        "<th>check</th><th>value against limit</th><th>what it means</th></tr></thead>"
        f"<tbody>{rows}</tbody></table>"
        f"<p class='hint'><strong>What to change:</strong> {_esc(f.hint)} "
        "<span class='note'>(drawn nm)</span></p>"
    )


def _locations_html(g: Group) -> str:
    n = len(g.findings)
    rows = []
    for k, f in enumerate(g.findings[:LOCATIONS_LISTED], 1):
        cx, cy = f.centre_um
        x0, y0, x1, y1 = f.bbox_um
        rows.append(
            f"<tr><td class='n'>{k}</td><td class='n'>{cx:.3f}, {cy:.3f}</td>"
            f"<td class='n'>{x0:.3f}, {y0:.3f} – {x1:.3f}, {y1:.3f}</td>"
            f"<td class='n'>{f.lines}</td><td class='n'>{f.sites}</td>"
            f"<td class='n'>{f.pitch_nm:.1f}</td><td>{_esc(f.context or '–')}</td></tr>"
        )
    more = (
        f"<p class='note'>… and {n - LOCATIONS_LISTED} more locations (the JSON output "
        "lists them all).</p>"
        if n > LOCATIONS_LISTED
        else ""
    )
    label = "1 location" if n == 1 else f"all {n} locations"
    return (
        f"<details class='locs'{' open' if n <= 12 else ''}><summary>{label} "
        "(centre and box in µm, as drawn; the pictures show the first)</summary>"
        "<table><thead><tr><th class='n'>#</th><th class='n'>centre x, y</th>"
        "<th class='n'>box x0, y0 – x1, y1</th><th class='n'>lines</th><th class='n'>sites</th>"
        "<th class='n'>pitch nm</th><th>worst line</th></tr></thead><tbody>"
        + "".join(rows)
        + f"</tbody></table>{more}</details>"
    )


def _group_title(g: Group, rule: LayerRule | None) -> str:
    f = g.first
    fw = _feature_word(rule)
    n = len(g.findings)
    cx, cy = f.centre_um
    return (
        f'<span class="sev {_attr(f.severity)}">{_esc(f.severity)}</span>'
        f'<span class="what">{_esc(f.layer)} · {_esc(f.check)}</span>'
        f'<span class="meta">pitch {f.pitch_nm:.1f} nm, {fw} {_num(f.width_nm)} / space '
        f"{_num(f.space_nm)} nm, k1 {f.k1:.3f}, lines at {_deg(f.orientation_deg)}"
        f"{', ' + _esc(f.context) + ' line' if f.context else ''}</span>"
        f'<span class="count">{n} location{"s" if n != 1 else ""} · '
        f"{'first ' if n > 1 else ''}at ({cx:.3f}, {cy:.3f}) µm</span>"
    )


def _group_html(idx: int, g: Group, renderer: _Renderer) -> str:
    f = g.first
    rule = renderer.rules.get(f.layer)
    lay_png, lay_cap, info = renderer.layout_picture(f)
    img_png, img_cap = renderer.image_picture(f, info.mirrored)
    figs = []
    for png, cap, alt, px in (
        (lay_png, lay_cap, f"layout of {f.layer} around the region", LAYOUT_PX),
        (img_png, img_cap, f"aerial image across the cut on {f.layer}", IMAGE_PX),
    ):
        if png is None:
            figs.append(f"<figure><p class='note'>{_esc(cap)}</p></figure>")
        else:
            figs.append(
                f'<figure style="width:{px[0] + 2}px"><img src="data:image/png;base64,{png}" '
                f'width="{px[0]}" '
                f'height="{px[1]}" alt="{_attr(alt)}"><figcaption>{_esc(cap)}</figcaption></figure>'
            )
    opened = " open" if idx < OPEN_GROUPS else ""
    return (
        f'<details class="group {_attr(f.severity)}" id="g{idx + 1}" '
        f'data-severity="{_attr(f.severity)}" data-layer="{_attr(f.layer)}" '
        f'data-count="{len(g.findings)}"{opened}>'
        f"<summary>{_group_title(g, rule)}</summary><div class='body'>"
        f"<p class='message'>{_esc(f.message.rstrip('.'))}.</p>"
        f"<div class='pics'>{''.join(figs)}</div>"
        f"<div class='cols'><div>{_numbers_html(f, rule, renderer.scale)}</div>"
        f"<div>{_violations_html(f)}</div></div>"
        f"{_locations_html(g)}</div></details>"
    )


def _groups_text(n: int) -> str:
    return f"{n} group" if n == 1 else f"{n} groups"


def _index_html(groups: list[Group]) -> str:
    """A compact table of the drawn groups with links to their sections."""
    rows = []
    for k, g in enumerate(groups, 1):
        f = g.first
        rows.append(
            f'<tr data-severity="{_attr(f.severity)}" data-layer="{_attr(f.layer)}">'
            f"<td class='n'><a href='#g{k}'>{k}</a></td><td><span class='sev "
            f"{_attr(f.severity)}'>{_esc(f.severity)}</span></td><td>{_esc(f.layer)}</td>"
            f"<td><a href='#g{k}'>{_esc(f.check)}</a></td><td class='n'>{f.pitch_nm:.1f}</td>"
            f"<td class='n'>{_num(f.width_nm)} / {_num(f.space_nm)}</td>"
            f"<td class='n'>{f.k1:.3f}</td><td class='n'>{len(g.findings)}</td></tr>"
        )
    opened = " open" if len(groups) <= 30 else ""
    return (
        f"<details id='index'{opened}><summary>Index of the {len(groups)} groups drawn below"
        "</summary><table><thead><tr><th class='n'>#</th><th>severity</th><th>layer</th>"
        "<th>check</th><th class='n'>pitch nm</th><th class='n'>width / space nm</th>"
        "<th class='n'>k1</th><th class='n'>locations</th></tr></thead><tbody>"
        + "".join(rows)
        + "</tbody></table></details>"
    )


def _remaining_html(groups: list[Group], start: int) -> str:
    rest = groups[start:]
    if not rest:
        return ""
    n_find = sum(len(g.findings) for g in rest)
    rows = []
    for k, g in enumerate(rest[:REMAINING_LISTED], start + 1):
        f = g.first
        cx, cy = f.centre_um
        rows.append(
            f'<tr data-severity="{_attr(f.severity)}" data-layer="{_attr(f.layer)}">'
            f"<td class='n'>{k}</td><td><span class='sev {_attr(f.severity)}'>"
            f"{_esc(f.severity)}</span></td><td>{_esc(f.layer)}</td><td>{_esc(f.check)}</td>"
            f"<td class='n'>{f.pitch_nm:.1f}</td><td class='n'>{_num(f.width_nm)} / "
            f"{_num(f.space_nm)}</td><td class='n'>{f.k1:.3f}</td>"
            f"<td class='n'>{len(g.findings)}</td><td class='n'>{cx:.3f}, {cy:.3f}</td></tr>"
        )
    more = (
        f"<p class='note'>… {len(rest) - REMAINING_LISTED} groups more are not listed "
        "here; the JSON output has every finding.</p>"
        if len(rest) > REMAINING_LISTED
        else ""
    )
    return (
        '<section id="more-groups"><h2>More findings without pictures</h2>'
        f'<p id="cap-message"><strong>{len(rest)} more group{"s" if len(rest) != 1 else ""} '
        f"({n_find} finding{'s' if n_find != 1 else ''})</strong> "
        f"{'exists' if len(rest) == 1 else 'exist'} beyond the {start} drawn with pictures "
        "(the report's limit); listed below, worst first.</p>"
        "<table><thead><tr><th class='n'>#</th><th>severity</th><th>layer</th>"
        "<th>check</th><th class='n'>pitch nm</th><th class='n'>width / space nm</th>"
        "<th class='n'>k1</th><th class='n'>locations</th><th class='n'>first at, µm</th>"
        "</tr></thead><tbody>" + "".join(rows) + f"</tbody></table>{more}</section>"
    )


CAVEATS = (
    "The pictures and numbers below image a 1-D cut through each region and print it with a "
    "constant threshold: polarisation, mask 3-D, resist, aberration and line-end effects are "
    "not modelled."
)


def view_window(f: Finding, ambit: float) -> tuple[tuple, bool, tuple[float, float]]:
    """The layout window (nm) a finding's picture shows: ``(window, clamped, focus)``.

    The region plus one ambit, clamped to ``MAX_VIEW_AMBITS`` ambits around
    the worst site's cut (``clamped``), widened to the axes' aspect ratio.
    """
    x0, y0, x1, y1 = f.bbox_nm
    vx0, vy0, vx1, vy1 = x0 - ambit, y0 - ambit, x1 + ambit, y1 + ambit
    ox, oy = f.cut_origin_nm
    has_cut = math.isfinite(ox) and math.isfinite(oy) and math.isfinite(f.cut_angle_deg)
    limit = MAX_VIEW_AMBITS * ambit
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
            out.append(view_window(g.first, rule.ambit_nm / deck.scale_to_wafer)[0])
    return out


def render_html(result: ScanResult, deck: Deck, fail_on: str, max_groups: int = 500) -> str:
    """The whole page as text."""
    groups = group_findings(result.findings)
    renderer = _Renderer(result, deck)
    drawn = groups[: max(0, max_groups)]
    lay = result.layout
    title = f"pitchguard report: {Path(lay.path).name}" if lay is not None else "pitchguard report"
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width, initial-scale=1'>",
        # No network: forbid every fetch except inline styles/scripts and data: images.
        "<meta http-equiv='Content-Security-Policy' content=\"default-src 'none'; "
        "img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'\">",
        f"<title>{_esc(title)}</title><style>{CSS}</style></head><body><main>",
        f"<h1>{_esc(title)}</h1>",
        f"<p class='sub'>Line/space pitch screening with deck <strong>{_esc(deck.name)}"
        f"</strong> · pitchguard {_esc(__version__)}</p>",
        f'<p class="caution" id="caution"><strong>Screening aid.</strong> {_esc(CAUTION)} '
        f"{_esc(CAVEATS)}</p>",
        _summary_html(result, deck, fail_on, groups),
        '<section id="findings"><h2>Findings, worst first</h2>',
    ]
    if not groups:
        parts.append(
            '<p id="no-findings">No finding: every judged pitch passes the deck\'s limits.</p>'
        )
    else:
        shown_find = sum(len(g.findings) for g in drawn)
        parts.append(
            f"<p class='note'>{len(result.findings)} findings in {len(groups)} groups; "
            f"{len(drawn)} groups ({shown_find} findings) are drawn below. Identical findings "
            "(same layer, check, severity, pitch, width, space, line direction and worst line) "
            "share one set of pictures; open a group's location list for every place it "
            "occurs.</p>"
        )
        parts.append(_filters_html(result, groups))
        if drawn:
            parts.append(_index_html(drawn))
        parts.extend(_group_html(k, g, renderer) for k, g in enumerate(drawn))
        if len(groups) > len(drawn):
            parts.append(
                f'<p class="note" id="cap-note"><a href="#more-groups">'
                f"{_groups_text(len(groups) - len(drawn))} more</a> "
                f"{'is' if len(groups) - len(drawn) == 1 else 'are'} listed without pictures "
                "below.</p>"
            )
    parts.append("</section>")
    parts.append(_remaining_html(groups, len(drawn)))
    parts.append(
        f"<footer><p>{_esc(CAUTION)}</p><p>pitchguard {_esc(__version__)} · "
        "coordinates in µm as drawn, lengths in nm (image plots: wafer nm).</p></footer>"
    )
    parts.append(f"</main><script>{JS}</script></body></html>\n")
    return "".join(parts)


def write_html(
    path: Path,
    result: ScanResult,
    deck: Deck,
    inputs: list[Path],
    fail_on: str,
    max_groups: int = 500,
) -> None:
    """Write the self-contained HTML report (via a temporary file and a rename)."""
    text = render_html(result, deck, fail_on, max_groups)

    def w(tmp: Path) -> None:
        tmp.write_text(text, encoding="utf-8")

    atomic_write(Path(path), w, inputs)  # gives the file the umask's mode
