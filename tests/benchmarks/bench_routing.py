#!/usr/bin/env python
"""Benchmark of scans of unique geometry: flat routing-like layers beside a plain read.

A script, not a pytest test.  Run it with the project's interpreter::

    python tests/benchmarks/bench_routing.py                  # 10^4 and 10^5 wires
    python tests/benchmarks/bench_routing.py --shapes 1e4,1e5,1e6

Each layout (``chips.build_routing``: horizontal tracks at random pitches of
100-400 nm, wires 0.3-3 um long with gaps of 0.1-1 um, every wire unique, flat
in the top cell, GDSII) is measured in fresh processes, side by side:

* ``read+flatten``: gdstk reads the file and collects the top cell's polygons;
* ``1 worker JSON``, ``2 workers JSON``: ``pitchguard scan --jobs N --json``
  (image checks on: the benchmark deck, ArF immersion, annular);
* ``2 workers HTML``: the same scan writing the HTML report as well.

Printed per run: wall time, the ratio to read+flatten, microseconds per
shape, and the largest resident set of any one process (``ru_maxrss`` of the
run's process tree).  Targets from the project's issue: 1 worker with JSON
within 20x read+flatten, with the HTML report within 30x, 2 workers at least
1.7x faster than 1.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from chips import build_routing  # noqa: E402
from decks import BENCH_DECK  # noqa: E402

RUN = (
    "import resource, subprocess, sys, time\n"
    "t = time.perf_counter()\n"
    "rc = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)"
    ".returncode\n"
    "dt = time.perf_counter() - t\n"
    "print(dt, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0, rc)\n"
)
FLATTEN = (
    "import gdstk, sys\n"
    "lib = gdstk.read_gds(sys.argv[1])\n"
    "n = sum(len(c.get_polygons()) for c in lib.top_level())\n"
)


def measured(cmd: list[str]) -> tuple[float, float, int]:
    """Wall seconds, peak RSS (MB) of the process tree, exit code of ``cmd``."""
    out = subprocess.run(
        [sys.executable, "-c", RUN, *cmd], check=True, capture_output=True, text=True
    ).stdout.split()
    return float(out[0]), float(out[1]), int(out[2])


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--shapes", default="1e4,1e5", help="comma-separated wire counts")
    args = ap.parse_args()
    sizes = [int(float(v)) for v in args.shapes.split(",")]
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        deck = t / "deck.toml"
        deck.write_text(BENCH_DECK)
        print(
            f"{'shapes':>9} {'run':<16} {'wall s':>8} {'x flatten':>10} {'us/shape':>9} "
            f"{'peak MB':>8} {'exit':>5}"
        )
        for n in sizes:
            path = t / f"routing_{n}.gds"
            shapes = build_routing(path, n)
            base, rss, _ = min(
                measured([sys.executable, "-c", FLATTEN, str(path)]) for _ in range(2)
            )
            rows = [("read+flatten", base, rss, 0)]
            scan = [sys.executable, "-m", "pitchguard", "scan", str(path), "--rules", str(deck)]
            for name, extra in (
                ("1 worker JSON", ["--jobs", "1", "--json", str(t / "r1.json")]),
                ("2 workers JSON", ["--jobs", "2", "--json", str(t / "r2.json")]),
                (
                    "2 workers HTML",
                    ["--jobs", "2", "--json", str(t / "r3.json"), "--html", str(t / "r.html")],
                ),
            ):
                wall, rss, rc = measured([*scan, "-q", *extra])
                rows.append((name, wall, rss, rc))
            for name, wall, rss, rc in rows:
                print(
                    f"{shapes:>9,} {name:<16} {wall:>8.2f} {wall / base:>10.1f} "
                    f"{1e6 * wall / shapes:>9.1f} {rss:>8.0f} {rc:>5}"
                )
            one, two = rows[1][1], rows[2][1]
            print(f"{shapes:>9,} {'2 / 1 worker':<16} {one / two:>8.2f}x")
    return 0


if __name__ == "__main__":
    sys.exit(main())
