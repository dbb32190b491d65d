"""Command line: a thin layer over scan, report and deck.

Exit codes (documented in the README):

* 0 - no finding at or above ``--fail-on``
* 1 - findings at or above ``--fail-on``
* 2 - bad input or usage (unreadable layout, invalid deck, bad option)
* 3 - internal error (a bug; ``--debug`` shows the traceback)
"""

from __future__ import annotations

import argparse
import gc
import os
import signal
import sys
from pathlib import Path

from pitchguard import __version__
from pitchguard.errors import (
    EXIT_OK,
    EXIT_USAGE,
    PitchguardError,
    check_stop,
    request_stop,
    stop_requested,
)

# numpy asks the kernel for huge pages for every array of 4 MB or more.  A scan
# makes and drops such arrays by the thousand, and where the kernel compacts
# memory to find huge pages (transparent huge pages in "madvise" mode) that
# cost more than it saved: without it a 4x10^7-shape chip scanned 2-4 % faster
# on 1 worker and 6-8 % on 2, a 10^7-shape chip about 1 % (measured on 2
# cores, interleaved runs).  numpy reads the variable when it is imported,
# which the command does after this; a value the user set is kept (numpy
# documents it under "global state").
os.environ.setdefault("NUMPY_MADVISE_HUGEPAGE", "0")

EXIT_INTERNAL = 3


class _Parser(argparse.ArgumentParser):
    def error(self, message: str):  # one line, exit 2
        self.print_usage(sys.stderr)
        self.exit(EXIT_USAGE, f"pitchguard: error: {message}\n")


def _region(text: str) -> tuple[float, float, float, float]:
    try:
        vals = tuple(float(v) for v in text.split(","))
    except ValueError:
        vals = ()
    if len(vals) != 4 or not (vals[0] < vals[2] and vals[1] < vals[3]):
        raise argparse.ArgumentTypeError("expected X0,Y0,X1,Y1 in µm with X0 < X1 and Y0 < Y1")
    return vals  # type: ignore[return-value]


