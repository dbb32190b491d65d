#!/usr/bin/env python
"""Benchmark of site extraction: time and peak memory per stage, per layout size.

A script, not a pytest test.  Run it with the project's interpreter::

    python tests/benchmarks/bench_extract.py                  # 1e4, 1e5, 1e6 rectangles (+ sample)
    python tests/benchmarks/bench_extract.py --quick          # 1e4, 1e5 only
    python tests/benchmarks/bench_extract.py --sizes 2e4,2e5 --no-gds
    python tests/benchmarks/bench_extract.py --trace-max 1e6  # tracemalloc pass at 1e6 too

Rows
    * ``sample``: every ``sample_layouts/*.gds`` scanned with ``rules/demo.toml``
      (or, failing that, ``rules/<layout stem>.toml``); skipped with a note when
      the layout or the deck is missing.
    * ``gen N``: about N rectangles generated as numpy arrays straight into a
      :class:`pitchguard.layout.polygons.PolygonSet`: dense line arrays at several pitches
      and at 0, 90, 45 and 135 degrees, lines drawn as abutting pieces, isolated
      lines, and line ends staggered and facing tip to tip.

Stages (seconds each)
    ``read``      read_layout of a GDSII file (for generated layouts: the same
                  rectangles written to a temporary GDSII and read back; not
                  part of ``total``)
    ``build``     geometry.features.build_features
    ``sites``     geometry.sites.find_sites
    ``classify``  judge.verdicts.classify_layer (rule from a small TOML deck)
    ``total``     build + sites + classify

Memory
    Every row runs in its own fresh interpreter (the script re-invokes itself
    with ``--worker``) because ``ru_maxrss`` is a process-wide high-water mark.
    ``rss0`` is the resident size once the polygons are in memory (before
    extraction), ``peakRSS`` the high-water mark after it.  A second pass in
    another fresh interpreter repeats the stages under ``tracemalloc`` (which
    slows Python allocation, so its times are not used) to get the peak of
    Python/numpy allocations per stage (``py-peak``; memory held by rtree, gdstk
    and scipy's C code is not traced).  The traced pass is 2-4x slower, so by
    default it runs only for sizes up to ``--trace-max`` (1e5); pass
    ``--trace-max 1e6`` to trace 10^6 too (about 3 more minutes on 2 cores).

Robustness
    Workers report after every stage and print progress on stderr, so a worker
    that is killed or exceeds ``--timeout`` still shows what it finished (DIED
    marks the stage it died in, ``>`` a lower bound).

Scaling
    ``nlogn`` = (total / (n log2 n)) divided by the same for the smallest
    generated size: it stays near 1 when time grows as n log n, and grows by
    about 10x per decade when time grows as n^2.

Baseline
    What any scan pays anyway: flattening the cell with gdstk
    ``Cell.get_polygons`` and packing the points with ``PolygonSet.from_arrays``
    (what read_layout does after parsing); best of three runs, as single runs
    vary by up to 2x.  ``x base`` = total / baseline.
"""

from __future__ import annotations

import argparse
import gc
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

TESTS = Path(__file__).resolve().parents[1]
if str(TESTS) not in sys.path:  # run as a script: the deck is shared with the tests
    sys.path.insert(0, str(TESTS))

from decks import BENCH_DECK as DECK_TOML  # noqa: E402

ROOT = TESTS.parent
SAMPLE_DIR = ROOT / "sample_layouts"
SAMPLE_DECK = ROOT / "rules" / "demo.toml"


def sample_deck(layout: Path) -> Path | None:
    """Deck for a bundled sample: rules/demo.toml, else rules/<layout stem>.toml."""
    for cand in (SAMPLE_DECK, ROOT / "rules" / f"{layout.stem}.toml"):
        if cand.is_file():
            return cand
    return None


GRID_NM = 1.0  # database unit of the generated layouts
LAYER = (1, 0)

# The deck: lambda/NA = 143 nm: min_run 71.5 nm, interaction range 429 nm, cutoff pitch 75.3 nm.
# The generated pitches (64 .. 200 nm) give fail, risk, marginal and clean sites.

RESULT_TAG = "BENCH-RESULT "


# --------------------------------------------------------------------------- layout generator


