"""Tiled scans: tasks streamed to the workers, results assembled into one FindingSet."""

from __future__ import annotations

import math
from pathlib import Path

from pitchguard.deck import Deck
from pitchguard.geometry.sites import ExtractStats
from pitchguard.judge.findings import FindingSet, replaced
from pitchguard.judge.order import sort_findings
from pitchguard.layout.reader import Layout
from pitchguard.run.arrays import settled, tiled_arrays, with_findings
from pitchguard.run.cells import CHUNK, CellMap, finding_windows
from pitchguard.run.engine import WorkerPool, planned_jobs
from pitchguard.run.merge import TileAssembly
from pitchguard.run.plan import (
    DEFAULT_TILED_MAX_SHAPES,
    Structure,
    check_deck_memory,
    check_tile_count,
    halo_words,
    plan_tiles,
    share_words,
    tile_advice,
    tile_halo_nm,
    tile_memory_words,
    tile_shape_limit,
    tiles_for,
    worker_share_mb,
)
from pitchguard.run.scan import LayerStats, ScanResult, add_array_counts, require_layers
from pitchguard.run.tasks import hints_task, holders_task, keys_task, structure_task, tile_task

KEY_CHUNKS = 16


KEY_CHUNK_MIN = 64
"""Content keys are worked out in about KEY_CHUNKS chunks of at least KEY_CHUNK_MIN tiles."""


ADVICE = "scan a --region at a time, or on a machine with more memory"


CUTS_SHARED = 2000
"""Most cuts imaged elsewhere passed to a tile task (about 1 kB each, pickled)."""


def with_hints(findings: FindingSet, keys: list, texts: dict) -> FindingSet:
    """``findings`` with their hints made (:func:`hints_task`) from the hint
    keys of the distinct findings."""
    distinct = [
        f if key is None else replaced(f, hint=texts[(f.layer, repr(key))])
        for f, key in zip(findings.distinct, keys, strict=True)
    ]
    return FindingSet(distinct, findings.which, findings.offset)


def preload_for_fork() -> None:
    """Import, before the first fork, what every forked child would otherwise
    import for itself: the layout library, the hierarchy query and the holders
    of findings' cells (the structure read and each worker), numpy.ma
    (np.unique imports it on first use, in each worker and again here for the
    merge), numpy.fft and threadpoolctl (each worker): once here instead of
    once per process."""
    import gdstk  # noqa: F401
    import numpy.fft
    import numpy.ma  # noqa: F401
    import threadpoolctl  # noqa: F401

    import pitchguard.geometry.lattice
    import pitchguard.layout.hierarchy
    import pitchguard.layout.holders_batch  # noqa: F401


def _guarded_structure(path: Path, cell, layers, max_shapes: int, timeout_s: float) -> Structure:
    """The first read, in a child process: a reader crash or hang becomes a LayoutError."""
    from pitchguard.layout.isolated import run_isolated

    return run_isolated(
        structure_task,
        (str(path), cell, layers, max_shapes),
        path,
        "reading the file's structure",
        timeout_s,
    )