def _positive_float(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not (v > 0 and v < 1e7):
        raise argparse.ArgumentTypeError(f"expected a positive length in nm, got {text!r}")
    return v


def _pitch_range(text: str) -> tuple[float, float, float]:
    try:
        lo, hi, step = (float(v) for v in text.split(":"))
    except ValueError:
        raise argparse.ArgumentTypeError("expected FROM:TO:STEP in nm, e.g. 80:400:5") from None
    if not (0 < lo < hi and step > 0) or (hi - lo) / step > 2000:
        raise argparse.ArgumentTypeError("need 0 < FROM < TO, STEP > 0 and at most 2000 pitches")
    return lo, hi, step


def _positive_int(text: str) -> int:
    try:
        v = int(float(text))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError("must be at least 1")
    return v


def build_parser() -> argparse.ArgumentParser:

    p = _Parser(
        prog="pitchguard",
        description="Screen a mask layout for line/space pitches its exposure tool may not "
        "resolve. A screening aid: sign-off stays with the fab's calibrated models.",
    )
    p.add_argument("--version", action="version", version=f"pitchguard {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    scan = sub.add_parser("scan", help="scan a GDSII/OASIS layout with a rule deck")
    scan.add_argument("layout", type=Path, help="GDSII (.gds) or OASIS (.oas) file")
    scan.add_argument(
        "--rules", "-r", type=Path, required=True, metavar="DECK", help="rule deck (TOML)"
    )
    scan.add_argument(
        "--region",
        type=_region,
        metavar="X0,Y0,X1,Y1",
        help="scan only sites inside this window (µm, as drawn)",
    )
    scan.add_argument(
        "--baseline",
        type=Path,
        metavar="PATH",
        help="accepted findings: report and fail only on new ones",
    )
    scan.add_argument(
        "--write-baseline",
        type=Path,
        metavar="PATH",
        help="record this scan's findings as accepted (keeps reasons)",
    )
    _add_outputs(scan)

    dif = sub.add_parser("diff", help="scan two revisions; report introduced, fixed, unchanged")
    dif.add_argument("base", type=Path, help="the earlier revision (GDSII or OASIS)")
    dif.add_argument("new", type=Path, help="the revision to gate")
    dif.add_argument("--rules", "-r", type=Path, required=True, metavar="DECK")
    _add_outputs(dif)

    probe = sub.add_parser("probe", help="explain one pitch: orders, k1, aerial image, metrics")
    probe.add_argument("--rules", "-r", type=Path, required=True, metavar="DECK")
    probe.add_argument("--layer", required=True, metavar="NAME", help="deck layer")
    probe.add_argument(
        "--pitch",
        type=_positive_float,
        required=True,
        metavar="NM",
        help="pitch, nm at wafer scale",
    )
    probe.add_argument(
        "--cd",
        type=_positive_float,
        required=True,
        metavar="NM",
        help="feature width: line on a clear field, opening on a dark one",
    )
    probe.add_argument(
        "--focus",
        type=float,
        default=0.0,
        metavar="NM",
        help="focus of the image shown (metrics use the deck's focus range)",
    )
    probe.add_argument(
        "--orientation",
        type=float,
        default=90.0,
        metavar="DEG",
        help="direction the lines run (default 90: along y, pitch along x)",
    )
    probe.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    probe.add_argument(
        "--plot", type=Path, metavar="PATH", help="write the aerial image (.png or .svg)"
    )
    probe.add_argument("--debug", action="store_true", help="show tracebacks")

    sweep = sub.add_parser("sweep", help="through-pitch sweep for one CD: forbidden pitches")
    sweep.add_argument("--rules", "-r", type=Path, required=True, metavar="DECK")
    sweep.add_argument("--layer", required=True, metavar="NAME", help="deck layer")
    sweep.add_argument(
        "--cd",
        type=_positive_float,
        metavar="NM",
        help="feature width, nm (default: the layer's anchor CD)",
    )
    sweep.add_argument(
        "--pitches",
        type=_pitch_range,
        metavar="FROM:TO:STEP",
        help="pitch range, nm (default: from the cutoff to 4 lambda/NA)",
    )
    sweep.add_argument(
        "--orientation",
        type=float,
        default=90.0,
        metavar="DEG",
        help="direction the lines run (default 90)",
    )
    sweep.add_argument(
        "--plot", type=Path, metavar="PATH", help="write the sweep plot (.png or .svg)"
    )
    sweep.add_argument("--json", type=Path, metavar="PATH", help="write the sweep as JSON")
    sweep.add_argument("--debug", action="store_true", help="show tracebacks")

    rules = sub.add_parser("rules", help="work with rule decks")
    rsub = rules.add_subparsers(dest="rules_command", metavar="ACTION", parser_class=_Parser)
    check = rsub.add_parser("check", help="validate a deck and show what it sets")
    check.add_argument("deck", type=Path)
    check.add_argument("--debug", action="store_true", help="show tracebacks")
    return p


def _progress_callback(console):
    """A rich progress bar on stderr, or nothing when not a terminal."""
    if not console.is_terminal:
        return None, None
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    bar = Progress(
        TextColumn("scanning {task.description:<24}"),
        BarColumn(),
        TimeElapsedColumn(),
        console=console,
        transient=True,
    )
    task = bar.add_task("", total=1)

    def update(stage: str, done: int, total: int) -> None:
        bar.update(task, description=stage, completed=done, total=total)

    return bar, update


def _add_outputs(p) -> None:
    """Output options shared by scan and diff."""
    from pitchguard.report import FAIL_ON_CHOICES

    p.add_argument(
        "--markers",
        type=Path,
        metavar="PATH",
        help="write a marker layout (.gds or .oas) of flagged regions",
    )
    p.add_argument("--json", type=Path, metavar="PATH", help="write findings as JSON")
    p.add_argument("--sarif", type=Path, metavar="PATH", help="write SARIF 2.1.0 for code scanning")
    p.add_argument("--junit", type=Path, metavar="PATH", help="write JUnit XML for CI dashboards")
    p.add_argument(
        "--html", type=Path, metavar="PATH", help="write a self-contained HTML report with pictures"
    )
    p.add_argument(
        "--fail-on",
        choices=FAIL_ON_CHOICES,
        default="fail",
        help="exit 1 when a (new) finding of this severity or worse exists (default: fail)",
    )
    p.add_argument("--cell", metavar="NAME", help="top cell to scan (default: all top cells)")
    p.add_argument(
        "--top",
        type=_positive_int,
        default=20,
        metavar="N",
        help="worst regions listed in the terminal (default: 20)",
    )
    p.add_argument(
        "--max-shapes",
        type=_positive_int,
        default=None,
        metavar="N",
        help="refuse layouts that flatten to more shapes (default: 2 billion tiled, "
        "20 million --untiled)",
    )
    p.add_argument(
        "--read-timeout",
        type=_positive_float,
        default=None,
        metavar="S",
        help="stop reading a layout after S seconds (default: 3600)",
    )
    p.add_argument(
        "--jobs",
        "-j",
        type=_positive_int,
        default=None,
        metavar="N",
        help="local worker processes for the tiles (default: all cores)",
    )
    p.add_argument(
        "--tile-um",
        type=_positive_float,
        default=None,
        metavar="UM",
        help="tile size, rounded up to a multiple of 10 (default: chosen from the "
        "layout's arrays and --max-memory-mb)",
    )
    p.add_argument(
        "--max-memory-mb",
        type=_positive_int,
        default=None,
        metavar="MB",
        help="memory for the scan's processes together; picks the tile size "
        "and may use fewer workers (default: 2048 per worker)",
    )
    p.add_argument(
        "--scheduler", metavar="ADDRESS", help="run the tiles on this dask.distributed scheduler"
    )
    p.add_argument(
        "--untiled", action="store_true", help="flatten the layout and scan it in this one process"
    )
    p.add_argument("--quiet", "-q", action="store_true", help="print only the one-line summary")
    p.add_argument("--debug", action="store_true", help="show tracebacks")


def _outputs(args) -> list[Path]:
    return [p for p in (args.markers, args.json, args.sarif, args.junit, args.html) if p]


def _check_outputs(args, inputs: list[Path]) -> None:
    from pitchguard.report import _check_not_input

    outs = _outputs(args) + [p for p in (getattr(args, "write_baseline", None),) if p]
    for out in outs:
        _check_not_input(out, inputs)
    if len({str(p.resolve()) for p in outs}) != len(outs):
        raise PitchguardError("two outputs name the same file")
    if args.markers is not None and args.markers.suffix.lower() not in (".gds", ".oas"):
        raise PitchguardError(f"{args.markers}: marker file must end in .gds or .oas")


def _note(console, text: str) -> None:
    """Advice on stderr, one line (above a progress bar, if one is shown)."""
    console.print(f"pitchguard: note: {text}", soft_wrap=True, markup=False, highlight=False)


def _only_counts(args) -> bool:
    """A quiet scan writing no file and keeping no baseline reads only the
    findings' counts: their report order is never used."""
    outputs = ("json", "markers", "sarif", "junit", "html", "baseline", "write_baseline")
    return bool(args.quiet) and all(getattr(args, o, None) is None for o in outputs)


def _run_scan(args, deck, layout: Path, label: str = ""):
    from functools import partial

    from pitchguard.layout import DEFAULT_MAX_SHAPES
    from pitchguard.scan import scan_layout

    err = bar = update = None
    if not args.quiet:  # quiet: no bar, no notes, and no rich to import (15 ms, measured)
        err = _console(stderr=True)
        bar, update = _progress_callback(err)
    if update and label:
        inner = update

        def update(stage, done, total):  # noqa: F811 - labelled wrapper
            inner(f"{label} {stage}", done, total)

    _resume_gc()
    tiled = not args.untiled
    if not tiled and (args.jobs or args.tile_um or args.scheduler or args.max_memory_mb):
        raise PitchguardError(
            "--untiled cannot be combined with --jobs, --tile-um, --max-memory-mb or --scheduler"
        )
    try:
        if bar:
            bar.start()
        if tiled:
            from pitchguard.parallel import DEFAULT_TILED_MAX_SHAPES, scan_tiled

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
                note=None if args.quiet else partial(_note, err),
                ordered=not (args.command == "scan" and _only_counts(args)),
            )
        return scan_layout(
            layout,
            deck,
            cell=args.cell,
            region_um=getattr(args, "region", None),
            max_shapes=args.max_shapes or DEFAULT_MAX_SHAPES,
            progress=update,
            read_timeout_s=args.read_timeout,
        )
    finally:
        if bar:
            bar.stop()


def _write_outputs(args, result, deck, inputs, extra_json: dict | None = None) -> None:
    from pitchguard.report import to_json, write_json, write_markers

    if args.json is not None:
        payload = to_json(result, deck, args.fail_on, lazy=True)
        if extra_json:
            payload.update(extra_json)
        write_json(args.json, payload, inputs)
    if args.markers is not None:
        write_markers(args.markers, result, deck, inputs)
    if args.sarif is not None:
        from pitchguard.ci_formats import SERVICE_RESULTS_MAX, write_sarif

        write_sarif(args.sarif, result, deck, result.layout.path, args.fail_on, inputs)
        if len(result.findings) > SERVICE_RESULTS_MAX:  # also with --quiet: CI logs need it
            _note(
                _console(stderr=True),
                (
                    f"{args.sarif} holds {len(result.findings):,} results; code-scanning services "
                    f"take at most {SERVICE_RESULTS_MAX:,} per run (GitHub's documented limit): "
                    "upload the SARIF of a scan gated by --baseline (new findings only) or of a "
                    "--region"
                ),
            )
    if args.junit is not None:
        from pitchguard.ci_formats import write_junit

        write_junit(args.junit, result, deck, args.fail_on, inputs)
    if args.html is not None:
        from pitchguard.html_report import write_html
        from pitchguard.parallel import add_clip_geometry

        if result.tiling is not None:  # tiled scans keep no geometry: read the pictures' part
            result = add_clip_geometry(result, deck, args.cell, timeout_s=args.read_timeout)
        write_html(args.html, result, deck, inputs, args.fail_on)


def cmd_scan(args) -> int:
    import dataclasses

    from pitchguard.baseline import apply_baseline, load_baseline, write_baseline
    from pitchguard.deck import load_deck
    from pitchguard.report import exit_code, one_line_summary, print_table

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
    result = _run_scan(args, deck, args.layout)
    gate = apply_baseline(result.findings, entries, args.baseline) if entries is not None else None
    extra = None
    shown = result
    if gate is not None:
        accepted_ids = {id(f) for f, _ in gate.accepted}
        extra = {
            "baseline": {
                "path": str(args.baseline),
                "new": len(gate.new),
                "accepted": len(gate.accepted),
                "stale": len(gate.stale),
                "stale_entries": gate.stale,
                "accepted_entries": [
                    {
                        "finding_index": result.findings.index(f),
                        "reason": e.get("reason", ""),
                        "owner": e.get("owner", ""),
                    }
                    for f, e in gate.accepted
                ],
            }
        }
        extra["finding_status"] = [
            "accepted" if id(f) in accepted_ids else "new" for f in result.findings
        ]
        shown = dataclasses.replace(result, findings=gate.new)
    _write_outputs(args, result if gate is None else shown, deck, inputs, extra)
    if args.write_baseline is not None:
        write_baseline(
            args.write_baseline,
            result.findings,
            deck.name,
            str(args.layout),
            [p for p in inputs if p != args.baseline],
        )
    gated = gate.new if gate is not None else result.findings
    code = exit_code(gated, args.fail_on)
    note = ""
    if gate is not None:
        note = (
            f" [baseline: {len(gate.new)} new, {len(gate.accepted)} accepted, "
            f"{len(gate.stale)} stale]"
        )
    if args.quiet:
        _say(one_line_summary(shown, args.fail_on) + note)
    else:
        out = _console()
        print_table(out, shown, args.fail_on, top=args.top)
        if gate is not None:
            out.print(
                f"baseline {args.baseline}: {len(gate.new)} new finding(s) shown above, "
                f"{len(gate.accepted)} accepted, {len(gate.stale)} stale"
            )
            for e in gate.stale[:20]:
                out.print(
                    f"  stale (fixed since, prune it): {e['layer']} {e['check']} "
                    f"pitch {e['pitch_nm']} nm at {e['centre_um']} µm"
                )
    return code


def cmd_diff(args) -> int:
    import dataclasses

    from pitchguard.baseline import diff
    from pitchguard.deck import load_deck
    from pitchguard.report import exit_code, finding_to_dict, one_line_summary, print_table

    deck = load_deck(args.rules)
    inputs = [args.base, args.new, args.rules]
    _check_outputs(args, inputs)
    base = _run_scan(args, deck, args.base, "base")
    new = _run_scan(args, deck, args.new, "new")
    d = diff(base.findings, new.findings)
    shown = dataclasses.replace(new, findings=d.introduced, seconds=base.seconds + new.seconds)
    extra = {
        "diff": {
            "base": str(args.base),
            "new": str(args.new),
            "introduced": len(d.introduced),
            "fixed": len(d.fixed),
            "unchanged": len(d.unchanged),
            "fixed_findings": [finding_to_dict(f) for f in d.fixed],
            "unchanged_findings": [finding_to_dict(f) for _, f in d.unchanged],
        }
    }
    _write_outputs(args, shown, deck, inputs, extra)
    line = (
        f"diff {args.base} -> {args.new}: {len(d.introduced)} introduced, "
        f"{len(d.fixed)} fixed, {len(d.unchanged)} unchanged"
    )
    if args.quiet:
        _say(one_line_summary(shown, args.fail_on) + f" [{line}]")
    else:
        out = _console()
        print_table(out, shown, args.fail_on, top=args.top)
        out.print(line)
        for f in d.fixed[:20]:
            out.print(
                f"  fixed: {f.layer} {f.check} pitch {f.pitch_nm:.1f} nm at {f.centre_um} µm (base)"
            )
    return exit_code(d.introduced, args.fail_on)


def cmd_rules_check(args) -> int:
    from rich.table import Table

    from pitchguard.deck import load_deck
    from pitchguard.orders import cutoff_pitch

    deck = load_deck(args.deck)
    console = _console()
    scale = (
        f"drawn at mask scale, reduction {deck.reduction:g}"
        if deck.drawn_scale == "mask"
        else "drawn at wafer scale"
    )
    console.print(f"{args.deck}: valid deck '{deck.name}', {len(deck.layers)} layers, {scale}")
    t = Table(show_edge=False)
    for col in (
        "layer",
        "source",
        "field",
        "exposure",
        "λ nm",
        "NA",
        "σ max",
        "cutoff x / y nm",
        "k1 risk / marginal pitch nm",
    ):
        t.add_column(col)
    for r in deck.layers:
        e = r.exposure
        cx, cy = cutoff_pitch(e, 90.0), cutoff_pitch(e, 0.0)
        pr = 2 * r.k1_risk_below * e.wavelength_nm / e.na
        pm = 2 * r.k1_marginal_below * e.wavelength_nm / e.na
        t.add_row(
            r.name,
            r.source,
            r.field,
            r.exposure_name,
            f"{e.wavelength_nm:g}",
            f"{e.na:g}",
            f"{e.sigma_max:g}",
            f"{cx:.1f} / {cy:.1f}",
            f"{pr:.1f} / {pm:.1f}",
        )
    console.print(t)
    console.print("[dim]pitches at wafer scale; cutoff x is for lines along y (pitch along x)[/]")
    return EXIT_OK


def _gone(stream) -> None:
    """``stream``'s reader went away (``pitchguard scan ... | head``): what is
    still to write to it goes nowhere, and the command ends with the exit code
    it would have had with all of it read (rich's own handling exits 1, which
    would turn a pass into a fail)."""
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, stream.fileno())
    os.close(devnull)


