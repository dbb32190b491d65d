"""Command-line parsing."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from pitchguard import __version__
from pitchguard.cli import numbers
from pitchguard.errors import (
    EXIT_USAGE,
)
from pitchguard.option_bounds import SCHEDULER_TIMEOUT_S

SHOWN_ERROR = 300
"""Characters of an argparse message shown: it may repeat every unknown argument."""


class Parser(argparse.ArgumentParser):
    """argparse with one error line (exit 2), and numbers that start with '-'
    read as an option's value."""

    def error(self, message: str):
        from pitchguard.outputs.user_text import shown

        self.exit(
            EXIT_USAGE,
            f"pitchguard: error: {shown(message, SHOWN_ERROR)} (see: {self.prog} --help)\n",
        )

    def parse_args(self, args=None, namespace=None):
        ns, extra = self.parse_known_args(args, namespace)
        if extra:  # the help to see is the command's, not the top level's
            self._command_parser(ns).error(f"unrecognized arguments: {' '.join(extra)}")
        return ns

    def parse_known_args(self, args=None, namespace=None):
        args = sys.argv[1:] if args is None else list(args)
        return super().parse_known_args(self._values_joined(args), namespace)

    def _command_parser(self, ns) -> argparse.ArgumentParser:
        """The (sub)parser of the deepest command named in ``ns``."""
        parser = self
        while True:
            subs = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
            name = getattr(ns, subs[0].dest, None) if subs else None
            if name not in (subs[0].choices if subs else {}):
                return parser
            parser = subs[0].choices[name]

    def _values_joined(self, args: list[str]) -> list[str]:
        """``args`` with ``--option VALUE`` written ``--option=VALUE`` where the
        option takes a number and VALUE starts with '-' (argparse would take
        ``-5,-5,5,5`` or ``-1e3`` for an option) but names no option."""
        numeric = {
            s
            for a in self._actions
            if a.nargs is None and getattr(a.type, "number_text", False)
            for s in a.option_strings
        }
        out: list[str] = []
        i = 0
        while i < len(args):
            word = args[i]
            if word == "--":  # the rest are positional
                return out + args[i:]
            option = self._long_option(word) if word not in numeric else word
            if option in numeric and i + 1 < len(args) and self._is_value(args[i + 1]):
                out.append(f"{option}={args[i + 1]}")
                i += 2
                continue
            out.append(word)
            i += 1
        return out

    def _long_option(self, word: str) -> str | None:
        """The long option ``word`` abbreviates, if one (argparse takes unique prefixes)."""
        if not word.startswith("--") or "=" in word or not self.allow_abbrev:
            return None
        found = {s for s in self._option_string_actions if s.startswith(word)}
        return found.pop() if len(found) == 1 else None

    def _is_value(self, word: str) -> bool:
        """Whether ``word``, starting with '-', is a value rather than an option."""
        if not word.startswith("-") or word in ("-", "--"):
            return False
        if word[1].isdigit() or word[1] == ".":
            return True
        name = word.split("=", 1)[0]
        if name in self._option_string_actions or self._long_option(name):
            return False
        return word.startswith("--") or word[:2] not in self._option_string_actions


RULES_HELP = "rule deck (TOML); default: `rules` of the project's settings"

SETTINGS_COMMANDS = ("scan", "diff", "probe", "sweep")
"""Commands that take defaults from the project's settings (cli.config)."""


