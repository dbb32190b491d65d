"""The HTML report's sections around the group cards: summary, filter bar, index, overflow list."""

from __future__ import annotations

from pathlib import Path

from pitchguard.deck import SEVERITIES, Deck
from pitchguard.outputs.html.groups import Group
from pitchguard.outputs.html.text import (
    attr_text,
    esc,
    filter_key,
    html_number,
    name_html,
    path_html,
)
from pitchguard.outputs.table import one_line_summary
from pitchguard.outputs.texts import SHOWN_PATH_CHARS, clipped
from pitchguard.outputs.verdict import coverage_notes, coverage_text, exit_code, severity_counts
from pitchguard.run.scan import ScanResult

CELLS_SHOWN = 20
"""Top cells named in the summary (a layout may have thousands)."""


def summary_html(result: ScanResult, deck: Deck, fail_on: str, groups: list[Group]) -> str:
    """The verdict line, the scan's facts and the counts per layer and severity."""
    counts = severity_counts(result.findings)
    line = one_line_summary(result, fail_on)
    bad = exit_code(result.findings, fail_on) != 0
    lay = result.layout
    parts = ['<section id="summary"><h2>Summary</h2>']
    parts.append(f'<p class="verdict {"bad" if bad else "good"}" id="one-line">{esc(line)}</p>')
    facts = []
    if lay is not None:
        cells = ", ".join(name_html(c) for c in lay.cells[:CELLS_SHOWN]) or "–"
        if len(lay.cells) > CELLS_SHOWN:
            cells += f" and {len(lay.cells) - CELLS_SHOWN} more"
        facts.append(
            (
                "Layout",
                f"<strong>{name_html(Path(lay.path).name)}</strong> "
                f"<span class='note'>({path_html(lay.path)})</span>",
            )
        )
        facts.append(("Format, top cells", f"{esc(lay.format.upper())}, {cells}"))
        facts.append(("Database grid", f"{lay.grid_nm:g} nm"))
    facts.append(
        (
            "Rule deck",
            f"<strong>{name_html(deck.name)}</strong>"
            + (f" <span class='note'>({path_html(deck.path)})</span>" if deck.path else ""),
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
            f"{sum(len(g.entries) for g in groups)} findings of cells, placed "
            f"{len(result.findings)} times, in {len(groups)} groups of identical findings",
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
                f"{name_html(rule.exposure_name)}: {e.wavelength_nm:g} nm, NA {e.na:g}, "
                f"{esc(e.illumination.shape)}; {esc(rule.field)} field"
            )
        else:
            expo = "–"
        ex = st.extract
        cells = "".join(
            f'<td class="n {"c-" + s if c[s] else "zero"}">{c[s]}</td>' for s in SEVERITIES
        )
        rows.append(
            f"<tr><td><strong>{name_html(st.name)}</strong></td><td>{esc(st.source)}</td>"
            f"<td>{expo}</td>{cells}<td class='n'>{ex.sites:,}</td>"
            f"<td class='n'>{ex.isolated_sites:,}</td>"
            f"<td class='n'>{ex.short_edges + ex.pieces_2d:,}</td>"
            f"<td class='n'>{coverage_text(ex)}</td><td class='n'>{st.shapes:,}</td>"
            "</tr>"
        )
    total = "".join(f'<td class="n">{counts[s]}</td>' for s in SEVERITIES)
    rows.append(
        f'<tr class="total"><td colspan="3">all layers</td>{total}'
        f"<td class='n'>{sum(s.extract.sites for s in result.layers):,}</td><td></td>"
        f"<td></td><td></td><td class='n'>{sum(s.shapes for s in result.layers):,}</td></tr>"
    )
    parts.append(
        '<table id="counts"><thead><tr><th>layer</th><th>source</th><th>exposure</th>'
        f"{head}<th class='n'>sites</th><th class='n'>isolated edges</th>"
        "<th class='n'>2-D edges</th><th class='n'>judged</th><th class='n'>shapes</th></tr>"
        "</thead><tbody>" + "".join(rows) + "</tbody></table>"
    )
    notes = coverage_notes(result.layers)
    if notes:
        items = "".join(f"<li>{esc(clipped(n, SHOWN_PATH_CHARS))}</li>" for n in notes)
        parts.append(f"<h3>Not judged</h3><ul class='note'>{items}</ul>")
    if result.warnings:
        items = "".join(
            f"<li>{esc(clipped(w, SHOWN_PATH_CHARS))}</li>" for w in result.warnings[:20]
        )
        more = f"<li>… {len(result.warnings) - 20} more</li>" if len(result.warnings) > 20 else ""
        parts.append(f"<h3>Layout reader warnings</h3><ul class='note'>{items}{more}</ul>")
    parts.append("</section>")
    return "".join(parts)


def filters_html(result: ScanResult, groups: list[Group]) -> str:
    """The filter bar (hidden until the page's script shows it)."""
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
        f'<label><input type="checkbox" name="layer" value="{attr_text(filter_key(n))}" '
        f"checked> {name_html(n)}</label>"
        for n in layers
    )
    return (
        '<nav id="filters" hidden aria-label="Filter findings">'
        f"<span><strong>Show:</strong> {sev}</span><span><strong>Layers:</strong> {lay}</span>"
        '<span><button type="button" id="expand">expand all</button> '
        '<button type="button" id="collapse">collapse all</button></span>'
        '<span id="shown" class="note"></span></nav>'
    )