def _tell(text: str) -> None:
    """A line on stderr (see :func:`_gone`)."""
    try:
        print(text, file=sys.stderr, flush=True)
    except BrokenPipeError:
        _gone(sys.stderr)


def _say(text: str) -> None:
    """A line on stdout (see :func:`_gone`)."""
    try:
        print(text, flush=True)
    except BrokenPipeError:
        _gone(sys.stdout)


def _console(stderr: bool = False):
    """A rich console on stdout (120 columns when not a terminal: CI logs,
    pipes) or on stderr; a reader that went away does not change the exit
    code (see :func:`_gone`)."""
    from rich.console import Console

    class _Quietly(Console):
        def on_broken_pipe(self) -> None:
            self.quiet = True
            _gone(sys.stderr if self.stderr else sys.stdout)

    if stderr:
        return _Quietly(stderr=True)
    c = _Quietly()
    return c if c.is_terminal else _Quietly(width=120)


def _fmt_num(v: float, unit: str = "", digits: int = 2) -> str:
    import math

    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return f"{v:.{digits}f}{unit}"


def _grating_json(r) -> dict:
    from pitchguard.report import _clean

    m = r.metrics
    return _clean(
        {
            "pitch_nm": r.pitch_nm,
            "cd_nm": r.cd_nm,
            "orientation_deg": r.orientation_deg,
            "k1": r.orders.k1,
            "orders": list(r.orders.orders),
            "orders_on_axis": list(r.orders.orders_on_axis),
            "two_beam_fraction": r.orders.two_beam_fraction,
            "cutoff_pitch_nm": r.orders.cutoff_pitch_nm,
            "contrast": m.contrast if m else None,
            "nils": m.nils if m else None,
            "printed_cd_nm": m.cd_nm if m else None,
            "cd_error_pct": m.cd_error_pct if m else None,
            "exposure_latitude_pct": m.el_pct if m else None,
            "depth_of_focus_nm": m.dof_nm if m else None,
            "threshold": m.threshold if m else None,
            "dose_to_size": m.dose_to_size if m else None,
            "severity": r.severity,
            "checks": [
                {
                    "check": v.check,
                    "severity": v.severity,
                    "value": v.value,
                    "limit": v.limit,
                    "message": v.message,
                }
                for v in r.violations
            ],
        }
    )