def scan_tiled(
    path: str | Path,
    deck: Deck,
    tile_um: float | None = None,
    jobs: int | None = None,
    scheduler: str | None = None,
    cell: str | None = None,
    progress=None,
    reuse: bool = True,
    region_um: tuple[float, float, float, float] | None = None,
    max_shapes: int = DEFAULT_TILED_MAX_SHAPES,
    read_timeout_s: float | None = None,
    max_memory_mb: float | None = None,
    note=None,
    ordered: bool = True,
    cells: bool = False,
) -> ScanResult:
    """Scan ``path`` tile by tile on local worker processes or a dask cluster.

    Tiles whose content keys are equal hold the same polygons up to a shift;
    with ``reuse`` each such group is scanned once and its findings shifted
    onto the other tiles of the group.  ``note(text)``, if given, hears advice
    before the tiles start (a ``tile_um`` that defeats reuse, say).  With
    ``ordered`` the findings come in report order (:func:`sort_findings`);
    without, in no set order, for a caller that only counts them (the sort
    of a chip's million findings is a visible share of a scan).  With
    ``cells`` the result also names the cell of every finding (run.cells).
    """
    import time

    from pitchguard.layout.formats import sniff_format
    from pitchguard.layout.isolated import READ_TIMEOUT_S

    t0 = time.perf_counter()
    p = Path(path)
    sniff_format(p)
    layers = [(r.layer, r.datatype) for r in deck.layers]
    if not scheduler:
        preload_for_fork()
    st = _guarded_structure(p, cell, layers, max_shapes, read_timeout_s or READ_TIMEOUT_S)
    require_layers(deck, p, st.cells, dict(st.shapes_by_layer), st.present)
    halo = tile_halo_nm(deck)
    halo_why = halo_words(deck)
    tile_nm, jobs = plan_tiles(
        st,
        halo,
        planned_jobs(jobs, scheduler, note),
        max_memory_mb,
        tile_um,
        distributed=bool(scheduler),
        path=p,
        halo_why=halo_why,
    )
    share = worker_share_mb(max_memory_mb, jobs, bool(scheduler))
    check_deck_memory(deck, share, share_words(max_memory_mb, jobs, share))
    region = tuple(v * 1000.0 for v in region_um) if region_um else None
    check_tile_count(p, st.extent_nm, region, tile_nm, st.shapes)
    if note is not None and tile_um is not None and reuse and region is None:
        advice = tile_advice(st, halo, tile_nm, jobs, max_memory_mb, bool(scheduler), tile_um)
        if advice:
            note(advice)
    tiles = tiles_for(st.extent_nm, tile_nm, region) if st.extent_nm else []
    from pitchguard.run.budget import memory_guard, set_worker_budget

    set_worker_budget(share, max_memory_mb is not None, tile_memory_words(tile_nm, halo, halo_why))
    with (
        memory_guard(p, "in the main process, assembling the tiles' findings", ADVICE),
        WorkerPool(str(p), jobs, scheduler, progress, tasks=len(tiles)) as engine,
    ):
        assembly = TileAssembly(tiles)
        limit = tile_shape_limit(max_memory_mb, jobs, bool(scheduler))
        run = TileScheduler(
            engine, assembly, engine.task_path, deck, cell, layers, tiles, halo, limit
        )
        if reuse and len(tiles) > 1:
            # Content keys, a chunk at a time in tile order; each distinct tile is
            # scanned as soon as the chunks up to it are in, while the keys of the
            # rest are still being worked out.
            size = max(KEY_CHUNK_MIN, math.ceil(len(tiles) / KEY_CHUNKS))
            run.chunks = [(k, tiles[k : k + size]) for k in range(0, len(tiles), size)]
            # The first tile is the first of its group whatever its key: it starts
            # beside the first chunk of keys.
            first = [run.next_chunk(), run.tile(assembly.group([0]))]
        else:
            first = [run.tile(assembly.group([k])) for k in range(len(tiles))]
        engine.stream(first, run.arrived, in_flight=2 * engine.workers)
        assembled = assembly.finish(deck, st.grid_nm)
        tiling = {
            "tile_um": tile_nm / 1000.0,
            "tiles": len(tiles),
            "distinct": len(assembly.members),
            "workers": engine.workers,
        }
        findings = with_hints(assembled.findings, assembled.hint_keys, run.texts)
        stats = sum_stats(deck, assembled.per_group)
        found = tiled_arrays(deck, assembly)
        for s, (_, v) in zip(stats, found, strict=True):
            add_array_counts(s.extract, v)
        findings = settled(findings, deck, found)
        findings = with_findings(findings, [f for _, v in found for f in v.findings])
        if ordered:
            findings = sort_findings(findings)
        cmap = _cells(engine, engine.task_path, cell, layers, findings, deck) if cells else None
    layout = Layout(p, st.fmt, st.unit_m, st.grid_nm, st.cells, {})
    return ScanResult(findings, stats, layout, [], time.perf_counter() - t0, tiling, cmap)


def _cells(engine, path: str, cell, layers, findings, deck: Deck):
    """The cell of each finding (run.cells), worked out on the workers, a chunk each."""
    windows, regions, lay = finding_windows(findings, deck)
    parts: dict[int, CellMap] = {}

    def arrived(k, part):
        parts[k] = part
        return []

    tasks = [
        (
            holders_task,
            (path, cell, layers, *(a[k : k + CHUNK] for a in (windows, regions, lay))),
            k,
        )
        for k in range(0, len(windows), CHUNK)
    ]
    engine.stream(tasks, arrived, in_flight=2 * engine.workers)
    return CellMap.joined([parts[k] for k in sorted(parts)])


