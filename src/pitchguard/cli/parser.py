"""Command-line parsing."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from pitchguard import __version__
from pitchguard.errors import (
    EXIT_USAGE,
)


class Parser(argparse.ArgumentParser):
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


def _whole(text: str) -> int:
    try:
        return int(float(text))
    except (ValueError, OverflowError):
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None


def _positive_int(text: str) -> int:
    v = _whole(text)
    if v < 1:
        raise argparse.ArgumentTypeError("must be at least 1")
    return v


def _nonnegative_int(text: str) -> int:
    v = _whole(text)
    if v < 0:
        raise argparse.ArgumentTypeError("must be at least 0")
    return v


def build_parser() -> argparse.ArgumentParser:

    p = Parser(
        prog="pitchguard",
        description="Screen a mask layout for line/space pitches its exposure tool may not "
        "resolve. A screening aid: sign-off stays with the fab's calibrated models.",
    )
    p.add_argument("--version", action="version", version=f"pitchguard {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser)

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
    add_output_options(scan)

    dif = sub.add_parser("diff", help="scan two revisions; report introduced, fixed, unchanged")
    dif.add_argument("base", type=Path, help="the earlier revision (GDSII or OASIS)")
    dif.add_argument("new", type=Path, help="the revision to gate")
    dif.add_argument("--rules", "-r", type=Path, required=True, metavar="DECK")
    add_output_options(dif)

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
        "--pitch-y",
        type=_positive_float,
        metavar="NM",
        help="an array of compact features instead of lines: the pitch along y "
        "(default: --pitch when --cd-y is given)",
    )
    probe.add_argument(
        "--cd-y",
        type=_positive_float,
        metavar="NM",
        help="the features' size along y (default: --cd when --pitch-y is given)",
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
    rsub = rules.add_subparsers(dest="rules_command", metavar="ACTION", parser_class=Parser)
    check = rsub.add_parser("check", help="validate a deck and show what it sets")
    check.add_argument("deck", type=Path)
    check.add_argument("--debug", action="store_true", help="show tracebacks")
    return p


def add_output_options(p) -> None:
    """Output options shared by scan and diff."""
    from pitchguard.outputs.html import PICTURED_GROUPS
    from pitchguard.outputs.verdict import FAIL_ON_CHOICES

    p.add_argument(
        "--markers",
        type=Path,
        metavar="PATH",
        help="write a marker layout (.gds or .oas) of flagged regions: a marker cell per "
        "cell with findings, placed where they occur",
    )
    p.add_argument(
        "--flat-markers",
        action="store_true",
        help="write the marker layout flat: one polygon per placement, all in the top cell",
    )
    p.add_argument("--json", type=Path, metavar="PATH", help="write findings as JSON")
    p.add_argument(
        "--json-inline-texts",
        action="store_true",
        help="put each finding's message and hint in its JSON row (default: rows refer "
        "to the top-level list `texts`, which holds each text once)",
    )
    p.add_argument("--sarif", type=Path, metavar="PATH", help="write SARIF 2.1.0 for code scanning")
    p.add_argument("--junit", type=Path, metavar="PATH", help="write JUnit XML for CI dashboards")
    p.add_argument(
        "--html", type=Path, metavar="PATH", help="write a self-contained HTML report with pictures"
    )
    p.add_argument(
        "--html-pictures",
        type=_nonnegative_int,
        default=PICTURED_GROUPS,
        metavar="N",
        help=f"groups of findings drawn with pictures in the HTML report, worst first "
        f"(default: {PICTURED_GROUPS}); the report's index lists every group",
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