def cmd_probe(args) -> int:
    import json

    from pitchguard.deck import load_deck
    from pitchguard.report import CAUTION, _clean
    from pitchguard.sweep import grating, pupil_picture

    deck = load_deck(args.rules)
    rule = deck.layer(args.layer)
    r = grating(rule, args.pitch, args.cd, args.orientation, args.focus)
    if args.plot is not None:
        from pitchguard.plots import plot_image

        plot_image(rule, r, args.plot, [args.rules])
    if args.json:
        out = _grating_json(r)
        out["focus_nm"] = args.focus
        out["image"] = _clean({"x_nm": r.x_nm.tolist(), "intensity": r.intensity.tolist()})
        out["caution"] = CAUTION
        _say(json.dumps(out))
        return EXIT_OK
    console = _console()
    e = rule.exposure
    ill = e.illumination
    console.print(
        f"[bold]{rule.name}[/] ({rule.field} field) on {rule.exposure_name}: "
        f"λ {e.wavelength_nm:g} nm, NA {e.na:g}, {ill.shape} σmax {e.sigma_max:g}, "
        f"{e.mask.kind} mask"
    )
    feature = "line" if rule.field == "clear" else "opening"
    console.print(
        f"grating: pitch {r.pitch_nm:g} nm, {feature} {r.cd_nm:g} nm, "
        f"lines along {r.orientation_deg:g}°"
    )
    o = r.orders
    console.print(
        f"k1 {o.k1:.3f}; orders on axis {list(o.orders_on_axis)}; through the source "
        f"{list(o.orders)}; source sending 0th + a 1st order: {100 * o.two_beam_fraction:.1f} %; "
        f"cutoff pitch {o.cutoff_pitch_nm:.1f} nm"
    )
    console.print()
    for line in pupil_picture(rule, r):
        console.print("   " + line, highlight=False, markup=False)
    console.print(
        "   [dim]* pupil edge, 0 source (0th order), + / - source shifted by the "
        "+1st / -1st order inside the pupil, 2 higher orders[/]"
    )
    console.print()
    m = r.metrics
    if m is not None:
        rows = [
            ("image contrast", _fmt_num(m.contrast, "", 3)),
            ("NILS at the drawn edges", _fmt_num(m.nils, "", 2)),
            (
                "printed CD at nominal dose",
                "lost" if m.lost else "bridged" if m.bridged else _fmt_num(m.cd_nm, " nm", 1),
            ),
            (
                "CD error",
                _fmt_num(m.cd_error_pct, " %", 1) if rule.anchor else "not judged (no anchor)",
            ),
            ("exposure latitude", _fmt_num(m.el_pct, " %", 1)),
            ("depth of focus", _fmt_num(m.dof_nm, " nm", 0)),
            ("threshold / dose-to-size", f"{m.threshold:.3f} / {_fmt_num(m.dose_to_size, '', 3)}"),
        ]
        for k, v in rows:
            console.print(f"  {k:<28} {v}")
    console.print()
    if r.violations:
        for v in r.violations:
            console.print(f"  [bold]{v.severity}[/] {v.check}: {v.message}")
    else:
        console.print("  ok: no limit of this layer is broken")
    console.print(f"[dim]{CAUTION}[/]")
    return EXIT_OK


