"""The HTML report's card for one group of identical findings: pictures, numbers, places."""

from __future__ import annotations

import math

from pitchguard.deck import LayerRule
from pitchguard.judge.checks import CHECKS
from pitchguard.judge.findings import CLIP_KINDS, Finding, box_um
from pitchguard.outputs.html.groups import LOCATIONS_LISTED, OPEN_GROUPS, Group
from pitchguard.outputs.html.pictures import FindingPictures
from pitchguard.outputs.html.style import IMAGE_PX, LAYOUT_PX, degrees_text
from pitchguard.outputs.html.text import (
    attr_text,
    esc,
    feature_word,
    filter_key,
    html_number,
    name_html,
    value_vs_limit,
)
from pitchguard.outputs.texts import (
    CLIP_WHERE,
    ISOLATED,
    dof_limited,
    dof_text,
    k1_number,
    orders_text,
    pitch_text,
    shown,
)


def _contrast_html(f: Finding) -> str:
    """The image contrast, except where no 1st order passes: the pitch does not image,
    and what modulation the cut shows comes from the pattern's ends, not its lines."""
    if f.check == "unresolvable-pitch" or tuple(f.orders) == (0,):
        return (
            "none from the pitch <span class='note'>(only the 0th order passes; the cut's "
            f"{html_number(f.contrast, '.3f')} comes from the pattern's ends)</span>"
        )
    return html_number(f.contrast, ".3f")


def _numbers_html(f: Finding, rule: LayerRule | None, scale: float) -> str:
    fw = feature_word(rule)
    rows = [
        (
            "pitch (drawn)",
            (f"{f.pitch_nm:.1f} nm" if math.isfinite(f.pitch_nm) else esc(ISOLATED))
            + (
                f" … {f.pitch_max_nm:.1f} nm"
                if math.isfinite(f.pitch_max_nm) and f.pitch_max_nm - f.pitch_nm > 0.05
                else ""
            ),
        ),
    ]
    if abs(scale - 1.0) > 1e-12:
        rows.append(("pitch (wafer)", html_number(f.wafer_pitch_nm, unit=" nm")))
    rows += [
        (
            f"{fw} width / space (drawn)",
            f"{html_number(f.width_nm)} / {html_number(f.space_nm)} nm",
        ),
        (
            "smallest imageable pitch",
            f"{html_number(f.cutoff_pitch_nm)} nm (wafer, this direction)",
        ),
        ("k1", html_number(f.k1, ".3f")),
        (
            "diffraction orders captured",
            f"{orders_text(f.orders)} "
            f"<span class='note'>(on axis: {orders_text(f.orders_on_axis)}; two-beam source "
            f"fraction {f.two_beam_fraction:.0%})</span>",
        ),
        ("image contrast", _contrast_html(f)),
        ("NILS at the printed edges", html_number(f.nils, ".2f")),
        ("exposure latitude (EL)", html_number(f.el_pct, ".1f", " %")),
        (
            "depth of focus (DOF)",
            esc(dof_text(f.dof_nm, rule.focus_span_nm))
            + (
                " <span class='note'>(the whole focus range sampled: at least this)</span>"
                if dof_limited(f.dof_nm, rule.focus_span_nm)
                else ""
            )
            if rule is not None
            else html_number(f.dof_nm, ".0f", " nm"),
        ),
        ("printed CD (wafer)", _printed_cd(f, scale)),
        (
            "CD error at the anchored dose",
            html_number(f.cd_error_pct, "+.1f", " %")
            if math.isfinite(f.cd_error_pct)
            else "not judged (no dose anchor, or not printed)",
        ),
        (
            "edge placement (wafer)",
            f"{html_number(f.epe_nm, '+.1f')} nm at the worse edge (+ outward), centre "
            f"{html_number(f.shift_nm, '+.1f')} nm along the cut"
            if math.isfinite(f.epe_nm)
            else "not measured",
        ),
        *(
            [("mask bias (judged as sized)", f"{html_number(f.bias_nm, '+.1f')} nm per edge")]
            if math.isfinite(f.bias_nm)
            else []
        ),
        ("lines, sites", f"{f.lines} lines ({esc(f.periodicity)}), {f.sites} sites"),
        ("line direction", f"{degrees_text(f.orientation_deg)} (0° = along x)"),
        (
            "worst line",
            esc(
                {
                    "outer": "last line of the array",
                    "interior": "inside the array",
                    "alone": "isolated line",
                }.get(f.context, f.context or "–")
            ),
        ),
    ]
    if f.array is not None:
        rows = _array_rows(f, rows)
    if f.tip is not None:
        rows = _tip_rows(f, rows)
    body = "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in rows)
    return f'<h3>Numbers (worst site)</h3><table class="numbers">{body}</table>'


_LINE_ROWS = (
    "width / space (drawn)",
    "diffraction orders captured",
    "edge placement (wafer)",
    "lines, sites",
    "line direction",
    "worst line",
)


