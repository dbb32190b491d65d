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

    from pitchguard.outputs.texts import orders_text  # here: a quiet scan prints no table

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
            st.name,
            st.source,
            *(str(c[s]) for s in SEVERITIES),
            f"{ex.sites:,}",
            f"{ex.isolated_sites:,}",
            f"{ex.short_edges + ex.pieces_2d:,}",
            coverage_text(ex),
            f"{st.shapes:,}",
        )
    console.print(counts)
    for note in coverage_notes(result.layers):
        console.print(f"[yellow]note:[/] {note}", markup=True, highlight=False)

    if result.findings:
        shown = result.findings[:top]
        worst = Table(
            title=f"Worst regions ({len(shown)} of {len(result.findings)})",
            title_justify="left",
            show_edge=False,
        )
        for col, just in (
            ("#", "right"),
            ("severity", "left"),
            ("layer", "left"),
            ("x, y µm", "right"),
            ("pitch nm", "right"),
            ("w / s nm", "right"),
            ("k1", "right"),
            ("NILS", "right"),
            ("orders", "left"),
            ("lines", "right"),
            ("check", "left"),
        ):
            worst.add_column(col, justify=just)
        for k, f in enumerate(shown, 1):
            cx, cy = f.centre_um
            worst.add_row(
                str(k),
                f"[{SEVERITY_STYLE[f.severity]}]{f.severity}[/]",
                f.layer,
                f"{cx:.3f}, {cy:.3f}",
                f"{f.pitch_nm:.1f}" if math.isfinite(f.pitch_nm) else "-",
                f"{f.width_nm:.0f} / "
                + (f"{f.space_nm:.0f}" if math.isfinite(f.space_nm) else "-"),
                f"{f.k1:.3f}" if math.isfinite(f.k1) else "-",
                f"{f.nils:.2f}" if math.isfinite(f.nils) else "-",
                orders_text(f.orders),
                str(f.lines),
                f.check,
            )
        console.print()
        console.print(worst)
        if len(result.findings) > top:
            console.print(f"  … {len(result.findings) - top} more (see --json / --markers)")
    for w in result.warnings[:5]:
        console.print(f"[dim]layout library: {w}[/]")
    console.print()
    console.print(one_line_summary(result, fail_on))
    console.print(f"[dim]{CAUTION}[/]")