INDEX_COLUMNS = (
    ("n", "#", True),
    ("severity", "severity", False),
    ("layer", "layer", False),
    ("check", "check", False),
    ("pitch", "pitch nm", True),
    ("width", "width nm", True),
    ("space", "space nm", True),
    ("k1", "k1", True),
    ("locations", "placed", True),
    ("at", "first at, µm", True),
)
"""The index's columns: the key a link sorts by (``#sort=pitch``), head, numeric."""


def index_html(groups: list[Group], drawn: int) -> str:
    """A compact table of every group, worst first, sortable by any column (a click
    on its head); the first ``drawn`` link to their cards."""
    rows = []
    for k, g in enumerate(groups, 1):
        f = g.first
        cx, cy = f.centre_um
        n = f"<a href='#g{k}'>{k}</a>" if k <= drawn else str(k)
        rows.append(
            f'<tr data-severity="{attr_text(f.severity)}" '
            f'data-layer="{attr_text(filter_key(f.layer))}">'
            f"<td class='n'>{n}</td><td data-v='{f.severity_rank}'><span class='sev "
            f"{attr_text(f.severity)}'>{esc(f.severity)}</span></td><td>{name_html(f.layer)}</td>"
            f"<td>{esc(f.check)}</td>"
            f"<td class='n'>{html_number(f.pitch_nm)}</td>"
            f"<td class='n'>{html_number(f.width_nm)}</td>"
            f"<td class='n'>{html_number(f.space_nm)}</td>"
            f"<td class='n'>{html_number(f.k1, '.3f')}</td>"
            f"<td class='n'>{len(g.findings)}</td><td class='n'>{cx:.3f}, {cy:.3f}</td></tr>"
        )
    heads = "".join(
        ("<th class='n'" if num else "<th") + f" data-key='{key}'>{head}</th>"
        for key, head, num in INDEX_COLUMNS
    )
    opened = " open" if len(groups) <= 30 else ""
    drawn_text = "all with pictures" if drawn >= len(groups) else f"the first {drawn} with pictures"
    return (
        f"<details id='index'{opened}><summary>Index of all {len(groups)} groups "
        f"({drawn_text}; click a column head to sort)</summary>"
        "<table class='sortable'><thead><tr>"
        + heads
        + "</tr></thead><tbody>"
        + "".join(rows)
        + "</tbody></table></details>"
    )


def cap_html(groups: list[Group], start: int) -> str:
    """What the groups beyond the drawn ones are (empty if none): they are listed in
    the index only."""
    rest = groups[start:]
    if not rest:
        return ""
    n_find = sum(len(g.findings) for g in rest)
    return (
        f'<p class="note" id="cap-message"><strong>{len(rest)} more '
        f"group{'s' if len(rest) != 1 else ''} ({n_find} finding{'s' if n_find != 1 else ''})"
        f"</strong> beyond the {start} drawn with pictures {'is' if len(rest) == 1 else 'are'} "
        "listed in the <a href='#index'>index</a> above, worst first; "
        "<code>--html-pictures N</code> draws more.</p>"
    )
