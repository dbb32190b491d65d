"""The HTML report page: summary, filters, one card per group."""

from __future__ import annotations

import math
from pathlib import Path

from pitchguard import __version__
from pitchguard.deck import SEVERITIES, Deck, LayerRule
from pitchguard.judge.checks import CHECKS
from pitchguard.judge.findings import Finding
from pitchguard.outputs.files import atomic_write
from pitchguard.outputs.html.groups import (
    LOCATIONS_LISTED,
    OPEN_GROUPS,
    REMAINING_LISTED,
    Group,
    group_findings,
)
from pitchguard.outputs.html.pictures import FindingPictures
from pitchguard.outputs.html.style import IMAGE_PX, LAYOUT_PX, SEVERITY_COLOUR, degrees_text
from pitchguard.outputs.html.text import (
    attr_text,
    esc,
    feature_word,
    html_number,
    orders_text,
    value_vs_limit,
)
from pitchguard.outputs.table import one_line_summary
from pitchguard.outputs.verdict import CAUTION, exit_code, severity_counts
from pitchguard.run.scan import ScanResult

CSS = """
:root {{ --fail: {fail}; --risk: {risk}; --marginal: {marginal}; --ink: #1d2733;
        --muted: #5b6673; --line: #d8dee4; --panel: #f6f8fa; }}
* {{ box-sizing: border-box; }}
body {{ font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
       color: var(--ink); margin: 0; background: #fff; }}
main {{ max-width: 1200px; margin: 0 auto; padding: 18px 22px 40px; }}
h1 {{ font-size: 22px; margin: 0 0 2px; }}
h2 {{ font-size: 17px; margin: 26px 0 8px; border-bottom: 1px solid var(--line);
     padding-bottom: 4px; }}
.sub {{ color: var(--muted); margin: 0 0 12px; }}
.caution {{ border-left: 5px solid #c9a227; background: #fff8e1; padding: 8px 12px;
           margin: 10px 0 14px; }}
.verdict {{ font: 600 13px/1.4 ui-monospace, "DejaVu Sans Mono", monospace; padding: 8px 12px;
           border-radius: 4px; background: var(--panel); border: 1px solid var(--line); }}
.verdict.bad {{ border-color: var(--fail); color: var(--fail); }}
.verdict.good {{ border-color: #2e7d32; color: #2e7d32; }}
dl.facts {{ display: grid; grid-template-columns: max-content 1fr; gap: 2px 14px; margin: 10px 0; }}
dl.facts dt {{ color: var(--muted); }} dl.facts dd {{ margin: 0; }}
table {{ border-collapse: collapse; font-size: 13px; }}
th, td {{ padding: 3px 9px; border-bottom: 1px solid var(--line); text-align: left;
         vertical-align: top; }}
th {{ background: var(--panel); font-weight: 600; }}
td.n, th.n {{ text-align: right; font-variant-numeric: tabular-nums; }}
tr.total td {{ font-weight: 600; border-top: 2px solid var(--ink); }}
.sev {{ display: inline-block; min-width: 64px; text-align: center; border-radius: 3px;
       color: #fff; font-weight: 600; font-size: 12px; padding: 0 6px; }}
.sev.fail {{ background: var(--fail); }} .sev.risk {{ background: var(--risk); }}
.sev.marginal {{ background: var(--marginal); }}
td.c-fail {{ color: var(--fail); font-weight: 600; }} td.c-risk {{ color: var(--risk);
  font-weight: 600; }} td.c-marginal {{ color: var(--marginal); font-weight: 600; }}
td.zero {{ color: #a0a8b0; }}
#filters {{ background: var(--panel); border: 1px solid var(--line); border-radius: 4px;
           padding: 6px 10px; margin: 8px 0 12px; display: flex; flex-wrap: wrap;
           gap: 6px 18px; align-items: center; position: sticky; top: 0; z-index: 2; }}
#filters[hidden] {{ display: none; }}
#filters label {{ margin-right: 8px; white-space: nowrap; }}
#filters button {{ font: inherit; font-size: 12px; padding: 1px 8px; }}
details.group {{ border: 1px solid var(--line); border-left: 6px solid #999; border-radius: 4px;
                margin: 10px 0; background: #fff; }}
details.group.fail {{ border-left-color: var(--fail); }}
details.group.risk {{ border-left-color: var(--risk); }}
details.group.marginal {{ border-left-color: var(--marginal); }}
details.group[hidden] {{ display: none; }}
details.group > summary {{ cursor: pointer; padding: 7px 10px; list-style-position: inside; }}
details.group > summary .what {{ font-weight: 600; margin: 0 6px; }}
details.group > summary .meta {{ color: var(--muted); }}
details.group > summary .count {{ float: right; color: var(--muted); }}
.body {{ padding: 2px 12px 12px; }}
.message {{ margin: 4px 0 10px; }}
.pics {{ display: flex; flex-wrap: wrap; gap: 12px; }}
figure {{ margin: 0; max-width: 600px; }}
figure img {{ border: 1px solid var(--line); display: block; max-width: 100%; height: auto; }}
figcaption {{ font-size: 12px; color: var(--muted); margin-top: 3px; }}
.cols {{ display: flex; flex-wrap: wrap; gap: 10px 28px; margin-top: 12px; }}
.cols > div {{ flex: 1 1 330px; }}
h3 {{ font-size: 14px; margin: 6px 0 4px; }}
.hint {{ background: #eef6ee; border-left: 4px solid #2e7d32; padding: 6px 10px; margin: 8px 0 0; }}
details.locs {{ margin-top: 10px; }}
#index {{ margin: 4px 0 12px; }} #index > summary {{ cursor: pointer; font-weight: 600; }}
#index table {{ margin-top: 6px; }} #index tr[hidden], #more-groups tr[hidden] {{ display: none; }}
details.locs > summary {{ cursor: pointer; color: var(--muted); }}
.note {{ color: var(--muted); font-size: 13px; }}
footer {{ margin-top: 30px; color: var(--muted); font-size: 12px; border-top: 1px solid var(--line);
         padding-top: 8px; }}
@media print {{ #filters {{ display: none; }} details.group {{ break-inside: avoid; }} }}
""".format(**SEVERITY_COLOUR)  # noqa: UP031 - CSS braces make str.format awkward


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
    parts.append(f'<p class="verdict {"bad" if bad else "good"}" id="one-line">{esc(line)}</p>')
    facts = []
    if lay is not None:
        cells = ", ".join(lay.cells) or "–"
        facts.append(
            (
                "Layout",
                f"<strong>{esc(Path(lay.path).name)}</strong> "
                f"<span class='note'>({esc(lay.path)})</span>",
            )
        )
        facts.append(("Format, top cells", f"{esc(lay.format.upper())}, {esc(cells)}"))
        facts.append(("Database grid", f"{lay.grid_nm:g} nm"))
    facts.append(
        (
            "Rule deck",
            f"<strong>{esc(deck.name)}</strong>"
            + (f" <span class='note'>({esc(deck.path)})</span>" if deck.path else ""),
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
    facts.append(("Gate", f"fail-on <code>{esc(fail_on)}</code>"))
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
                f"{esc(rule.exposure_name)}: {e.wavelength_nm:g} nm, NA {e.na:g}, "
                f"{esc(e.illumination.shape)}; {esc(rule.field)} field"
            )
        else:
            expo = "–"
        ex = st.extract
        cells = "".join(
            f'<td class="n {"c-" + s if c[s] else "zero"}">{c[s]}</td>' for s in SEVERITIES
        )
        rows.append(
            f"<tr><td><strong>{esc(st.name)}</strong></td><td>{esc(st.source)}</td>"
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
        items = "".join(f"<li>{esc(w)}</li>" for w in result.warnings[:20])
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
        f'<label><input type="checkbox" name="layer" value="{attr_text(n)}" checked> '
        f"{esc(n)}</label>"
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
    fw = feature_word(rule)
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
        ("image contrast", html_number(f.contrast, ".3f")),
        ("NILS at the drawn edges", html_number(f.nils, ".2f")),
        ("exposure latitude (EL)", html_number(f.el_pct, ".1f", " %")),
        ("depth of focus (DOF)", html_number(f.dof_nm, ".0f", " nm")),
        ("printed CD (wafer)", _printed_cd(f, scale)),
        (
            "CD error at the anchored dose",
            html_number(f.cd_error_pct, "+.1f", " %")
            if math.isfinite(f.cd_error_pct)
            else "not judged (no dose anchor, or not printed)",
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
    body = "".join(f"<tr><th>{esc(k)}</th><td>{v}</td></tr>" for k, v in rows)
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
    n = len(g.findings)
    rows = []
    for k, f in enumerate(g.findings[:LOCATIONS_LISTED], 1):
        cx, cy = f.centre_um
        x0, y0, x1, y1 = f.bbox_um
        rows.append(
            f"<tr><td class='n'>{k}</td><td class='n'>{cx:.3f}, {cy:.3f}</td>"
            f"<td class='n'>{x0:.3f}, {y0:.3f} – {x1:.3f}, {y1:.3f}</td>"
            f"<td class='n'>{f.lines}</td><td class='n'>{f.sites}</td>"
            f"<td class='n'>{f.pitch_nm:.1f}</td><td>{esc(f.context or '–')}</td></tr>"
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
    fw = feature_word(rule)
    n = len(g.findings)
    cx, cy = f.centre_um
    return (
        f'<span class="sev {attr_text(f.severity)}">{esc(f.severity)}</span>'
        f'<span class="what">{esc(f.layer)} · {esc(f.check)}</span>'
        f'<span class="meta">pitch {f.pitch_nm:.1f} nm, {fw} {html_number(f.width_nm)} / space '
        f"{html_number(f.space_nm)} nm, k1 {f.k1:.3f}, lines at {degrees_text(f.orientation_deg)}"
        f"{', ' + esc(f.context) + ' line' if f.context else ''}</span>"
        f'<span class="count">{n} location{"s" if n != 1 else ""} · '
        f"{'first ' if n > 1 else ''}at ({cx:.3f}, {cy:.3f}) µm</span>"
    )


def _group_html(idx: int, g: Group, renderer: FindingPictures) -> str:
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
        f'data-severity="{attr_text(f.severity)}" data-layer="{attr_text(f.layer)}" '
        f'data-count="{len(g.findings)}"{opened}>'
        f"<summary>{_group_title(g, rule)}</summary><div class='body'>"
        f"<p class='message'>{esc(f.message.rstrip('.'))}.</p>"
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
            f'<tr data-severity="{attr_text(f.severity)}" data-layer="{attr_text(f.layer)}">'
            f"<td class='n'><a href='#g{k}'>{k}</a></td><td><span class='sev "
            f"{attr_text(f.severity)}'>{esc(f.severity)}</span></td><td>{esc(f.layer)}</td>"
            f"<td><a href='#g{k}'>{esc(f.check)}</a></td><td class='n'>{f.pitch_nm:.1f}</td>"
            f"<td class='n'>{html_number(f.width_nm)} / {html_number(f.space_nm)}</td>"
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
            f'<tr data-severity="{attr_text(f.severity)}" data-layer="{attr_text(f.layer)}">'
            f"<td class='n'>{k}</td><td><span class='sev {attr_text(f.severity)}'>"
            f"{esc(f.severity)}</span></td><td>{esc(f.layer)}</td><td>{esc(f.check)}</td>"
            f"<td class='n'>{f.pitch_nm:.1f}</td><td class='n'>{html_number(f.width_nm)} / "
            f"{html_number(f.space_nm)}</td><td class='n'>{f.k1:.3f}</td>"
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


def render_html(result: ScanResult, deck: Deck, fail_on: str, max_groups: int = 500) -> str:
    """The whole page as text."""
    groups = group_findings(result.findings)
    renderer = FindingPictures(result, deck)
    drawn = groups[: max(0, max_groups)]
    lay = result.layout
    title = f"pitchguard report: {Path(lay.path).name}" if lay is not None else "pitchguard report"
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width, initial-scale=1'>",
        # No network: forbid every fetch except inline styles/scripts and data: images.
        "<meta http-equiv='Content-Security-Policy' content=\"default-src 'none'; "
        "img-src data:; style-src 'unsafe-inline'; script-src 'unsafe-inline'\">",
        f"<title>{esc(title)}</title><style>{CSS}</style></head><body><main>",
        f"<h1>{esc(title)}</h1>",
        f"<p class='sub'>Line/space pitch screening with deck <strong>{esc(deck.name)}"
        f"</strong> · pitchguard {esc(__version__)}</p>",
        f'<p class="caution" id="caution"><strong>Screening aid.</strong> {esc(CAUTION)} '
        f"{esc(CAVEATS)}</p>",
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
        f"<footer><p>{esc(CAUTION)}</p><p>pitchguard {esc(__version__)} · "
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