def _array_rows(f: Finding, rows: list) -> list:
    """The numbers of an array finding: its lattice in place of the line rows."""
    a = f.array
    keep = [(k, v) for k, v in rows if not k.endswith(_LINE_ROWS)]
    w, h = a.feature_nm
    vec = "({:.1f}, {:.1f}) nm"
    lattice = f"{esc(a.lattice)}: a1 = {vec.format(*a.a1_nm)}"
    if a.lattice in CLIP_KINDS:
        lattice = esc(CLIP_WHERE[a.lattice])
    elif a.lattice != "row":
        lattice += f", a2 = {vec.format(*a.a2_nm)}"
    extra = [
        ("lattice (drawn)", lattice),
        (
            "feature (drawn)",
            f"{html_number(w)} x {html_number(h)} nm, edges at {degrees_text(a.feature_angle_deg)}",
        ),
        ("features", f"{a.features} ({a.columns} x {a.rows} lattice sites)"),
        (
            "diffraction orders captured",
            f"{len(a.orders)} orders (m, n) through the pupil "
            f"<span class='note'>(worst direction: pitch at {degrees_text(a.worst_angle_deg)}; "
            f"two-beam source fraction {f.two_beam_fraction:.0%})</span>",
        ),
        (
            "judged on",
            "a 2-D clip of the feature and the shapes around it"
            if a.lattice in CLIP_KINDS
            else "the array's periodic unit cell (its interior)",
        ),
    ]
    return keep[:1] + extra + keep[1:]


_TIP_DROPS = _LINE_ROWS + (
    "pitch (drawn)",
    "pitch (wafer)",
    "smallest imageable pitch",
    "k1",
    "NILS at the printed edges",
    "exposure latitude (EL)",
    "depth of focus (DOF)",
    "printed CD (wafer)",
    "CD error at the anchored dose",
)


def _tip_rows(f: Finding, rows: list) -> list:
    """The numbers of a line-end finding: its gap and printed tip in place of pitch rows."""
    t = f.tip
    keep = [(k, v) for k, v in rows if not k.endswith(_TIP_DROPS)]
    closes = (
        "at best focus"
        if t.closes_at_focus_nm == 0
        else f"at {t.closes_at_focus_nm:.0f} nm defocus"
        if math.isfinite(t.closes_at_focus_nm)
        else "stays open through the focus range"
    )
    extra = [
        (
            "line end (drawn)",
            f"{html_number(f.width_nm)} nm wide, running at {degrees_text(f.orientation_deg)}",
        ),
        ("gap (drawn)", f"{html_number(f.space_nm)} nm, {esc(t.kind)}"),
        ("printed gap (wafer, best focus)", html_number(t.gap_printed_nm, ".1f", " nm")),
        ("pullback (wafer, best focus)", html_number(t.pullback_nm, "+.1f", " nm")),
        ("gap closes", closes),
        ("NILS at the drawn tip", html_number(f.nils, ".2f")),
        ("judged on", "a 2-D clip around the tip and its gap"),
    ]
    return extra + keep


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
        f'<tr><td><span class="sev {attr_text(v.severity)}">{esc(v.severity)}</span></td>'
        f'<td><code title="{attr_text(CHECKS.get(v.check, ""))}">{esc(v.check)}</code></td>'
        f"<td>{value_vs_limit(v.check, v.value, v.limit)}</td><td>{esc(v.message)}</td></tr>"
        for v in f.violations
    )
    if not rows:
        rows = (
            f"<tr><td><span class='sev {attr_text(f.severity)}'>{esc(f.severity)}</span></td>"
            f"<td><code>{esc(f.check)}</code></td><td>{esc(f.limit)}</td>"
            f"<td>{esc(f.message)}</td></tr>"
        )
    return (
        "<h3>Limits tripped</h3><table class='violations'><thead><tr><th>severity</th>"
        "<th>check</th><th>value against limit</th><th>what it means</th></tr></thead>"
        f"<tbody>{rows}</tbody></table>"
        f"<p class='hint'><strong>What to change:</strong> {esc(f.hint)} "
        "<span class='note'>(drawn nm)</span></p>"
    )