def cmd_sweep(args) -> int:
    import numpy as np
    from rich.table import Table

    from pitchguard.deck import load_deck
    from pitchguard.report import CAUTION, write_json
    from pitchguard.sweep import bands, default_pitches, through_pitch

    deck = load_deck(args.rules)
    rule = deck.layer(args.layer)
    cd = args.cd
    if cd is None:
        if rule.anchor is None:
            raise PitchguardError(f"layer {rule.name!r} has no anchor in the deck: give --cd NM")
        cd = rule.anchor.cd_nm
    if args.pitches:
        lo, hi, step = args.pitches
        pitches = np.arange(lo, hi + step / 2, step)
    else:
        pitches = default_pitches(rule, cd)
    console = _console()
    err = _console(stderr=True)
    with err.status(f"imaging {len(pitches)} pitches ...") if err.is_terminal else _null():
        results = through_pitch(rule, cd, pitches, args.orientation)
    if not results:
        raise PitchguardError(f"no pitch in the range is larger than the CD ({cd:g} nm)")
    t = Table(
        title=f"{rule.name}: CD {cd:g} nm through pitch", title_justify="left", show_edge=False
    )
    for col in ("pitch nm", "k1", "contrast", "NILS", "CD err %", "EL %", "DOF nm", "verdict"):
        t.add_column(col, justify="right" if col != "verdict" else "left")
    for r in results:
        m = r.metrics
        t.add_row(
            f"{r.pitch_nm:.1f}",
            f"{r.orders.k1:.3f}",
            _fmt_num(m.contrast if m else None, "", 3),
            _fmt_num(m.nils if m else None),
            _fmt_num(m.cd_error_pct if m else None, "", 1),
            _fmt_num(m.el_pct if m else None, "", 1),
            _fmt_num(m.dof_nm if m else None, "", 0),
            r.severity if r.severity == "ok" else f"{r.severity} ({r.violations[0].check})",
        )
    console.print(t)
    for a, b, sev in bands(results):
        console.print(f"  {sev:<8} pitch {a:.1f} - {b:.1f} nm")
    console.print(f"[dim]{CAUTION}[/]")
    inputs = [args.rules]
    if args.plot is not None:
        from pitchguard.plots import plot_sweep

        plot_sweep(rule, results, args.plot, inputs)
    if args.json is not None:
        write_json(
            args.json,
            {
                "layer": rule.name,
                "cd_nm": cd,
                "caution": CAUTION,
                "bands": [{"from_nm": a, "to_nm": b, "severity": s} for a, b, s in bands(results)],
                "pitches": [_grating_json(r) for r in results],
            },
            inputs,
        )
    return EXIT_OK