class TileScheduler:
    """The tasks of a tiled scan and what comes back from them (see scan_tiled).

    Content keys come a chunk at a time, in tile order; when a chunk is in,
    every key first seen in it has its first tile known, and that tile is
    scanned for its group at once.  Results are filed in the assembly; the
    hints tiles find go to one hints task at a time (those found while one
    runs wait for the next, with the gratings it judged); the cuts any
    worker imaged travel with the tile tasks that start later.
    """

    def __init__(self, engine, assembly, path, deck, cell, layers, tiles, halo, limit):
        self.engine, self.assembly = engine, assembly
        self.path, self.deck, self.cell, self.layers = path, deck, cell, layers
        self.tiles, self.halo, self.limit = tiles, halo, limit
        self.texts: dict = {}  # hint texts by (layer, repr(hint key))
        self.chunks: list = []  # (first tile, tiles) of the content keys still to ask
        self.group_of: dict = {}  # content key -> group
        self.asked: set = set()
        self.imaged: dict = {}
        self.scanned = self.keyed = 0
        self.judged: dict = {}  # ideal gratings judged for hints, passed on to later hints
        self.hint_keys: list = []  # found, not yet sent
        self.hinting = 0  # hints tasks running

    def next_chunk(self):
        start, chunk = self.chunks.pop(0)
        return (keys_task, (self.path, self.cell, self.layers, chunk, self.halo), ("keys", start))

    def tile(self, g: int):
        k = self.assembly.members[g][0]

        def args():
            return (
                self.path,
                self.deck.text,
                self.cell,
                self.tiles[k],
                self.halo,
                self.limit,
                list(self.imaged.values())[-CUTS_SHARED:],
            )

        return (tile_task, args, g)

    def arrived(self, tag, result) -> list:
        more = []
        if tag == "hints":
            texts, judged = result
            self.texts.update(texts)
            for row in judged:
                self.judged.setdefault(row.key, row)
            self.hinting -= 1
            more.extend(self._hints())
        elif isinstance(tag, tuple):  # content keys of a chunk, from tile ``start`` on
            start = tag[1]
            for k, key in enumerate(result, start):
                g = self.group_of.get(key)
                if g is None and k == 0:  # group 0, started with the keys
                    self.group_of[key] = 0
                elif g is None:
                    # Started at once, with the cuts imaged so far: holding it
                    # back for the first tile's cuts would leave a worker idle.
                    self.group_of[key] = g = self.assembly.group([k])
                    more.append(self.tile(g))
                else:
                    self.assembly.members[g].append(k)
            self.keyed += len(result)
            if self.engine.progress:
                self.engine.progress("tile contents", self.keyed, len(self.tiles))
            if self.chunks:
                more.insert(0, self.next_chunk())
        else:
            for row in result.imaged:
                self.imaged.setdefault(row.key, row)
            self.assembly.add(tag, result.regions, result.stats)
            self.scanned += 1
            if self.engine.progress:
                n = len(self.assembly.members)
                so_far = " so far" if self.keyed < len(self.tiles) else ""
                self.engine.progress(f"tiles ({n} distinct{so_far})", self.scanned, n)
            new = {
                (r.finding.layer, repr(r.hint_key)): (r.finding.layer, r.hint_key)
                for r in result.regions
                if r.hint_key is not None and (r.finding.layer, repr(r.hint_key)) not in self.asked
            }
            self.asked.update(new)
            self.hint_keys.extend(k for _, k in sorted(new.items()))
            more[:0] = self._hints()
        return more

    def _hints(self) -> list:
        """Tasks for the hint keys waiting.  While tiles are still to come, one at
        a time: hints of one layer search overlapping gratings, and a task running
        beside another would judge them again.  Once every tile is in, the keys
        left are split by pitch among the workers (overlap only at the cuts)."""
        tiles_left = self.keyed < len(self.tiles) or self.scanned < len(self.assembly.members)
        limit = 1 if tiles_left else max(1, self.engine.workers)
        if self.hinting >= limit or not self.hint_keys:
            return []
        keys, self.hint_keys = self.hint_keys, []
        parts = [keys] if tiles_left else split_by_pitch(keys, limit - self.hinting)
        self.hinting += len(parts)
        return [
            (
                hints_task,
                lambda part=part: (self.deck.text, part, list(self.judged.values())),
                "hints",
            )
            for part in parts
        ]


def split_by_pitch(keys: list, n: int) -> list[list]:
    """``(layer, hint key)`` pairs in at most ``n`` runs of similar layer and pitch
    (a key's pitch and CD are its 4th and 3rd values; nan sorts last)."""

    def order(item):
        layer, key = item
        pitch, cd = key[3], key[2]
        return (layer, pitch != pitch, pitch if pitch == pitch else 0.0, cd if cd == cd else 0.0)

    ranked = sorted(keys, key=order)
    size = -(-len(ranked) // max(1, n))
    return [ranked[k : k + size] for k in range(0, len(ranked), size)]


def sum_stats(deck: Deck, per_group: list[tuple[list[LayerStats], int]]) -> list[LayerStats]:
    """Counts of every tile, from each distinct tile's counts times its tiles.

    Each tile counts what it owns (see :func:`pitchguard.geometry.sites.find_sites`),
    so the sums are the whole layout's; distinct cuts are counted over the
    union of the tiles' cuts.  Seconds are those spent: each distinct tile's
    once.
    """
    out = []
    for k, rule in enumerate(deck.layers):
        ex = ExtractStats()
        shapes = 0
        secs = 0.0
        cuts: set = set()
        for stats, times in per_group:
            s = stats[k]
            ex.add(s.extract, times)
            shapes += times * s.shapes
            secs += s.seconds
            cuts |= s.cut_keys
        if "unique_cuts" in ex.extra:
            ex.extra["unique_cuts"] = len(cuts)
        out.append(LayerStats(rule.name, rule.source, shapes, ex, secs))
    return out
