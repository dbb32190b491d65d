#!/usr/bin/env python
"""Benchmark of reports per cell: the quiet scan against scans writing JSON and markers.

A script, not a pytest test::

    python tests/benchmarks/bench_cells.py               # 7,500 rows: ~750,000 placements
    python tests/benchmarks/bench_cells.py --rows 500    # smaller, quicker

It generates a chip of standard-cell-like rows (``tests/chips.py``
``build_cell_chip``: 100 distinct line arrays in ten leaf cells, rows of
leaves, blocks of rows with every other row mirrored, a lattice of blocks,
blocks scattered at random places and turns, leaves placed beside a foreign
line) and runs, each in a fresh process, ``--repeat`` times in turn:

* ``quiet``: ``pitchguard scan --jobs 2 -q`` (counts only);
* ``json+markers gds`` and ``json+markers oas``: the same scan writing the
  JSON report and the hierarchical marker layout in each format.

Printed: the median wall time of each, its ratio to the quiet scan, the
largest resident set of any one process, the output sizes, and what the
JSON says: entries, placements (summed over entries and from the summary)
and entries whose finding depends on the placement.  Targets: writing JSON
and markers at most 2x the quiet scan; JSON and markers under 20 MB for
750,000 placements.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TESTS = Path(__file__).resolve().parents[1]
if str(TESTS) not in sys.path:  # run as a script: decks and chips are shared with the tests
    sys.path.insert(0, str(TESTS))

from chips import build_cell_chip  # noqa: E402
from decks import BENCH_DECK as DECK  # noqa: E402


def worker(kind: str, path: str, deck: str, out: str) -> None:
    from pitchguard.cli.app import main

    t0 = time.perf_counter()
    args = ["scan", path, "--rules", deck, "-q", "--max-shapes", "200000000", "--jobs", "2"]
    if kind != "quiet":
        args += ["--json", out + ".json", "--markers", out + "." + kind.split()[-1]]
    code = main(args)
    wall = time.perf_counter() - t0
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    kids = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    print("BENCH " + json.dumps({"wall": wall, "exit": code, "maxrss_mb": max(own, kids) / 1024}))


def run(kind: str, chip: Path, deck: Path, out: Path) -> dict:
    cmd = [sys.executable, __file__, "--worker", kind, "--file", str(chip), "--deck", str(deck)]
    r = subprocess.run(cmd + ["--out", str(out)], capture_output=True, text=True)
    line = [ln for ln in r.stdout.splitlines() if ln.startswith("BENCH ")]
    if not line:
        return {"error": (r.stderr or r.stdout)[-300:]}
    return json.loads(line[-1][6:])


def json_facts(path: Path) -> dict:
    d = json.loads(path.read_text(encoding="utf-8"))
    entries = d["findings"]
    return {
        "entries": len(entries),
        "named": sum(1 for e in entries if e["cell"]),
        "placements_summed": sum(e["placements"] for e in entries),
        "placements_summary": d["summary"]["placements"],
        "depends_on_placement": sum(1 for e in entries if e.get("depends_on_placement")),
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=7500, help="row placements (100 findings each)")
    ap.add_argument("--repeat", type=int, default=3, help="runs of each kind, in turn (median)")
    ap.add_argument("--worker")
    ap.add_argument("--file")
    ap.add_argument("--deck")
    ap.add_argument("--out")
    args = ap.parse_args()
    if args.worker:
        worker(args.worker, args.file, args.deck, args.out)
        return 0
    import compileall

    import pitchguard

    compileall.compile_dir(Path(pitchguard.__file__).parent, quiet=1)
    kinds = ("quiet", "json+markers gds", "json+markers oas")
    with tempfile.TemporaryDirectory() as tmp:
        chip, deck = Path(tmp) / "cells.oas", Path(tmp) / "deck.toml"
        deck.write_text(DECK)
        counts = build_cell_chip(chip, args.rows)
        print(
            f"chip: {counts['shapes']:,} shapes, {counts['row_placements']:,} row placements, "
            f"{chip.stat().st_size / 1e3:.1f} kB OASIS; {os.cpu_count()} cpus"
        )
        runs: dict[str, list[dict]] = {k: [] for k in kinds}
        for _ in range(max(1, args.repeat)):
            for k in kinds:
                runs[k].append(run(k, chip, deck, Path(tmp) / k.replace(" ", "_")))
        for k in kinds:
            print(
                f"{k} runs: " + ", ".join(f"{r.get('wall', float('nan')):.1f} s" for r in runs[k])
            )
        med = {
            k: sorted(v, key=lambda r: r.get("wall", 1e99))[(len(v) - 1) // 2]
            for k, v in runs.items()
        }
        base = med["quiet"].get("wall", float("nan"))
        print(
            f"{'run':<18}{'wall s':>9}{'x quiet':>9}{'peak RSS MB':>13}{'JSON MB':>9}{'markers MB':>12}"
        )
        for k in kinds:
            r = med[k]
            if "error" in r:
                print(f"{k:<18} failed: {r['error']}")
                continue
            stem = Path(tmp) / k.replace(" ", "_")
            sizes = ["", ""]
            if k != "quiet":
                ext = k.split()[-1]
                sizes = [
                    f"{Path(str(stem) + '.json').stat().st_size / 1e6:.2f}",
                    f"{Path(str(stem) + '.' + ext).stat().st_size / 1e6:.2f}",
                ]
            print(
                f"{k:<18}{r['wall']:>9.1f}{r['wall'] / base:>9.2f}{r['maxrss_mb']:>13.0f}"
                f"{sizes[0]:>9}{sizes[1]:>12}"
            )
        facts = json_facts(Path(tmp) / "json+markers_gds.json")
        print("JSON: " + ", ".join(f"{k} {v:,}" for k, v in facts.items()))
    return 0


if __name__ == "__main__":
    sys.exit(main())