class _null:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


class _Terminated(BaseException):
    """SIGTERM, raised in the main thread so that cleanup (temporary files) runs."""


_in_fork_hook = False
"""True while the parent's after-fork hook unblocks the stop signals: a stop
that was pending is only noted then (an exception raised in a fork hook is
printed with its traceback and dropped); the waits that follow a fork honour
it within a tenth of a second (see errors.check_stop)."""


def _raise_now(frame) -> bool:
    """Whether a stop may be raised where ``frame`` was interrupted.  Not in a
    callback where Python prints the exception with its traceback and drops
    it: the parent's after-fork hook, or the import system's module-lock
    callback (a Ctrl-C there at start-up printed "Exception ignored in:
    <function _get_module_lock.<locals>.cb>").  The stop is noted either way
    and honoured at the next check (see errors.check_stop)."""
    if _in_fork_hook:
        return False
    while frame is not None:
        code = frame.f_code
        if code.co_name == "cb" and code.co_filename == "<frozen importlib._bootstrap>":
            return False
        frame = frame.f_back
    return True


def _on_sigterm(signum, frame):  # noqa: ARG001 - signal handler signature
    request_stop(_Terminated)
    if _raise_now(frame):
        raise _Terminated()


def _on_sigint(signum, frame):  # noqa: ARG001 - signal handler signature
    request_stop(KeyboardInterrupt)
    if _raise_now(frame):
        raise KeyboardInterrupt


