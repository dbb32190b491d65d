"""The terminal table and one-line summary (rich)."""

from __future__ import annotations

import math

from pitchguard.deck import SEVERITIES
from pitchguard.outputs.verdict import (
    CAUTION,
    coverage_notes,
    coverage_text,
    exit_code,
    severity_counts,
)
from pitchguard.run.scan import ScanResult

SEVERITY_STYLE = {"fail": "bold red", "risk": "bold yellow", "marginal": "magenta"}


def one_line_summary(result: ScanResult, fail_on: str) -> str:
    c = severity_counts(result.findings)
    code = exit_code(result.findings, fail_on)
    verdict = "FAILED" if code else "passed"
    shapes = sum(s.shapes for s in result.layers)
    return (
        f"pitchguard: {verdict} (fail-on {fail_on}): {c['fail']} fail, {c['risk']} risk, "
        f"{c['marginal']} marginal in {len(result.layers)} layers, {shapes:,} shapes, "
        f"{result.seconds:.1f} s"
    )


def print_table(console, result: ScanResult, fail_on: str, top: int = 20) -> None:
    """Counts per layer and severity, then the worst regions."""
    from rich.table import Table

    from pitchguard.judge.per_cell import cell_findings
    from pitchguard.outputs.texts import SHOWN_PATH_CHARS, markup_safe

    counts = Table(title="Findings per layer", title_justify="left", show_edge=False)
    counts.add_column("layer")
    counts.add_column("source")
    for s in SEVERITIES:
        counts.add_column(s, justify="right", style=SEVERITY_STYLE[s])
    counts.add_column("sites", justify="right")
    counts.add_column("isolated", justify="right")
    counts.add_column("2-D edges", justify="right")
    counts.add_column("judged", justify="right")
    counts.add_column("shapes", justify="right")
    for st in result.layers:
        c = severity_counts(result.findings, st.name)
        ex = st.extract
        counts.add_row(
            markup_safe(st.name),
            markup_safe(st.source),
            *(str(c[s]) for s in SEVERITIES),
            f"{ex.sites:,}",
            f"{ex.isolated_sites:,}",
            f"{ex.short_edges + ex.pieces_2d:,}",
            coverage_text(ex),
            f"{st.shapes:,}",
        )
    console.print(counts)
    for note in coverage_notes(result.layers):
        note = markup_safe(note, 2 * SHOWN_PATH_CHARS)
        console.print(f"[yellow]note:[/] {note}", markup=True, highlight=False)

    entries = cell_findings(result)
    if entries:
        shown = entries[:top]
        worst = Table(
            title=f"Worst findings ({len(shown)} of {len(entries)}; "
            f"{len(result.findings)} placement{'s' if len(result.findings) != 1 else ''})",
            title_justify="left",
            show_edge=False,
        )
        for col, just in (
            ("#", "right"),
            ("severity", "left"),
            ("layer", "left"),
            ("cell", "left"),
            ("placed", "right"),
            ("x, y µm", "right"),
            ("pitch nm", "right"),
            ("w / s nm", "right"),
            ("k1", "right"),
            ("NILS", "right"),
            ("check", "left"),
        ):
            worst.add_column(col, justify=just)
        for k, c in enumerate(shown, 1):
            f = c.finding
            cx, cy = f.centre_um
            worst.add_row(
                str(k),
                f"[{SEVERITY_STYLE[f.severity]}]{f.severity}[/]",
                markup_safe(f.layer),
                markup_safe(c.cell or "-"),
                f"{c.placements:,}",
                f"{cx:.3f}, {cy:.3f}",
                f"{f.pitch_nm:.1f}" if math.isfinite(f.pitch_nm) else "isolated",
                f"{f.width_nm:.0f} / "
                + (f"{f.space_nm:.0f}" if math.isfinite(f.space_nm) else "-"),
                f"{f.k1:.3f}" if math.isfinite(f.k1) else "-",
                f"{f.nils:.2f}" if math.isfinite(f.nils) else "-",
                f.check,
            )
        console.print()
        console.print(worst)
        if len(entries) > top:
            console.print(f"  … {len(entries) - top} more (see --json / --markers)")
        if any(c.cell for c in shown):
            console.print(
                "  [dim]x, y: the first placement, in the top cell; placed: how many times "
                "the finding occurs[/]"
            )
    for w in result.warnings[:5]:
        console.print(f"[dim]layout library: {markup_safe(w, 2 * SHOWN_PATH_CHARS)}[/]")
    console.print()
    console.print(one_line_summary(result, fail_on))
    console.print(f"[dim]{CAUTION}[/]")
