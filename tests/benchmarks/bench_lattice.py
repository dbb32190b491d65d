#!/usr/bin/env python
"""Benchmark of lattice extraction (pitchguard.geometry.lattice) beside a plain
gdstk read + flatten of the same file.

A script, not a pytest test.  Run it with the project's interpreter::

    python tests/benchmarks/bench_lattice.py                 # 1e6 vias in arrays, 1e5 at random
    python tests/benchmarks/bench_lattice.py --arrays 2e5 --random 2e4
    python tests/benchmarks/bench_lattice.py --repeat 3      # best of 3 per stage

Layouts (GDSII, 1 nm grid, written with gdstk into a temporary folder):

``arrays``
    About N vias (50 nm squares; 40 nm in the hexagonal block) drawn as
    references with repetitions of one via cell, in blocks 5 um apart: a
    square array of pitch 100, a rectangular 100 x 160, staggered rows
    (two arrays offset by half a pitch: the centred lattice (200, 0),
    (100, 300)), a hexagonal one of spacing 120 (rows 104 nm apart, two arrays),
    and a square array of pitch 110 turned by 30 degrees (a regular
    repetition).
``random``
    About N vias (40 nm) at uniform random places, drawn flat, on average one
    per 0.2 um^2 (about 2.5 others within the interaction range).

Rows (seconds; each layout measured in a fresh interpreter so that the peak
resident size is its own):

``gdstk``    ``read_gds`` + ``get_polygons`` + packing into a PolygonSet (what any
             reader pays: the baseline)
``read``     ``pitchguard.layout.reader.read_layout`` (the same plus snapping)
``compact``  ``compact_features``
``sites``    ``lattice_sites`` (neighbour search, local lattices, links)
``arrays``   ``find_arrays``
``total``    compact + sites + arrays; ``x gdstk`` = total / gdstk

Memory: ``read MB`` is the peak resident size once the layout is read (the
reads included), ``peak MB`` the peak after the extraction.

The interaction range is 400 nm and the compact limit (min_run) 250 nm.
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

LAYER = (7, 0)
RANGE_NM = 400.0
MAX_EXTENT_NM = 250.0
TAG = "BENCH-LATTICE "


def build_arrays(path: Path, n_target: float) -> int:
    """Write the ``arrays`` layout with about ``n_target`` vias; return the count."""
    import gdstk

    lib = gdstk.Library(unit=1e-9, precision=1e-9)
    via = lib.new_cell("VIA")
    via.add(gdstk.rectangle((-25, -25), (25, 25), layer=LAYER[0], datatype=LAYER[1]))
    hexvia = lib.new_cell("VIA40")
    hexvia.add(gdstk.rectangle((-20, -20), (20, 20), layer=LAYER[0], datatype=LAYER[1]))
    top = lib.new_cell("TOP")
    # Five blocks, each about a fifth of the vias: side s with s*s = n/5.
    s = max(4, int(math.sqrt(n_target / 5)))
    x = 0.0
    count = 0

    def place(cell, origin, columns, rows, spacing=None, rotation=0.0, v1=None, v2=None):
        nonlocal count
        if v1 is not None:
            rep = gdstk.Repetition(columns, rows, v1=v1, v2=v2)
            ref = gdstk.Reference(cell, origin, rotation=rotation)
            ref.repetition = rep
        else:
            ref = gdstk.Reference(cell, origin, columns=columns, rows=rows, spacing=spacing)
        top.add(ref)
        count += columns * rows

    gap = 5000.0
    place(via, (x, 0), s, s, (100, 100))
    x += s * 100 + gap
    place(via, (x, 0), s, s, (100, 160))
    x += s * 100 + gap
    half = max(2, s // 2)
    place(via, (x, 0), s // 2 * 2, half, (200, 600))
    place(via, (x + 100, 300), s // 2 * 2, half, (200, 600))
    x += s * 200 + gap
    # Hexagonal: rows 104 nm apart, every other row shifted by 60 (two arrays).
    place(hexvia, (x, 0), s, half, (120, 208))
    place(hexvia, (x + 60, 104), s, half, (120, 208))
    x += s * 120 + gap
    t = math.radians(30)
    v1 = (110 * math.cos(t), 110 * math.sin(t))
    v2 = (-110 * math.sin(t), 110 * math.cos(t))
    place(via, (x + s * 60, 0), s, s, v1=v1, v2=v2)
    lib.write_gds(str(path))
    return count


def build_random(path: Path, n_target: float, seed: int = 1) -> int:
    """Write the ``random`` layout: ``n_target`` flat 40 nm vias at random."""
    import gdstk

    n = int(n_target)
    side = math.sqrt(n * 0.2e6)  # one via per 0.2 um^2
    pts = np.round(np.random.default_rng(seed).uniform(0, side, (n, 2)))
    lib = gdstk.Library(unit=1e-9, precision=1e-9)
    top = lib.new_cell("TOP")
    for x, y in pts:
        top.add(
            gdstk.rectangle((x - 20, y - 20), (x + 20, y + 20), layer=LAYER[0], datatype=LAYER[1])
        )
    lib.write_gds(str(path))
    return n


def best(fn, repeat: int):
    out, times = None, []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return out, min(times)


def worker(path: str, repeat: int) -> None:
    """Measure one layout (in a fresh interpreter) and print one JSON line."""
    import gdstk

    from pitchguard.geometry import lattice as L
    from pitchguard.layout.polygons import PolygonSet
    from pitchguard.layout.reader import read_layout

    def gdstk_flat():
        lib = gdstk.read_gds(path)
        polys = []
        for top in lib.top_level():
            polys += [
                q.points
                for q in top.get_polygons(
                    apply_repetitions=True, depth=None, layer=LAYER[0], datatype=LAYER[1]
                )
            ]
        return PolygonSet.from_arrays(polys)

    flat, t_gdstk = best(gdstk_flat, repeat)
    del flat
    layout, t_read = best(lambda: read_layout(path, [LAYER]), repeat)
    ps = layout.layers[LAYER]
    rss_read0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    grid = layout.grid_nm
    cf, t_compact = best(lambda: L.compact_features(ps, grid, MAX_EXTENT_NM), repeat)
    sites, t_sites = best(
        lambda: L.lattice_sites(ps, grid, MAX_EXTENT_NM, RANGE_NM, compact=cf), repeat
    )
    arrays, t_arrays = best(lambda: L.find_arrays(sites), repeat)
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    kinds: dict[str, int] = {}
    for r in arrays.records():
        kinds[r.lattice] = kinds.get(r.lattice, 0) + r.count
    print(
        TAG
        + json.dumps(
            {
                "shapes": len(ps),
                "compact": len(cf),
                "arrays": len(arrays),
                "isolated": arrays.isolated,
                "members": kinds,
                "gdstk": t_gdstk,
                "read": t_read,
                "compact_s": t_compact,
                "sites": t_sites,
                "arrays_s": t_arrays,
                "rss_before_mb": rss_read0 / 1024,
                "peak_mb": rss / 1024,
            }
        ),
        flush=True,
    )


def main() -> None:
    ap = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    ap.add_argument("--arrays", type=float, default=1e6, help="vias in arrays (about)")
    ap.add_argument("--random", type=float, default=1e5, help="vias at random")
    ap.add_argument("--repeat", type=int, default=1, help="runs per stage (best taken)")
    ap.add_argument("--worker", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.worker:
        worker(args.worker, args.repeat)
        return
    tmp = Path(tempfile.mkdtemp(prefix="bench-lattice-"))
    rows = []
    for name, build, n in (
        ("arrays", build_arrays, args.arrays),
        ("random", build_random, args.random),
    ):
        if n <= 0:
            continue
        path = tmp / f"{name}.gds"
        t = time.perf_counter()
        count = build(path, n)
        print(
            f"built {name}: {count:,} vias, {path.stat().st_size / 1e6:.1f} MB in {time.perf_counter() - t:.1f} s",
            file=sys.stderr,
        )
        out = subprocess.run(
            [sys.executable, __file__, "--worker", str(path), "--repeat", str(args.repeat)],
            capture_output=True,
            text=True,
            check=False,
        )
        line = [x for x in out.stdout.splitlines() if x.startswith(TAG)]
        if out.returncode or not line:
            print(
                f"{name}: worker failed (exit {out.returncode})\n{out.stderr[-2000:]}",
                file=sys.stderr,
            )
            continue
        rows.append((name, json.loads(line[0][len(TAG) :])))
    head = f"{'layout':8} {'shapes':>10} {'gdstk':>7} {'read':>7} {'compact':>8} {'sites':>7} {'arrays':>7} {'total':>7} {'x gdstk':>8} {'read MB':>8} {'peak MB':>8}  found"
    print(head)
    for name, r in rows:
        total = r["compact_s"] + r["sites"] + r["arrays_s"]
        found = f"{r['arrays']} arrays {r['members']}, {r['isolated']:,} isolated"
        print(
            f"{name:8} {r['shapes']:>10,} {r['gdstk']:7.2f} {r['read']:7.2f} {r['compact_s']:8.2f} "
            f"{r['sites']:7.2f} {r['arrays_s']:7.2f} {total:7.2f} {total / r['gdstk']:8.1f} "
            f"{r['rss_before_mb']:8.0f} {r['peak_mb']:8.0f}  {found}"
        )


if __name__ == "__main__":
    main()