_STOP_SIGNALS = (signal.SIGTERM, signal.SIGINT)


def _before_fork() -> None:
    """Block the stop signals in the forking thread: the child inherits the mask,
    so it cannot run the command's handlers before it has reset them."""
    if signal.getsignal(signal.SIGTERM) is _on_sigterm:
        signal.pthread_sigmask(signal.SIG_BLOCK, _STOP_SIGNALS)


def _after_fork_in_parent() -> None:
    global _in_fork_hook
    if signal.getsignal(signal.SIGTERM) is _on_sigterm:
        _in_fork_hook = True
        try:
            signal.pthread_sigmask(signal.SIG_UNBLOCK, _STOP_SIGNALS)
        finally:
            _in_fork_hook = False


def _after_fork_in_child() -> None:
    """A process forked from the command (a reader child, a tile worker) leaves
    stopping to the command: SIGTERM kills it quietly, SIGINT (a Ctrl-C reaches
    the whole process group) is ignored.  Run with the handlers of the command,
    it would raise in the middle of whatever it was doing and print a traceback
    (seen: a SIGTERM in a tile worker still running its initializer)."""
    if signal.getsignal(signal.SIGTERM) is _on_sigterm:
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        signal.pthread_sigmask(signal.SIG_UNBLOCK, _STOP_SIGNALS)  # pending: handled as above


