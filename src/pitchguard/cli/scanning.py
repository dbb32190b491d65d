"""The scan and diff commands: run the scan, gate, write every output."""

from __future__ import annotations

from pathlib import Path

from pitchguard.cli.console import make_console, progress_callback, say, show_note, tell
from pitchguard.cli.stops import resume_gc
from pitchguard.errors import (
    PitchguardError,
)


def _outputs(args) -> list[Path]:
    return [p for p in (args.markers, args.json, args.sarif, args.junit, args.html) if p]


def _check_outputs(args, inputs: list[Path]) -> None:
    from pitchguard.outputs.files import check_not_input, resolved
    from pitchguard.outputs.locations import check_root

    if getattr(args, "sarif_root", None) is not None:
        check_root(args.sarif_root)

    outs = _outputs(args) + [p for p in (getattr(args, "write_baseline", None),) if p]
    for out in outs:
        check_not_input(out, inputs)
    if len({str(resolved(p)) for p in outs}) != len(outs):
        raise PitchguardError("two outputs name the same file")
    if args.markers is not None and args.markers.suffix.lower() not in (".gds", ".oas"):
        raise PitchguardError(f"{args.markers}: marker file must end in .gds or .oas")


def only_counts(args) -> bool:
    """A quiet scan writing no file and keeping no baseline reads only the
    findings' counts: their report order is never used."""
    outputs = ("json", "markers", "sarif", "junit", "html", "baseline", "write_baseline")
    return bool(args.quiet) and all(getattr(args, o, None) is None for o in outputs)


def _run_scan(args, deck, layout: Path, label: str = "", cells: bool | None = None):
    """Scan ``layout``; ``cells`` (default: unless only the counts are read) names
    the cell of every finding too: every report lists findings per cell."""
    from functools import partial

    from pitchguard.api.scanning import run_scan

    err = bar = update = None
    if not args.quiet:  # quiet: no bar, no notes, and no rich to import
        err = make_console(stderr=True)
        bar, update = progress_callback(err)
    if update and label:
        inner = update

        def update(stage, done, total):
            inner(f"{label} {stage}", done, total)

    resume_gc()
    if cells is None:
        cells = not only_counts(args)
    try:
        if bar:
            bar.start()
        return run_scan(
            layout,
            deck,
            cell=args.cell,
            region_um=getattr(args, "region", None),
            untiled=args.untiled,
            jobs=args.jobs,
            tile_um=args.tile_um,
            max_memory_mb=args.max_memory_mb,
            scheduler=args.scheduler,
            max_shapes=args.max_shapes,
            read_timeout_s=args.read_timeout,
            cells=cells,
            ordered=not (args.command == "scan" and only_counts(args)),
            progress=update,
            note=None if args.quiet else partial(show_note, err),
        )
    finally:
        if bar:
            bar.stop()


def _write_outputs(args, result, deck, inputs, extra_json=None) -> None:
    from pitchguard.api.scanning import ScanReport

    report = ScanReport(
        result,
        deck,
        fail_on=args.fail_on,
        inputs=inputs,
        cell=args.cell,
        read_timeout_s=args.read_timeout,
    )
    if args.json is not None:
        report.write_json(args.json, inline_texts=args.json_inline_texts, extra=extra_json)
    if args.markers is not None:
        report.write_markers(args.markers, flat=args.flat_markers)
    if args.sarif is not None:
        from pitchguard.outputs.sarif import SERVICE_RESULTS_MAX

        results = report.write_sarif(args.sarif, root=args.sarif_root)
        if results > SERVICE_RESULTS_MAX:  # also with --quiet: CI logs need it
            show_note(
                make_console(stderr=True),
                (
                    f"{args.sarif} holds {results:,} results; code-scanning services "
                    f"take at most {SERVICE_RESULTS_MAX:,} per run (GitHub's documented limit): "
                    "upload the SARIF of a scan gated by --baseline (new findings only) or of a "
                    "--region"
                ),
            )
    if args.junit is not None:
        report.write_junit(args.junit)
    if args.html is not None:
        report.write_html(args.html, pictures=args.html_pictures)