def _locations_html(g: Group) -> str:
    """The group's report entries: each cell holding such a finding, the box in the
    cell's own frame, its placements and the first one's centre in the top cell."""
    n = len(g.entries)
    rows = []
    for k, c in enumerate(g.entries[:LOCATIONS_LISTED], 1):
        f = c.finding
        cx, cy = f.centre_um
        x0, y0, x1, y1 = box_um(c.cell_bbox_nm)
        note = " <span class='note'>(depends on the placement: fix in the parent cell)</span>"
        rows.append(
            f"<tr><td class='n'>{k}</td><td>{name_html(c.cell or '–')}"
            f"{note if c.depends_on_placement else ''}</td>"
            f"<td class='n'>{x0:.3f}, {y0:.3f} – {x1:.3f}, {y1:.3f}</td>"
            f"<td class='n'>{c.placements}</td><td class='n'>{cx:.3f}, {cy:.3f}</td>"
            f"<td class='n'>{f.lines}</td><td class='n'>{f.sites}</td>"
            f"<td class='n'>{html_number(f.pitch_nm)}</td><td>{esc(f.context or '–')}</td></tr>"
        )
    more = (
        f"<p class='note'>… and {n - LOCATIONS_LISTED} more (the JSON output lists them all).</p>"
        if n > LOCATIONS_LISTED
        else ""
    )
    placed = len(g.findings)
    label = (
        f"{n} finding{'s' if n != 1 else ''} of cells, placed {placed} "
        f"time{'s' if placed != 1 else ''}"
    )
    return (
        f"<details class='locs'{' open' if n <= 12 else ''}><summary>{label} "
        "(boxes in µm in each cell's own frame; the first placement's centre in the top "
        "cell; the pictures show the first)</summary>"
        "<table><thead><tr><th class='n'>#</th><th>cell</th>"
        "<th class='n'>box in the cell x0, y0 – x1, y1</th><th class='n'>placed</th>"
        "<th class='n'>first at x, y</th><th class='n'>lines</th><th class='n'>sites</th>"
        "<th class='n'>pitch nm</th><th>worst line</th></tr></thead><tbody>"
        + "".join(rows)
        + f"</tbody></table>{more}</details>"
    )


def _group_title(g: Group, rule: LayerRule | None) -> str:
    f = g.first
    fw = feature_word(rule)
    n = len(g.findings)
    k = len(g.entries)
    cells = f" of {k} finding{'s' if k != 1 else ''} of cells" if k and k != n else ""
    cx, cy = f.centre_um
    if f.tip is not None:
        meta = (
            f"line end {html_number(f.width_nm)} nm, {esc(f.tip.kind)} gap "
            f"{html_number(f.space_nm)} nm, line at {degrees_text(f.orientation_deg)}"
        )
    elif f.array is not None and f.array.lattice in CLIP_KINDS:
        w, h = f.array.feature_nm
        meta = f"feature {html_number(w)} x {html_number(h)} nm {esc(CLIP_WHERE[f.array.lattice])}"
    elif f.array is not None:
        w, h = f.array.feature_nm
        meta = (
            f"{esc(f.array.lattice)} lattice {f.pitch_nm:.1f} x {f.pitch_max_nm:.1f} nm, "
            f"{html_number(w)} x {html_number(h)} nm features, k1 {f.k1:.3f}"
        )
    else:
        meta = (
            f"{esc(pitch_text(f))}, {fw} {html_number(f.width_nm)} / space "
            f"{html_number(f.space_nm)} nm, k1 {k1_number(f)}, lines at "
            f"{degrees_text(f.orientation_deg)}"
            f"{', ' + esc(f.context) + ' line' if f.context else ''}"
        )
    return (
        f'<span class="sev {attr_text(f.severity)}">{esc(f.severity)}</span>'
        f'<span class="what">{name_html(f.layer)} · {esc(f.check)}</span>'
        f'<span class="meta">{meta}</span>'
        f'<span class="count">{n} placement{"s" if n != 1 else ""}{cells} · '
        f"{'first ' if n > 1 else ''}at ({cx:.3f}, {cy:.3f}) µm</span>"
    )


def group_card_html(idx: int, g: Group, renderer: FindingPictures) -> str:
    """The card of group ``idx`` (from 0): its first finding drawn, every place listed."""
    f = g.first
    rule = renderer.rules.get(f.layer)
    lay_png, lay_cap, info = renderer.layout_picture(f)
    img_png, img_cap = renderer.image_picture(f, info.mirrored)
    figs = []
    for png, cap, alt, px in (
        (lay_png, lay_cap, f"layout of {shown(f.layer)} around the region", LAYOUT_PX),
        (img_png, img_cap, f"aerial image across the cut on {shown(f.layer)}", IMAGE_PX),
    ):
        if png is None:
            figs.append(f"<figure><p class='note'>{esc(cap)}</p></figure>")
        else:
            figs.append(
                f'<figure style="width:{px[0] + 2}px"><img src="data:image/png;base64,{png}" '
                f'width="{px[0]}" '
                f'height="{px[1]}" alt="{attr_text(alt)}">'
                f"<figcaption>{esc(cap)}</figcaption></figure>"
            )
    opened = " open" if idx < OPEN_GROUPS else ""
    return (
        f'<details class="group {attr_text(f.severity)}" id="g{idx + 1}" '
        f'data-severity="{attr_text(f.severity)}" data-layer="{attr_text(filter_key(f.layer))}" '
        f'data-count="{len(g.findings)}"{opened}>'
        f"<summary>{_group_title(g, rule)}</summary><div class='body'>"
        f"<p class='message'>{esc(f.message.rstrip('.'))}.</p>"
        f"<div class='pics'>{''.join(figs)}</div>"
        f"<div class='cols'><div>{_numbers_html(f, rule, renderer.scale)}</div>"
        f"<div>{_violations_html(f)}</div></div>"
        f"{_locations_html(g)}</div></details>"
    )