os.register_at_fork(
    before=_before_fork, after_in_parent=_after_fork_in_parent, after_in_child=_after_fork_in_child
)


_GC_PAUSED = {"by_us": False}


def _resume_gc() -> None:
    """Collect garbage again, if :func:`main` paused it for start-up."""
    if _GC_PAUSED["by_us"]:
        _GC_PAUSED["by_us"] = False
        gc.enable()


def main(argv: list[str] | None = None) -> int:
    request_stop(None)
    # No garbage collection while the command starts: importing numpy, pydantic
    # and the deck's models makes objects that live to the end, and collections
    # that walk them found nothing (a quiet scan's start, up to the scan, took
    # 0.163 s instead of 0.176 s: medians of 8 interleaved runs).  Resumed before
    # any scan (workers fork with it on) and before other commands' work.
    if gc.isenabled():
        gc.disable()
        _GC_PAUSED["by_us"] = True
    try:
        previous = {
            sig: signal.signal(sig, handler)
            for sig, handler in ((signal.SIGTERM, _on_sigterm), (signal.SIGINT, _on_sigint))
        }
    except ValueError:  # not the main thread (embedded use): leave signals alone
        previous = {}
    try:
        code = _main(argv)
        # A signal that arrived while Python ran a callback (the import system's,
        # say) was dropped there ("Exception ignored in ..."): honour it now.
        check_stop()
    except KeyboardInterrupt:  # before or after the command ran (while importing, say)
        code = _stopped(130)
    except _Terminated:
        code = _stopped(143)
    except Exception:
        if stop_requested() is None:
            raise
        code = _stopped_by_request()  # its exception was turned into another one
    finally:
        _resume_gc()
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        request_stop(None)
    if code in (130, 143) and argv is None:
        # Run as the command: leave now.  Stopped worker processes can leave the
        # process pool's result thread blocked on a half-written result, and the
        # interpreter would wait for it at exit forever; temporary output files
        # were removed while the stack unwound.
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    if argv is None:
        # The interpreter's last collections would walk every object left (the
        # imports alone: about 40 ms a run, measured); the process ends anyway.
        gc.freeze()
    return code


def _stopped_by_request() -> int:
    return _stopped(130 if stop_requested() is KeyboardInterrupt else 143)


def _stopped(code: int) -> int:
    request_stop(None)  # honoured: main's last check_stop must not report it again
    what = "interrupted" if code == 130 else "terminated"
    _tell(f"pitchguard: {what}; no output was left half-written")
    return code


def _main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    if args.command == "rules" and args.rules_command is None:
        parser.parse_args(["rules", "--help"])
    handler = {"scan": cmd_scan, "probe": cmd_probe, "sweep": cmd_sweep, "diff": cmd_diff}.get(
        args.command, cmd_rules_check
    )
    if handler not in (cmd_scan, cmd_diff):  # those resume it when their scans start
        _resume_gc()
    try:
        return handler(args)
    except KeyboardInterrupt:
        return _stopped(130)
    except _Terminated:
        return _stopped(143)
    except Exception as exc:
        if stop_requested() is not None:
            # What the stop broke (a child the same signal stopped, a library
            # that turned the handler's exception into its own): report the stop.
            return _stopped_by_request()
        if getattr(args, "debug", False):
            raise
        if isinstance(exc, PitchguardError):
            _tell(f"pitchguard: error: {exc}")
            return exc.exit_code
        # A bug, not the user's fault.
        _tell(
            f"pitchguard: internal error: {type(exc).__name__}: {exc} "
            "(run with --debug for a traceback, and please report it)"
        )
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
