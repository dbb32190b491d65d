"""The scan and diff commands: run the scan, gate, write every output."""

from __future__ import annotations

from pathlib import Path

from pitchguard.cli.console import make_console, progress_callback, say, show_note
from pitchguard.cli.stops import resume_gc
from pitchguard.errors import (
    PitchguardError,
)


def _outputs(args) -> list[Path]:
    return [p for p in (args.markers, args.json, args.sarif, args.junit, args.html) if p]


def _check_outputs(args, inputs: list[Path]) -> None:
    from pitchguard.outputs.files import check_not_input

    outs = _outputs(args) + [p for p in (getattr(args, "write_baseline", None),) if p]
    for out in outs:
        check_not_input(out, inputs)
    if len({str(p.resolve()) for p in outs}) != len(outs):
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

    from pitchguard.layout.reader import DEFAULT_MAX_SHAPES
    from pitchguard.run.scan import scan_layout

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
    tiled = not args.untiled
    if not tiled and (args.jobs or args.tile_um or args.scheduler or args.max_memory_mb):
        raise PitchguardError(
            "--untiled cannot be combined with --jobs, --tile-um, --max-memory-mb or --scheduler"
        )
    try:
        if bar:
            bar.start()
        if tiled:
            from pitchguard.run.plan import DEFAULT_TILED_MAX_SHAPES
            from pitchguard.run.tiled import scan_tiled

            return scan_tiled(
                layout,
                deck,
                tile_um=args.tile_um,
                jobs=args.jobs,
                scheduler=args.scheduler,
                cell=args.cell,
                progress=update,
                region_um=getattr(args, "region", None),
                max_shapes=args.max_shapes or DEFAULT_TILED_MAX_SHAPES,
                read_timeout_s=args.read_timeout,
                max_memory_mb=args.max_memory_mb,
                note=None if args.quiet else partial(show_note, err),
                ordered=not (args.command == "scan" and only_counts(args)),
                cells=cells,
            )
        return scan_layout(
            layout,
            deck,
            cell=args.cell,
            region_um=getattr(args, "region", None),
            max_shapes=args.max_shapes or DEFAULT_MAX_SHAPES,
            progress=update,
            read_timeout_s=args.read_timeout,
            cells=cells,
        )
    finally:
        if bar:
            bar.stop()


def _write_outputs(args, result, deck, inputs, extra_json=None) -> None:
    from pitchguard.outputs.json_report import TextTable, to_json, write_json
    from pitchguard.outputs.markers import write_markers

    if args.json is not None:
        texts = None if args.json_inline_texts else TextTable()
        payload = to_json(result, deck, args.fail_on, lazy=True, texts=texts)
        if extra_json:  # a dict, or a function of the text table
            payload.update(extra_json(texts) if callable(extra_json) else extra_json)
        write_json(args.json, payload, inputs)
    if args.markers is not None:
        write_markers(args.markers, result, deck, inputs, flat=args.flat_markers)
    if args.sarif is not None:
        from pitchguard.outputs.sarif import SERVICE_RESULTS_MAX, write_sarif

        results = write_sarif(args.sarif, result, deck, result.layout.path, args.fail_on, inputs)
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
        from pitchguard.outputs.junit import write_junit

        write_junit(args.junit, result, deck, args.fail_on, inputs)
    if args.html is not None:
        from pitchguard.outputs.html.clips import add_clip_geometry
        from pitchguard.outputs.html.page import write_html

        if result.tiling is not None:  # tiled scans keep no geometry: read the pictures' part
            result = add_clip_geometry(
                result, deck, args.cell, args.html_pictures, timeout_s=args.read_timeout
            )
        write_html(args.html, result, deck, inputs, args.fail_on, args.html_pictures)


def cmd_scan(args) -> int:
    import dataclasses

    from pitchguard.deck import load_deck
    from pitchguard.outputs.baseline import apply_baseline, load_baseline, write_baseline
    from pitchguard.outputs.table import one_line_summary, print_table
    from pitchguard.outputs.verdict import exit_code

    deck = load_deck(args.rules)
    inputs = [args.layout, args.rules] + ([args.baseline] if args.baseline else [])
    same = (
        args.write_baseline
        and args.baseline
        and args.write_baseline.resolve() == args.baseline.resolve()
    )
    if same:
        inputs = inputs[:-1]  # updating a baseline in place keeps its reasons and owners
    _check_outputs(args, inputs)
    entries = load_baseline(args.baseline) if args.baseline else None
    from pitchguard.outputs.baseline import accepted_to_dict, entry_text
    from pitchguard.outputs.texts import printable

    result = _run_scan(args, deck, args.layout)
    gate = None
    if entries is not None:
        gate = apply_baseline(result.findings, entries, args.baseline, cells=result.cells)
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
            }
        }
        cells = result.cells.take(gate.new_index) if result.cells is not None else None
        shown = dataclasses.replace(result, findings=gate.new, cells=cells)
    _write_outputs(args, result if gate is None else shown, deck, inputs, extra)
    if args.write_baseline is not None:
        write_baseline(
            args.write_baseline,
            result.findings,
            deck.name,
            str(args.layout),
            [p for p in inputs if p != args.baseline],
            cells=result.cells,
        )
    gated = gate.new if gate is not None else result.findings
    code = exit_code(gated, args.fail_on)
    note = ""
    if gate is not None:
        note = (
            f" [baseline: {len(gate.new)} new, {gate.accepted_placements} accepted, "
            f"{len(gate.stale)} stale]"
        )
    if args.quiet:
        say(one_line_summary(shown, args.fail_on) + note)
    else:
        out = make_console()
        print_table(out, shown, args.fail_on, top=args.top)
        if gate is not None:
            out.print(
                f"baseline {printable(args.baseline)}: {len(gate.new)} new placement(s) "
                "shown above, "
                f"{gate.accepted_placements} accepted by {len(gate.accepted)} "
                f"entr{'y' if len(gate.accepted) == 1 else 'ies'}, "
                f"{len(gate.stale)} stale",
                markup=False,
            )
            for e in gate.stale[:20]:  # cell names are the user's: no markup
                out.print(
                    f"  stale (fixed since, prune it): {printable(entry_text(e))}", markup=False
                )
    return code


def cmd_diff(args) -> int:
    import dataclasses

    from pitchguard.deck import load_deck
    from pitchguard.outputs.baseline import diff, unit_text
    from pitchguard.outputs.json_report import entry_to_dict
    from pitchguard.outputs.table import one_line_summary, print_table
    from pitchguard.outputs.texts import printable
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
        f"diff {printable(args.base)} -> {printable(args.new)}: {len(d.introduced)} introduced, "
        f"{d.fixed_placements} fixed, {d.unchanged_placements} unchanged"
    )
    if args.quiet:
        say(one_line_summary(shown, args.fail_on) + f" [{line}]")
    else:
        out = make_console()
        print_table(out, shown, args.fail_on, top=args.top)
        out.print(line, markup=False)
        for c in d.fixed[:20]:  # cell names are the user's: no markup
            out.print(f"  fixed: {printable(unit_text(c))} (base)", markup=False)
    return exit_code(d.introduced, args.fail_on)