def _rects(x0, y0, x1, y1) -> np.ndarray:
    """(k, 4, 2) counter-clockwise rectangles from corner arrays."""
    x0, y0, x1, y1 = (np.asarray(v, dtype=np.float64) for v in (x0, y0, x1, y1))
    return np.stack(
        [
            np.stack([x0, y0], -1),
            np.stack([x1, y0], -1),
            np.stack([x1, y1], -1),
            np.stack([x0, y1], -1),
        ],
        axis=1,
    )


def _line_array(n_lines, pitch, width, length, pieces=1, rng=None, stagger=0.0):
    """Lines along x, stacked along y; each drawn as ``pieces`` abutting rectangles.

    ``stagger`` shifts the right end of every other line (staggered line ends).
    Cut positions between pieces differ per line (as when a line is assembled
    from cells), so the pieces abut at staggered places.
    """
    k = np.arange(n_lines)
    y0 = k * pitch
    y1 = y0 + width
    xe = np.full(n_lines, float(length)) - stagger * (k % 2)
    if pieces == 1:
        return _rects(np.zeros(n_lines), y0, xe, y1)
    frac = np.sort(rng.uniform(0.15, 0.85, size=(n_lines, pieces - 1)), axis=1)
    cuts = np.round(frac * xe[:, None])
    xs = np.concatenate([np.zeros((n_lines, 1)), cuts, xe[:, None]], axis=1)
    return _rects(
        xs[:, :-1].ravel(), np.repeat(y0, pieces), xs[:, 1:].ravel(), np.repeat(y1, pieces)
    )


def _rotate_snap(r: np.ndarray, deg: float) -> np.ndarray:
    """Rotate a block about its centre and snap to the database grid."""
    c = 0.5 * (r.reshape(-1, 2).min(0) + r.reshape(-1, 2).max(0))
    t = math.radians(deg)
    m = np.array([[math.cos(t), math.sin(t)], [-math.sin(t), math.cos(t)]])
    out = (r - c) @ m
    return np.round(out / GRID_NM) * GRID_NM


def block_templates(rng: np.random.Generator) -> list[tuple[str, np.ndarray]]:
    """The blocks one tile set is made of, each (name, (k, 4, 2) rectangles), centred."""
    blocks = []
    # Dense lines at 0 deg, pitch 64 (below cutoff): each line as 4 abutting pieces.
    blocks.append(("h64x4", _line_array(40, 64, 32, 4000, pieces=4, rng=rng)))
    # Dense lines at 90 deg, pitch 90, one rectangle per line.
    blocks.append(("v90", _line_array(40, 90, 45, 4000)))
    # 45 and 135 deg, pitch 120, two pieces per line.
    blocks.append(("d45_120x2", _line_array(30, 120, 60, 3000, pieces=2, rng=rng)))
    blocks.append(("d135_100", _line_array(30, 100, 50, 3000)))
    # Staggered ends, tip to tip: two rows of pitch-80 lines, every other line
    # 300 nm shorter, rows 120 nm apart at the longest lines.
    row = _line_array(40, 80, 40, 2000, stagger=300.0)
    row2 = row.copy()
    row2[..., 0] = 4120.0 - row2[..., 0]  # mirror: the second row faces the first
    row2 = row2[:, ::-1]  # mirroring reverses orientation: restore CCW
    blocks.append(("stagger80", np.concatenate([row, row2])))
    # Isolated lines at 90 deg: width 100, 1.5 um apart (beyond the interaction range).
    blocks.append(("iso", _line_array(5, 1500, 100, 3000)))
    # Relaxed pitch 200 at 90 deg, three pieces per line.
    blocks.append(("v200x3", _line_array(20, 200, 100, 3500, pieces=3, rng=rng)))
    angles = {"v90": 90.0, "d45_120x2": 45.0, "d135_100": 135.0, "iso": 90.0, "v200x3": 90.0}
    out = []
    for name, r in blocks:
        r = _rotate_snap(r, angles.get(name, 0.0))
        out.append((name, r))
    return out


BLOCK_CELL_NM = 7000.0  # blocks sit on a 7 um grid (>= 2 um between blocks)


