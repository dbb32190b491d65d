#!/usr/bin/env python
"""Check that a change leaves every output of the command as it was.

A script, not a pytest test.  Run it once with the old code and once with
the new, then compare::

    python tests/tools/same_outputs.py run OLD_DIR --src /path/to/old/src
    python tests/tools/same_outputs.py run NEW_DIR
    python tests/tools/same_outputs.py compare OLD_DIR NEW_DIR

``run`` scans the demo chip (GDSII and OASIS; tiled on 1 and 2 workers and
untiled) with every bundled deck, and the benchmark chip (``--bench-shapes``,
default about 10^7 flat shapes; 0 skips it), writing JSON, SARIF, JUnit and
markers, and records ``probe --json``, ``sweep --json`` and the terminal
table.  Each output is reduced to a digest after its timing fields are set
to zero (JSON ``seconds``, JUnit ``time``, the elapsed time in the summary
line); markers are compared by their cells, polygons and labels, since a
GDSII file carries the time it was written.  SARIF is also compared without
its rule descriptors (``sarif_results``).  ``--src`` runs another
checkout's code (``PYTHONPATH``) with this interpreter.
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import re
import subprocess
import sys
from pathlib import Path

TESTS = Path(__file__).resolve().parents[1]
REPO = TESTS.parent
sys.path.insert(0, str(TESTS))

from chips import build_bench_chip  # noqa: E402
from decks import BENCH_DECK  # noqa: E402

TIMING = [
    (re.compile(rb'"seconds": [0-9.eE+-]+'), b'"seconds": 0'),
    (re.compile(rb' time="[0-9.]+"'), b' time="0"'),
    (re.compile(rb"shapes, [0-9.]+ s\b"), b"shapes, 0 s"),
]


RULE_LINE = re.compile(rb'^ *\{"id": "[a-z0-9-]+", "name": ')


def _digest(path: Path, skip_rules: bool = False) -> str:
    """sha256 of a text output with its timing fields zeroed and its own folder
    (where the run put the generated chip and the outputs) written as OUT,
    read in lines; ``skip_rules``: without SARIF's rule descriptors (one per
    line), so that a change of the rules' help texts alone can be told from
    one of the results."""
    h = hashlib.sha256()
    folder = str(path.parent.resolve()).encode()
    with open(path, "rb") as fh:
        for line in fh:
            if skip_rules and RULE_LINE.match(line):
                continue
            for pat, rep in TIMING:
                line = pat.sub(rep, line)
            h.update(line.replace(folder, b"OUT"))
    return h.hexdigest()


def _marker_digest(path: Path) -> str:
    import gdstk

    lib = gdstk.read_oas(str(path)) if path.suffix == ".oas" else gdstk.read_gds(str(path))
    h = hashlib.sha256(f"{lib.name} {lib.unit} {lib.precision}".encode())
    for cell in sorted(lib.cells, key=lambda c: c.name):
        h.update(cell.name.encode())
        for p in cell.polygons:
            h.update(f"P {p.layer} {p.datatype} {p.points.round(6).tolist()}".encode())
        for lb in cell.labels:
            h.update(f"L {lb.layer} {lb.texttype} {lb.text} {tuple(lb.origin)}".encode())
        for r in cell.references:
            h.update(f"R {r.cell.name} {tuple(r.origin)} {r.rotation} {r.repetition}".encode())
    return h.hexdigest()


def _command(src: str | None) -> tuple[list[str], dict]:
    env = dict(os.environ, COLUMNS="160", TERM="dumb", NO_COLOR="1")
    if src:
        env["PYTHONPATH"] = src
    cmd = [sys.executable, "-c", "import sys; from pitchguard.cli import main; sys.exit(main())"]
    return cmd, env


def _cases(work: Path, bench_shapes: float) -> list[tuple[str, list[str], bool]]:
    """(name, arguments, writes report files) per run."""
    demo_gds = REPO / "sample_layouts" / "demo_chip.gds"
    demo_oas = REPO / "sample_layouts" / "demo_chip.oas"
    demo_deck = REPO / "rules" / "demo_chip.toml"
    cases = []
    decks = sorted((REPO / "rules").glob("*.toml"))
    for deck in list(decks):
        # Example decks for other layouts: with their layers optional they still
        # scan the demo chip's matching layers (as written, they are refused).
        optional = work / f"{deck.stem}-optional.toml"
        text = deck.read_text()
        optional.write_text(text.replace("[[layers]]\n", "[[layers]]\noptional = true\n"))
        decks.append(optional)
    for deck in decks:
        for layout, tiling in (
            (demo_gds, ["--jobs", "2"]),
            (demo_gds, ["--jobs", "1"]),
            (demo_oas, ["--untiled"]),
        ):
            name = f"{deck.stem}-{layout.suffix[1:]}-{tiling[-1].strip('-')}"
            cases.append((name, ["scan", str(layout), "--rules", str(deck), *tiling], True))
    cases.append(
        (
            "demo-region",
            [
                "scan",
                str(demo_gds),
                "--rules",
                str(demo_deck),
                "--region",
                "0,0,12,12",
                "--fail-on",
                "risk",
            ],
            True,
        )
    )
    cases.append(
        (
            "probe",
            [
                "probe",
                "--rules",
                str(demo_deck),
                "--layer",
                "metal1",
                "--pitch",
                "90",
                "--cd",
                "45",
                "--json",
            ],
            False,
        )
    )
    cases.append(
        (
            "probe-text",
            ["probe", "--rules", str(demo_deck), "--layer", "poly", "--pitch", "130", "--cd", "65"],
            False,
        )
    )
    cases.append(
        (
            "sweep",
            [
                "sweep",
                "--rules",
                str(demo_deck),
                "--layer",
                "poly",
                "--cd",
                "65",
                "--json",
                str(work / "sweep.json"),
            ],
            False,
        )
    )
    cases.append(("rules-check", ["rules", "check", str(demo_deck)], False))
    if bench_shapes > 0:
        chip = work / "bench_chip.oas"
        deck = work / "bench_deck.toml"
        if not chip.exists():
            build_bench_chip(chip, bench_shapes)
        deck.write_text(BENCH_DECK)
        cases.append(
            (
                "bench",
                [
                    "scan",
                    str(chip),
                    "--rules",
                    str(deck),
                    "--jobs",
                    "2",
                    "--max-shapes",
                    "200000000",
                ],
                True,
            )
        )
    return cases


KINDS = {
    "json": ".json",
    "sarif": ".sarif",
    "junit": ".xml",
    "markers": "-markers.gds",
    "markers_oas": "-markers.oas",
    "stdout": ".stdout",
    "stderr": ".stderr",
}


def cmd_run(out: Path, src: str | None, bench_shapes: float) -> int:
    out.mkdir(parents=True, exist_ok=True)
    cmd, env = _command(src)
    exits = {}
    for name, args, reports in _cases(out, bench_shapes):
        if reports:
            args = [
                *args,
                "--json",
                str(out / f"{name}.json"),
                "--sarif",
                str(out / f"{name}.sarif"),
                "--junit",
                str(out / f"{name}.xml"),
                "--markers",
                str(out / f"{name}-markers.gds"),
            ]
            if name != "bench":
                args = [*args, "--markers", str(out / f"{name}-markers.oas")]
        r = subprocess.run([*cmd, *args], env=env, capture_output=True, cwd=REPO)
        (out / f"{name}.stdout").write_bytes(r.stdout)
        (out / f"{name}.stderr").write_bytes(r.stderr)
        exits[name] = r.returncode
        print(f"{name}: exit {r.returncode}", flush=True)
    (out / "exits.json").write_text(json.dumps(exits, indent=1))
    return 0


def _digests(folder: Path, name: str) -> dict:
    """Digest of each output of run ``name`` (None where there is none)."""
    d = {}
    for kind, suffix in KINDS.items():
        path = (
            folder / "sweep.json" if (name, kind) == ("sweep", "json") else folder / (name + suffix)
        )
        if not path.exists():
            d[kind] = None
        elif kind.startswith("markers"):
            d[kind] = _marker_digest(path)
        else:
            d[kind] = _digest(path)
            if kind == "sarif":
                d["sarif_results"] = _digest(path, skip_rules=True)
    return d


def cmd_compare(a: Path, b: Path, ignore: list[str]) -> int:
    ea = json.loads((a / "exits.json").read_text())
    eb = json.loads((b / "exits.json").read_text())
    bad = 0
    for name in sorted(set(ea) | set(eb)):
        da = {"exit": ea.get(name), **_digests(a, name)}
        db = {"exit": eb.get(name), **_digests(b, name)}
        for kind in sorted(set(da) | set(db)):
            if kind in ignore:
                continue
            same = da.get(kind) == db.get(kind)
            bad += not same
            print(f"{'same' if same else 'DIFFERENT':<10} {name} {kind}")
    print(f"{bad} differences")
    return 1 if bad else 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = ap.add_subparsers(dest="cmd", required=True)
    r = sub.add_parser("run")
    r.add_argument("out", type=Path)
    r.add_argument("--src", help="a checkout's src folder to run instead of the installed code")
    r.add_argument("--bench-shapes", type=float, default=1e7)
    c = sub.add_parser("compare")
    c.add_argument("a", type=Path)
    c.add_argument("b", type=Path)
    c.add_argument(
        "--ignore",
        action="append",
        default=[],
        help="an output kind to leave out (e.g. sarif when only helpUri changed)",
    )
    args = ap.parse_args()
    if args.cmd == "run":
        return cmd_run(args.out, args.src, args.bench_shapes)
    return cmd_compare(args.a, args.b, args.ignore)


if __name__ == "__main__":
    sys.exit(main())
