#!/usr/bin/env python
"""Benchmark of scans of a via layer beside a plain gdstk read + flatten and
beside a line layer of about the same shape count.

A script, not a pytest test.  Run it with the project's interpreter::

    python tests/benchmarks/bench_via_scan.py                    # 1e6 + 1e5 vias
    python tests/benchmarks/bench_via_scan.py --arrays 2e5 --random 2e4

Layouts (GDSII, written into a temporary folder):

``arrays``  vias in arrays of references (bench_lattice.build_arrays)
``random``  vias at random places, flat (bench_lattice.build_random)
``lines``   the generated hierarchical line chip (chips.build_bench_chip) with
            about as many shapes as ``arrays``
``routing`` flat wires as many as ``random``, every one unique: tracks at mixed
            pitches (100-400 nm), wires of random length and gap (chips.build_routing):
            the line layer ``random`` compares with

Each is scanned by the command (tiled, ``--jobs 1`` and ``--jobs 2``, quiet)
with an ArF immersion deck (NA 1.35, annular 0.6-0.9, dark field); the
baseline is gdstk's read + flatten of the same file, in a fresh interpreter.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent))

from bench_lattice import LAYER, build_arrays, build_random  # noqa: E402

from chips import build_bench_chip, build_routing  # noqa: E402
from decks import BENCH_DECK  # noqa: E402

FLATTEN = (
    "import gdstk, sys\n"
    "lib = gdstk.read_gds(sys.argv[1]) if sys.argv[1].endswith('.gds') else "
    "gdstk.read_oas(sys.argv[1])\n"
    "n = sum(len(c.get_polygons()) for c in lib.top_level())\n"
)


def timed(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=False, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--arrays", type=float, default=1e6)
    ap.add_argument("--random", type=float, default=1e5)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        layouts = {
            "arrays": (t / "arrays.gds", build_arrays(t / "arrays.gds", args.arrays)),
            "random": (t / "random.gds", build_random(t / "random.gds", args.random)),
        }
        layouts["lines"] = (t / "lines.oas", build_bench_chip(t / "lines.oas", args.arrays))
        layouts["routing"] = (t / "routing.gds", build_routing(t / "routing.gds", args.random))
        via_deck = t / "vias.toml"
        via_deck.write_text(
            BENCH_DECK.replace('source = "1/0"', f'source = "{LAYER[0]}/{LAYER[1]}"')
        )
        line_deck = t / "lines.toml"
        line_deck.write_text(BENCH_DECK)
        print(
            f"{'layout':8} {'shapes':>10} {'flatten s':>10} {'1 worker s':>11} {'2 workers s':>12} {'x flatten (2)':>14}"
        )
        for name, (path, n) in layouts.items():
            deck = line_deck if name in ("lines", "routing") else via_deck
            flat = min(timed([sys.executable, "-c", FLATTEN, str(path)]) for _ in range(2))
            scan = [
                sys.executable,
                "-m",
                "pitchguard",
                "scan",
                str(path),
                "--rules",
                str(deck),
                "-q",
            ]
            one = timed([*scan, "--jobs", "1"])
            two = timed([*scan, "--jobs", "2"])
            print(f"{name:8} {n:>10,} {flat:>10.2f} {one:>11.2f} {two:>12.2f} {two / flat:>14.1f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