def build_parser(settings=None) -> argparse.ArgumentParser:
    """The command line; ``settings`` (cli.config.Settings) give option defaults."""

    p = Parser(
        prog="pitchguard",
        description="Screen a mask layout for line/space pitches its exposure tool may not "
        "resolve. A screening aid: sign-off stays with the fab's calibrated models.",
    )
    p.add_argument("--version", action="version", version=f"pitchguard {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=Parser, required=True)

    scan = sub.add_parser("scan", help="scan a GDSII/OASIS layout with a rule deck")
    scan.add_argument("layout", type=Path, help="GDSII (.gds) or OASIS (.oas) file")
    scan.add_argument("--rules", "-r", type=Path, metavar="DECK", help=RULES_HELP)
    scan.add_argument(
        "--region",
        type=numbers.region_um,
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
    dif.add_argument("--rules", "-r", type=Path, metavar="DECK", help=RULES_HELP)
    add_output_options(dif)

    probe = sub.add_parser("probe", help="explain one pitch: orders, k1, aerial image, metrics")
    probe.add_argument("--rules", "-r", type=Path, metavar="DECK", help=RULES_HELP)
    probe.add_argument("--layer", required=True, metavar="NAME", help="deck layer")
    probe.add_argument(
        "--pitch",
        type=numbers.length_nm,
        required=True,
        metavar="NM",
        help="pitch, nm at wafer scale",
    )
    probe.add_argument(
        "--cd",
        type=numbers.length_nm,
        required=True,
        metavar="NM",
        help="feature width: line on a clear field, opening on a dark one",
    )
    probe.add_argument(
        "--pitch-y",
        type=numbers.length_nm,
        metavar="NM",
        help="an array of compact features instead of lines: the pitch along y "
        "(default: --pitch when --cd-y is given)",
    )
    probe.add_argument(
        "--cd-y",
        type=numbers.length_nm,
        metavar="NM",
        help="the features' size along y (default: --cd when --pitch-y is given)",
    )
    probe.add_argument(
        "--focus",
        type=numbers.focus_nm,
        default=0.0,
        metavar="NM",
        help="focus of the image shown (metrics use the deck's focus range)",
    )
    probe.add_argument(
        "--orientation",
        type=numbers.angle_deg,
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
    sweep.add_argument("--rules", "-r", type=Path, metavar="DECK", help=RULES_HELP)
    sweep.add_argument("--layer", required=True, metavar="NAME", help="deck layer")
    sweep.add_argument(
        "--cd",
        type=numbers.length_nm,
        metavar="NM",
        help="feature width, nm (default: the layer's anchor CD)",
    )
    sweep.add_argument(
        "--pitches",
        type=numbers.pitch_range,
        metavar="FROM:TO:STEP",
        help="pitch range, nm (default: from the cutoff to 4 lambda/NA)",
    )
    sweep.add_argument(
        "--orientation",
        type=numbers.angle_deg,
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
    rsub = rules.add_subparsers(
        dest="rules_command", metavar="ACTION", parser_class=Parser, required=True
    )
    check = rsub.add_parser("check", help="validate a deck and show what it sets")
    check.add_argument("deck", type=Path)
    check.add_argument("--debug", action="store_true", help="show tracebacks")
    for name, sp in sub.choices.items():
        if name in SETTINGS_COMMANDS:
            sp.add_argument(
                "--no-config",
                action="store_true",
                help="ignore .pitchguard.toml and [tool.pitchguard] of pyproject.toml",
            )
            if settings is not None:
                from pitchguard.cli.config import defaults_for

                sp.set_defaults(**defaults_for(settings, name, sp))
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
    p.add_argument(
        "--sarif-root",
        type=Path,
        metavar="DIR",
        help="SARIF names the layout relative to this folder (default: the git work tree "
        "holding the layout)",
    )
    p.add_argument("--junit", type=Path, metavar="PATH", help="write JUnit XML for CI dashboards")
    p.add_argument(
        "--html", type=Path, metavar="PATH", help="write a self-contained HTML report with pictures"
    )
    p.add_argument(
        "--html-pictures",
        type=numbers.pictured,
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
        type=numbers.top_rows,
        default=20,
        metavar="N",
        help="worst regions listed in the terminal (default: 20)",
    )
    p.add_argument(
        "--max-shapes",
        type=numbers.shape_count,
        default=None,
        metavar="N",
        help="refuse layouts that flatten to more shapes (default: 2 billion tiled, "
        "20 million --untiled)",
    )
    p.add_argument(
        "--read-timeout",
        type=numbers.seconds,
        default=None,
        metavar="S",
        help="stop reading a layout after S seconds (default: 3600)",
    )
    p.add_argument(
        "--jobs",
        "-j",
        type=numbers.jobs,
        default=None,
        metavar="N",
        help="local worker processes for the tiles (default: one per usable core; at most 4 "
        "per core and one per tile)",
    )
    p.add_argument(
        "--tile-um",
        type=numbers.tile_um,
        default=None,
        metavar="UM",
        help="tile size, rounded up to a multiple of 10 (default: chosen from the "
        "layout's arrays and --max-memory-mb)",
    )
    p.add_argument(
        "--max-memory-mb",
        type=numbers.memory_mb,
        default=None,
        metavar="MB",
        help="memory for the scan's processes together; picks the tile size "
        "and may use fewer workers (default: 2048 per worker, less where the machine's "
        "memory is less)",
    )
    p.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="run the tiles on the dask.distributed scheduler at [tcp://]HOST:PORT or "
        f"ws://HOST:PORT (waiting at most {SCHEDULER_TIMEOUT_S:g} s for it to answer)",
    )
    p.add_argument(
        "--untiled", action="store_true", help="flatten the layout and scan it in this one process"
    )
    p.add_argument("--quiet", "-q", action="store_true", help="print only the one-line summary")
    p.add_argument("--debug", action="store_true", help="show tracebacks")