def cmd_scan(args) -> int:
    import dataclasses

    from pitchguard.deck import load_deck
    from pitchguard.errors import EXIT_OK
    from pitchguard.outputs.baseline import (
        apply_baseline,
        deck_note,
        expired_note,
        load_baseline_file,
        write_baseline,
    )
    from pitchguard.outputs.files import resolved
    from pitchguard.outputs.table import one_line_summary, print_table
    from pitchguard.outputs.verdict import exit_code

    deck = load_deck(args.rules)
    inputs = [args.layout, args.rules] + ([args.baseline] if args.baseline else [])
    same = (
        args.write_baseline
        and args.baseline
        and resolved(args.write_baseline, strict=False) == resolved(args.baseline, strict=False)
    )
    if same:
        inputs = inputs[:-1]  # updating a baseline in place keeps its reasons and owners
    _check_outputs(args, inputs)
    base = load_baseline_file(args.baseline) if args.baseline else None
    from pitchguard.outputs.baseline import accepted_to_dict, entry_text
    from pitchguard.outputs.user_text import shown as shown_text
    from pitchguard.outputs.user_text import shown_path

    if base is not None and (mismatch := deck_note(base, args.baseline, deck.name)):
        tell(f"pitchguard: note: {mismatch}")  # also when quiet: a gate that may not hold
    result = _run_scan(args, deck, args.layout)
    gate = None
    if base is not None:
        gate = apply_baseline(result.findings, base.entries, args.baseline, cells=result.cells)
        if lapsed := expired_note(gate, args.baseline):
            tell(f"pitchguard: note: {lapsed}")
    extra = None
    shown = result
    if gate is not None:
        extra = {
            "baseline": {
                "path": str(args.baseline),
                "new": len(gate.new),
                "accepted": gate.accepted_placements,
                "stale": len(gate.stale),
                "stale_entries": gate.stale,
                "accepted_entries": [accepted_to_dict(a) for a in gate.accepted],
                "expired": len(gate.expired),
                "expired_entries": gate.expired,
                "deck": base.deck,
                "deck_matches": base.deck is None or base.deck == deck.name,
            }
        }
        cells = result.cells.take(gate.new_index) if result.cells is not None else None
        shown = dataclasses.replace(result, findings=gate.new, cells=cells)
    _write_outputs(args, result if gate is None else shown, deck, inputs, extra)
    written = None
    if args.write_baseline is not None:
        written = write_baseline(
            args.write_baseline,
            result.findings,
            deck.name,
            str(args.layout),
            [p for p in inputs if p != args.baseline],
            cells=result.cells,
        )
    gated = gate.new if gate is not None else result.findings
    # Writing a baseline accepts what the scan found: the job succeeded once it is written.
    code = EXIT_OK if written is not None else exit_code(gated, args.fail_on)
    note = ""
    if gate is not None:
        note = (
            f" [baseline: {len(gate.new)} new, {gate.accepted_placements} accepted, "
            f"{len(gate.stale)} stale{f', {len(gate.expired)} expired' if gate.expired else ''}]"
        )
    if written is not None:
        note += f" [baseline written: {written} entr{'y' if written == 1 else 'ies'}]"
    if args.quiet:
        say(one_line_summary(shown, args.fail_on) + note)
    else:
        out = make_console()
        print_table(out, shown, args.fail_on, top=args.top)
        if gate is not None:
            out.print(
                f"baseline {shown_path(args.baseline)}: {len(gate.new)} new placement(s) "
                "shown above, "
                f"{gate.accepted_placements} accepted by {len(gate.accepted)} "
                f"entr{'y' if len(gate.accepted) == 1 else 'ies'}, "
                f"{len(gate.stale)} stale"
                + (f", {len(gate.expired)} expired (see the note)" if gate.expired else ""),
                markup=False,
                highlight=False,
            )
            for e in gate.stale[:20]:  # cell names are the user's: no markup, cut short
                out.print(
                    f"  stale (fixed since, prune it): {shown_text(entry_text(e), 200)}",
                    markup=False,
                    highlight=False,
                )
        if written is not None:
            out.print(
                f"baseline written to {shown_path(args.write_baseline)}: {written} "
                f"entr{'y' if written == 1 else 'ies'} (exit 0: the findings are recorded)",
                markup=False,
                highlight=False,
            )
    return code


def cmd_diff(args) -> int:
    import dataclasses

    from pitchguard.deck import load_deck
    from pitchguard.outputs.baseline import diff, unit_text
    from pitchguard.outputs.json_report import entry_to_dict
    from pitchguard.outputs.table import one_line_summary, print_table
    from pitchguard.outputs.user_text import shown as shown_text
    from pitchguard.outputs.user_text import shown_path
    from pitchguard.outputs.verdict import exit_code

    deck = load_deck(args.rules)
    inputs = [args.base, args.new, args.rules]
    _check_outputs(args, inputs)
    # Both scans name cells, even quiet ones: revisions are matched per cell finding.
    base = _run_scan(args, deck, args.base, "base", cells=True)
    new = _run_scan(args, deck, args.new, "new", cells=True)
    d = diff(base.findings, new.findings, base.cells, new.cells)
    shown = dataclasses.replace(
        new,
        findings=d.introduced,
        seconds=base.seconds + new.seconds,
        cells=new.cells.take(d.introduced_index) if new.cells is not None else None,
    )

    def extra(texts) -> dict:
        return {
            "diff": {
                "base": str(args.base),
                "new": str(args.new),
                "introduced": len(d.introduced),
                "fixed": d.fixed_placements,
                "unchanged": d.unchanged_placements,
                "fixed_findings": [entry_to_dict(c, texts) for c in d.fixed],
                "unchanged_findings": [entry_to_dict(c, texts) for _, c in d.unchanged],
            }
        }

    _write_outputs(args, shown, deck, inputs, extra)
    line = (
        f"diff {shown_path(args.base)} -> {shown_path(args.new)}: {len(d.introduced)} introduced, "
        f"{d.fixed_placements} fixed, {d.unchanged_placements} unchanged"
    )
    if args.quiet:
        say(one_line_summary(shown, args.fail_on) + f" [{line}]")
    else:
        out = make_console()
        print_table(out, shown, args.fail_on, top=args.top)
        out.print(line, markup=False, highlight=False)
        for c in d.fixed[:20]:  # cell names are the user's: no markup, cut short
            out.print(
                f"  fixed: {shown_text(unit_text(c), 200)} (base)", markup=False, highlight=False
            )
    return exit_code(d.introduced, args.fail_on)