def generate(n_target: int, seed: int = 1):
    """About ``n_target`` rectangles as packed arrays ``(points, starts)`` in nm."""
    rng = np.random.default_rng(seed)
    templates = block_templates(rng)
    per_set = sum(len(r) for _, r in templates)
    n_sets = max(1, round(n_target / per_set))
    n_blocks = n_sets * len(templates)
    cols = math.ceil(math.sqrt(n_blocks))
    b = np.arange(n_blocks)
    offs = np.stack([b % cols, b // cols], axis=1) * BLOCK_CELL_NM
    kind = b % len(templates)
    parts, order = [], []
    for t, (_, r) in enumerate(templates):
        sel = np.flatnonzero(kind == t)
        parts.append((r[None, :, :, :] + offs[sel][:, None, None, :]).reshape(-1, 4, 2))
        order.append(np.repeat(sel, len(r)))
    rects = np.concatenate(parts)
    # Polygons in block order (as a flattened cell hierarchy would give them).
    rects = rects[np.argsort(np.concatenate(order), kind="stable")]
    return rects


def to_polygonset(rects: np.ndarray):
    from pitchguard.layout.polygons import PolygonSet

    n = len(rects)
    return PolygonSet(
        np.ascontiguousarray(rects.reshape(-1, 2)), np.arange(0, 4 * n + 1, 4, dtype=np.int64)
    )


# --------------------------------------------------------------------------- measuring


def rss_mb() -> float:
    """Current resident set size (Linux /proc), MB."""
    try:
        with open("/proc/self/statm") as fh:
            pages = int(fh.read().split()[1])
        return pages * os.sysconf("SC_PAGE_SIZE") / 2**20
    except OSError:
        return float("nan")


def maxrss_mb() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return r / 2**20 if sys.platform == "darwin" else r / 1024.0


def emit(res: dict) -> None:
    """Hand a (possibly partial) result to the driver on stdout; the last one wins."""
    sys.stdout.write(RESULT_TAG + json.dumps(res) + "\n")
    sys.stdout.flush()


def note(text: str) -> None:
    """Progress on stderr (passed through to the terminal by the driver)."""
    sys.stderr.write(f"    [{time.strftime('%H:%M:%S')}] {text}\n")
    sys.stderr.flush()


class Stages:
    """Times (and, under tracemalloc, Python peaks) of consecutive stages.

    After every stage the result so far is emitted, so a run that is killed or
    times out still reports the stages it finished.
    """

    def __init__(self, trace: bool, out: dict, label: str):
        self.trace = trace
        self.out = out
        self.label = label
        self.seconds: dict[str, float] = out.setdefault("seconds", {})
        self.py_peak: dict[str, float] = out.setdefault("py_peak", {})

    def run(self, name, fn, *args):
        gc.collect()
        if self.trace:
            tracemalloc.reset_peak()
            base = tracemalloc.get_traced_memory()[0]
        self.out["running"] = name
        emit(self.out)
        t0 = time.perf_counter()
        res = fn(*args)
        dt = time.perf_counter() - t0
        self.seconds[name] = self.seconds.get(name, 0.0) + dt
        if self.trace:
            peak = (tracemalloc.get_traced_memory()[1] - base) / 2**20
            self.py_peak[name] = max(self.py_peak.get(name, 0.0), peak)
        self.out["running"] = None
        self.out["maxrss"] = maxrss_mb()
        emit(self.out)
        note(f"{self.label}: {name} {dt:.2f} s, peak RSS so far {self.out['maxrss']:.0f} MB")
        return res


def extract_layers(layers, deck, grid_nm, trace: bool, out: dict, label: str) -> dict:
    """build_features -> find_sites -> classify_layer for every deck layer, into ``out``."""
    from pitchguard.geometry.features import build_features
    from pitchguard.geometry.sites import find_sites
    from pitchguard.judge.verdicts import classify_layer
    from pitchguard.layout.polygons import PolygonSet

    st = Stages(trace, out, label)
    scale = deck.scale_to_wafer
    out.update(shapes=sum(len(p) for p in layers.values()), edges=0, sites=0, findings=0)
    for rule in deck.layers:
        ps = layers.get((rule.layer, rule.datatype), PolygonSet.empty())
        edges = st.run("build", build_features, ps, grid_nm)
        out["edges"] += len(edges)
        sites, _ = st.run(
            "sites",
            find_sites,
            edges,
            rule.min_run_nm / scale,
            rule.interaction_range_nm / scale,
            grid_nm,
        )
        out["sites"] += len(sites)
        found = st.run("classify", classify_layer, sites, rule, scale)
        out["findings"] += len(found)
    return out


def _bench_deck():
    from pitchguard.deck import parse_deck

    return parse_deck(DECK_TOML)


def worker_extract(args) -> dict:
    """One extraction run in this (fresh) process."""
    from pitchguard.deck import load_deck
    from pitchguard.layout.reader import read_layout

    if args.trace:
        tracemalloc.start()
    out: dict = {}
    if args.file:
        deck = load_deck(args.deck)
        t0 = time.perf_counter()
        lay = read_layout(args.file, [(r.layer, r.datatype) for r in deck.layers])
        out["read"] = time.perf_counter() - t0
        layers, grid = lay.layers, lay.grid_nm
    else:
        deck = _bench_deck()
        t0 = time.perf_counter()
        layers = {LAYER: to_polygonset(generate(args.size))}
        out["generate"] = time.perf_counter() - t0
        grid = GRID_NM
    gc.collect()
    out["rss0"] = rss_mb()
    label = Path(args.file).name if args.file else f"gen {args.size}"
    label += " (traced)" if args.trace else ""
    extract_layers(layers, deck, grid, args.trace, out, label)
    out["maxrss"] = maxrss_mb()
    out["done"] = True
    return out


def _flatten_pack(lib, layers):
    """The baseline: what flattening + packing costs (read_layout's tail)."""
    from pitchguard.layout.reader import flatten_layer

    tops = [c for c in lib.top_level() if hasattr(c, "get_polygons")]
    return sum(len(flatten_layer(tops, ld, lib.unit * 1e9)) for ld in layers)


BASELINE_REPEATS = 3


def _timed_baseline(lib, layers) -> tuple[int, float, list[float]]:
    """Shape count and best-of-N seconds of flatten + pack (single runs vary ~2x)."""
    runs = []
    for _ in range(BASELINE_REPEATS):
        gc.collect()
        t0 = time.perf_counter()
        n = _flatten_pack(lib, layers)
        runs.append(time.perf_counter() - t0)
    return n, min(runs), runs


def worker_baseline(args) -> dict:
    """Baseline (flatten + pack) and, for generated layouts, GDSII write + read back."""
    import gdstk

    from pitchguard.deck import load_deck
    from pitchguard.layout.reader import read_layout

    out: dict = {}
    if args.file:
        deck = load_deck(args.deck)
        wanted = {(r.layer, r.datatype) for r in deck.layers}
        lib = gdstk.read_gds(args.file, filter=wanted)
        out["shapes"], out["baseline"], out["baseline_runs"] = _timed_baseline(lib, sorted(wanted))
        out["maxrss"] = maxrss_mb()
        return out
    rects = generate(args.size) / 1000.0  # nm -> um (library unit)
    lib = gdstk.Library(unit=1e-6, precision=GRID_NM * 1e-9)
    cell = lib.new_cell("TOP")
    cell.add(*(gdstk.Polygon(r, layer=LAYER[0], datatype=LAYER[1]) for r in rects))
    del rects
    out["shapes"], out["baseline"], out["baseline_runs"] = _timed_baseline(lib, [LAYER])
    if args.write_gds:
        with tempfile.TemporaryDirectory(prefix="pitchguard-bench-") as tmp:
            path = Path(tmp) / f"gen_{args.size}.gds"
            t0 = time.perf_counter()
            lib.write_gds(str(path))
            out["write"] = time.perf_counter() - t0
            out["gds_mb"] = path.stat().st_size / 2**20
            del lib, cell
            gc.collect()
            t0 = time.perf_counter()
            lay = read_layout(path, [LAYER])
            out["read"] = time.perf_counter() - t0
            out["read_shapes"] = lay.shape_count
    out["maxrss"] = maxrss_mb()
    return out


# --------------------------------------------------------------------------- driver


def run_worker(mode: str, extra: list[str], timeout: float) -> dict:
    """Run one measurement in a fresh interpreter; return its last (maybe partial) result."""
    cmd = [sys.executable, str(Path(__file__).resolve()), "--worker", mode, *extra]
    t0 = time.perf_counter()
    # stderr is not captured: progress (and gdstk's warnings) go to the terminal.
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE)
    status = None
    try:
        stdout, _ = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        stdout, _ = proc.communicate()
        status = f"timed out after {timeout:.0f} s"
    if status is None and proc.returncode != 0:
        rc = proc.returncode
        status = f"killed by signal {-rc}" if rc < 0 else f"exit status {rc}"
    res: dict = {}
    for line in stdout.decode("utf-8", "replace").splitlines():
        if line.startswith(RESULT_TAG):
            res = json.loads(line[len(RESULT_TAG) :])
    res["wall"] = time.perf_counter() - t0
    if status:
        where = f" during {res['running']}" if res.get("running") else ""
        name = "traced extract" if "--trace" in extra else mode
        res["error"] = f"{name} worker {status}{where} after {res['wall']:.0f} s"
    return res


def _f(x, fmt=None, none="-"):
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return none
    if fmt is None:  # seconds: 1-2 significant digits more for small values
        fmt = "{:.4f}" if x < 0.01 else "{:.3f}" if x < 10 else "{:.1f}"
    return fmt.format(x)


def _sizes(text: str) -> list[int]:
    return [int(float(s)) for s in text.split(",") if s.strip()]


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", default="1e4,1e5,1e6", help="comma-separated shape counts")
    ap.add_argument("--quick", action="store_true", help="only 1e4 and 1e5")
    ap.add_argument(
        "--no-gds",
        dest="gds",
        action="store_false",
        help="skip writing/reading the generated layouts as GDSII",
    )
    ap.add_argument(
        "--no-trace",
        dest="trace_pass",
        action="store_false",
        help="skip the tracemalloc pass entirely",
    )
    ap.add_argument(
        "--trace-max",
        type=float,
        default=1e5,
        help="tracemalloc pass only for generated sizes up to this (default 1e5; "
        "the traced run is 2-4x slower than the timed one)",
    )
    ap.add_argument("--timeout", type=float, default=3600.0, help="seconds per worker process")
    # Internal: one measurement in a fresh process.
    ap.add_argument("--worker", choices=["extract", "baseline"], help=argparse.SUPPRESS)
    ap.add_argument("--size", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--file", help=argparse.SUPPRESS)
    ap.add_argument("--deck", help=argparse.SUPPRESS)
    ap.add_argument("--trace", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--write-gds", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)

    if args.worker:
        fn = worker_extract if args.worker == "extract" else worker_baseline
        emit(fn(args))
        return 0

    sizes = [10_000, 100_000] if args.quick else _sizes(args.sizes)
    jobs: list[tuple[str, list[str]]] = []
    samples = sorted(SAMPLE_DIR.glob("*.gds")) if SAMPLE_DIR.is_dir() else []
    if not samples:
        print(f"note: no sample layout ({SAMPLE_DIR.relative_to(ROOT)}/*.gds): sample row skipped")
    for p in samples:
        deck = sample_deck(p)
        if deck is None:
            print(f"note: no deck for {p.name} (rules/demo.toml or rules/{p.stem}.toml): skipped")
            continue
        print(f"sample: {p.relative_to(ROOT)} with {deck.relative_to(ROOT)}")
        jobs.append((p.name, ["--file", str(p), "--deck", str(deck)], True))
    for n in sizes:
        jobs.append((f"gen {n:.0e}".replace("+0", ""), ["--size", str(n)], n <= args.trace_max))

    traced_txt = "with" if args.trace_pass else "no"
    print(
        f"python {sys.version.split()[0]}, numpy {np.__version__}, {os.cpu_count()} cpus; "
        f"each row in fresh processes ({traced_txt} tracemalloc pass)"
    )
    rows = []
    for label, extra, traced in jobs:
        print(f"  running {label} ...", flush=True)
        gds = ["--write-gds"] if args.gds and "--file" not in extra else []
        bl = run_worker("baseline", extra + gds, args.timeout)
        ex = run_worker("extract", extra, args.timeout)
        tr = {}
        if args.trace_pass and traced:
            tr = run_worker("extract", extra + ["--trace"], args.timeout)
        for r in (bl, ex, tr):
            if "error" in r:
                print(f"    {label}: {r['error']}")
        rows.append((label, ex, bl, tr))

    # n log n reference: smallest generated size that ran to the end.
    ref = None
    for label, ex, _, _ in rows:
        if label.startswith("gen") and ex.get("done") and ex["shapes"] > 1:
            t = sum(ex["seconds"].values())
            cand = (ex["shapes"], t / (ex["shapes"] * math.log2(ex["shapes"])))
            if ref is None or cand[0] < ref[0]:
                ref = cand

    head = [
        "layout",
        "shapes",
        "sites",
        "read",
        "build",
        "sites",
        "classify",
        "total",
        "us/shape",
        "nlogn",
        "baseline",
        "x base",
        "rss0 MB",
        "peakRSS",
        "py-peak MB",
    ]
    table = []
    for label, ex, bl, tr in rows:
        s = ex.get("seconds", {})
        done = bool(ex.get("done"))
        total = sum(s.values()) if s else None
        n = ex.get("shapes", bl.get("shapes"))
        read = ex.get("read", bl.get("read"))
        base = bl.get("baseline")

        def stage(k, s=s, ex=ex):
            if k in s:
                return _f(s[k])
            return "DIED" if ex.get("running") == k else "-"

        if done:
            tot = _f(total)
            per = _f(1e6 * total / n, "{:.1f}")
            gen = label.startswith("gen")
            scaling = (total / (n * math.log2(n))) / ref[1] if gen and ref and n > 1 else None
            ratio = _f(total / base if base else None, "{:.0f}x")
        else:  # killed or timed out: what it did finish is a lower bound
            tot = f">{_f(total)}" if total else "-"
            per = f">{1e6 * total / n:.1f}" if total and n else "-"
            scaling = None
            ratio = f">{total / base:.0f}x" if total and base else "-"
        py = tr.get("py_peak", {})
        table.append(
            [
                label,
                f"{n:,}" if n else "?",
                f"{ex['sites']:,}" if done else "-",
                _f(read),
                stage("build"),
                stage("sites"),
                stage("classify"),
                tot,
                per,
                _f(scaling),
                _f(base),
                ratio,
                _f(ex.get("rss0"), "{:.0f}"),
                _f(ex.get("maxrss"), "{:.0f}") + ("" if done else "+"),
                "/".join(_f(py.get(k), "{:.0f}") for k in ("build", "sites", "classify"))
                if py
                else "-",
            ]
        )
    widths = [max(len(h), *(len(r[i]) for r in table)) for i, h in enumerate(head)]
    print()
    print("  ".join(h.rjust(w) for h, w in zip(head, widths, strict=True)))
    print("  ".join("-" * w for w in widths))
    for r in table:
        print("  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)))
    print()
    print("seconds per stage; total = build + sites + classify (read not included);")
    print("read = read_layout of the GDSII (generated rows: written to a temp file and read back);")
    print("nlogn = (total / n log2 n) relative to the smallest generated size (~1: n log n,")
    print("        ~10x per decade: n^2); generated rows only;")
    print("baseline = gdstk get_polygons + PolygonSet.from_arrays, best of 3;")
    print("           x base = total / baseline;")
    print("rss0 = RSS with the polygons loaded, peakRSS = ru_maxrss of the extraction process;")
    print("py-peak = tracemalloc peak per stage build/sites/classify, MB (separate traced run;")
    print(f"          '-' = not traced: sizes above --trace-max {args.trace_max:.0e}).")
    print("DIED = the worker was killed or timed out in this stage; '>' = lower bound.")
    extra_lines = []
    for label, ex, bl, tr in rows:
        bits = [label + ":"]
        if ex.get("done"):
            bits[0] += f" {ex['edges']:,} edges, {ex['findings']:,} findings"
        for r in (bl, ex, tr):
            if "error" in r:
                bits.append(r["error"])
        if "generate" in ex:
            bits.append(f"generate {ex['generate']:.2f} s")
        if "write" in bl:
            bits.append(
                f"GDSII write {bl['write']:.2f} s ({bl['gds_mb']:.0f} MB), "
                f"read back {bl['read_shapes']:,} shapes"
            )
        if "baseline_runs" in bl:
            runs = "/".join(f"{t:.3f}" for t in bl["baseline_runs"])
            bits.append(f"baseline runs {runs} s")
        if "maxrss" in bl:
            bits.append(f"baseline/read process peakRSS {bl['maxrss']:.0f} MB")
        if tr and "seconds" in tr:
            bits.append(f"traced-run total {sum(tr['seconds'].values()):.2f} s")
        extra_lines.append("; ".join(bits))
    print()
    for line in extra_lines:
        print(line)
    return 0


if __name__ == "__main__":
    sys.exit(main())
