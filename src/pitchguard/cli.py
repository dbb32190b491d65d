"""Command line: a thin layer over scan, report and deck.

Exit codes (documented in the README):

* 0 - no finding at or above ``--fail-on``
* 1 - findings at or above ``--fail-on``
* 2 - bad input or usage (unreadable layout, invalid deck, bad option)
* 3 - internal error (a bug; ``--debug`` shows the traceback)
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from pitchguard import __version__
from pitchguard.errors import EXIT_OK, EXIT_USAGE, PitchguardError

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


def _positive_int(text: str) -> int:
    try:
        v = int(float(text))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError("must be at least 1")
    return v


def build_parser() -> argparse.ArgumentParser:
    from pitchguard.report import FAIL_ON_CHOICES

    p = _Parser(
        prog="pitchguard",
        description="Screen a mask layout for line/space pitches its exposure tool may not "
        "resolve. A screening aid: sign-off stays with the fab's calibrated models.",
    )
    p.add_argument("--version", action="version", version=f"pitchguard {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    scan = sub.add_parser("scan", help="scan a GDSII/OASIS layout with a rule deck")
    scan.add_argument("layout", type=Path, help="GDSII (.gds) or OASIS (.oas) file")
    scan.add_argument("--rules", "-r", type=Path, required=True, metavar="DECK",
                      help="rule deck (TOML)")  # fmt: skip
    scan.add_argument("--markers", type=Path, metavar="PATH",
                      help="write a marker layout (.gds or .oas) of flagged regions")  # fmt: skip
    scan.add_argument("--json", type=Path, metavar="PATH", help="write findings as JSON")
    scan.add_argument(
        "--fail-on", choices=FAIL_ON_CHOICES, default="fail",
        help="exit 1 when a finding of this severity or worse exists (default: fail)",
    )  # fmt: skip
    scan.add_argument("--cell", metavar="NAME", help="top cell to scan (default: all top cells)")
    scan.add_argument("--region", type=_region, metavar="X0,Y0,X1,Y1",
                      help="scan only sites inside this window (µm, as drawn)")  # fmt: skip
    scan.add_argument("--top", type=_positive_int, default=20, metavar="N",
                      help="worst regions listed in the terminal (default: 20)")  # fmt: skip
    scan.add_argument(
        "--max-shapes", type=_positive_int, default=None, metavar="N",
        help="refuse layouts that flatten to more shapes (default: 20 million)",
    )  # fmt: skip
    scan.add_argument("--quiet", "-q", action="store_true",
                      help="print only the one-line summary")  # fmt: skip
    scan.add_argument("--debug", action="store_true", help="show tracebacks")

    rules = sub.add_parser("rules", help="work with rule decks")
    rsub = rules.add_subparsers(dest="rules_command", metavar="ACTION", parser_class=_Parser)
    check = rsub.add_parser("check", help="validate a deck and show what it sets")
    check.add_argument("deck", type=Path)
    check.add_argument("--debug", action="store_true", help="show tracebacks")
    return p


def _progress_callback(console, quiet: bool):
    """A rich progress bar on stderr, or nothing when quiet or not a terminal."""
    if quiet or not console.is_terminal:
        return None, None
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    bar = Progress(
        TextColumn("scanning {task.description:<24}"), BarColumn(), TimeElapsedColumn(),
        console=console, transient=True,
    )  # fmt: skip
    task = bar.add_task("", total=1)

    def update(stage: str, done: int, total: int) -> None:
        bar.update(task, description=stage, completed=done, total=total)

    return bar, update


def cmd_scan(args) -> int:
    from rich.console import Console

    from pitchguard.deck import load_deck
    from pitchguard.layout import DEFAULT_MAX_SHAPES
    from pitchguard.report import (
        exit_code,
        one_line_summary,
        print_table,
        to_json,
        write_json,
        write_markers,
    )
    from pitchguard.scan import scan_layout

    deck = load_deck(args.rules)
    inputs = [args.layout, args.rules]
    for out in (args.markers, args.json):
        if out is not None:
            from pitchguard.report import _check_not_input

            _check_not_input(out, inputs)
    if args.markers is not None and args.markers.suffix.lower() not in (".gds", ".oas"):
        raise PitchguardError(f"{args.markers}: marker file must end in .gds or .oas")
    err = Console(stderr=True)
    bar, update = _progress_callback(err, args.quiet)
    try:
        if bar:
            bar.start()
        result = scan_layout(
            args.layout,
            deck,
            cell=args.cell,
            region_um=args.region,
            max_shapes=args.max_shapes or DEFAULT_MAX_SHAPES,
            progress=update,
        )
    finally:
        if bar:
            bar.stop()
    if args.json is not None:
        write_json(args.json, to_json(result, deck, args.fail_on), inputs)
    if args.markers is not None:
        write_markers(args.markers, result, deck, inputs)
    if args.quiet:
        print(one_line_summary(result, args.fail_on))
    else:
        out = Console()
        if not out.is_terminal:
            out = Console(width=120)  # CI logs: do not wrap the table at 80 columns
        print_table(out, result, args.fail_on, top=args.top)
    return exit_code(result.findings, args.fail_on)


def cmd_rules_check(args) -> int:
    from rich.console import Console
    from rich.table import Table

    from pitchguard.deck import load_deck
    from pitchguard.orders import cutoff_pitch

    deck = load_deck(args.deck)
    console = Console()
    if not console.is_terminal:
        console = Console(width=120)
    scale = f"drawn at mask scale, reduction {deck.reduction:g}" if deck.drawn_scale == "mask" \
        else "drawn at wafer scale"  # fmt: skip
    console.print(f"{args.deck}: valid deck '{deck.name}', {len(deck.layers)} layers, {scale}")
    t = Table(show_edge=False)
    for col in ("layer", "source", "field", "exposure", "λ nm", "NA", "σ max",
                "cutoff x / y nm", "k1 risk / marginal pitch nm"):  # fmt: skip
        t.add_column(col)
    for r in deck.layers:
        e = r.exposure
        cx, cy = cutoff_pitch(e, 90.0), cutoff_pitch(e, 0.0)
        pr = 2 * r.k1_risk_below * e.wavelength_nm / e.na
        pm = 2 * r.k1_marginal_below * e.wavelength_nm / e.na
        t.add_row(
            r.name, r.source, r.field, r.exposure_name, f"{e.wavelength_nm:g}", f"{e.na:g}",
            f"{e.sigma_max:g}", f"{cx:.1f} / {cy:.1f}", f"{pr:.1f} / {pm:.1f}",
        )  # fmt: skip
    console.print(t)
    console.print("[dim]pitches at wafer scale; cutoff x is for lines along y (pitch along x)[/]")
    return EXIT_OK


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    if args.command == "rules" and args.rules_command is None:
        parser.parse_args(["rules", "--help"])
    handler = cmd_scan if args.command == "scan" else cmd_rules_check
    try:
        return handler(args)
    except PitchguardError as exc:
        if getattr(args, "debug", False):
            raise
        print(f"pitchguard: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("pitchguard: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug, not the user's fault
        if getattr(args, "debug", False):
            raise
        print(
            f"pitchguard: internal error: {type(exc).__name__}: {exc} "
            "(run with --debug for a traceback, and please report it)",
            file=sys.stderr,
        )
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
