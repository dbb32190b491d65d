"""Tiled scans: the layout cut into tiles, scanned by worker processes or a dask cluster.

Each tile is a whole number of site cells (``extract.SITE_CELL_NM``) and owns
the sites whose midpoint lies inside it; it is read straight from the
hierarchy (:class:`pitchguard.tiles.HierarchyQuery`) with a halo of
``2 ambit + min_run``, so a site sees the same neighbourhood as in a scan of
the whole layout.  Workers receive the file path, the deck text and the tile
(never pickled geometry: the layout library's objects do not pickle), keep
the opened file and its hierarchy index per process, and return findings.
Regions cut by tile borders are merged back (same layer, direction and
pitch class, touching outlines); line counts merge exactly through the
findings' line positions.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from pitchguard.classify import (
    ORIENTATION_TOL_DEG,
    SNAP_PITCH_SPREAD,
    Finding,
    _periodicity,
    canonical_normal,
    count_lines,
    hint_for,
)
from pitchguard.deck import Deck, parse_deck
from pitchguard.errors import LayoutError
from pitchguard.extract import SITE_CELL_NM, ExtractStats
from pitchguard.layout import Layout
from pitchguard.scan import LayerStats, ScanResult, scan_polygons

DEFAULT_TILE_UM = 100.0


@dataclass(frozen=True)
class Structure:
    """What the guarded first read learns about a layout."""

    unit_m: float
    grid_nm: float
    cells: tuple[str, ...]
    extent_nm: tuple[float, float, float, float] | None
    fmt: str


# --------------------------------------------------------------------------- worker side

_OPEN: dict = {}


def _open(path: str, cell: str | None, layers):
    """The library and its hierarchy index, opened once per worker process."""
    from pitchguard.layout import open_layout
    from pitchguard.tiles import HierarchyQuery

    key = (path, os.path.getmtime(path), cell, tuple(layers))
    if key in _OPEN:
        return _OPEN[key]
    lib, fmt, tops = open_layout(Path(path), set(layers), cell)
    q = HierarchyQuery(lib, tops, layers, lib.unit * 1e9)
    st = Structure(lib.unit, lib.precision * 1e9, tuple(c.name for c in tops), q.bounding_box(),
                   fmt)  # fmt: skip
    _OPEN.clear()  # one layout per worker at a time
    _OPEN[key] = (q, st)
    return q, st


def structure_task(path: str, cell: str | None, layers) -> Structure:
    return _open(path, cell, layers)[1]


def tile_task(path: str, deck_text: str, cell: str | None, tile, halo: float):
    """Scan one tile; returns ``(findings, stats per layer)``."""
    import faulthandler

    faulthandler.disable()
    deck = parse_deck(deck_text)
    layers = [(r.layer, r.datatype) for r in deck.layers]
    q, st = _open(path, cell, layers)
    x0, y0, x1, y1 = tile
    polys = q.query((x0 - halo, y0 - halo, x1 + halo, y1 + halo))
    for ps in polys.values():  # onto the database grid, exactly as read_layout does
        np.round(ps.points / st.grid_nm, out=ps.points)
        np.multiply(ps.points, st.grid_nm, out=ps.points)
    # Hints are made once per merged region by the parent, not per tile.
    findings, stats = scan_polygons(polys, deck, st.grid_nm, region_nm=tuple(tile), hints=False)
    return findings, stats


# --------------------------------------------------------------------------- driver


def _halo(deck: Deck) -> float:
    scale = deck.scale_to_wafer
    return max((2 * r.ambit_nm + r.min_run_nm) / scale for r in deck.layers)


def tiles_for(extent, tile_nm: float):
    """Tiles covering ``extent``, aligned to multiples of ``tile_nm``."""
    x0, y0, x1, y1 = extent
    i0, i1 = math.floor(x0 / tile_nm), math.floor(x1 / tile_nm)
    j0, j1 = math.floor(y0 / tile_nm), math.floor(y1 / tile_nm)
    return [(i * tile_nm, j * tile_nm, (i + 1) * tile_nm, (j + 1) * tile_nm)
            for j in range(j0, j1 + 1) for i in range(i0, i1 + 1)]  # fmt: skip


def _guarded_structure(path: Path, cell, layers) -> Structure:
    """The first read, in a child process: a reader crash becomes a LayoutError."""
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool
    from multiprocessing import get_context

    with ProcessPoolExecutor(1, mp_context=get_context("fork")) as ex:
        try:
            return ex.submit(structure_task, str(path), cell, layers).result()
        except BrokenProcessPool:
            raise LayoutError(
                f"{path}: the layout reader crashed while opening the file: it is corrupt"
            ) from None


def scan_tiled(
    path: str | Path,
    deck: Deck,
    tile_um: float = DEFAULT_TILE_UM,
    jobs: int | None = None,
    scheduler: str | None = None,
    cell: str | None = None,
    progress=None,
) -> ScanResult:
    """Scan ``path`` tile by tile on local worker processes or a dask cluster."""
    import time

    from pitchguard.layout import sniff_format

    t0 = time.perf_counter()
    p = Path(path)
    sniff_format(p)
    layers = [(r.layer, r.datatype) for r in deck.layers]
    st = _guarded_structure(p, cell, layers)
    tile_nm = max(SITE_CELL_NM, math.ceil(tile_um * 1000.0 / SITE_CELL_NM) * SITE_CELL_NM)
    tiles = tiles_for(st.extent_nm, tile_nm) if st.extent_nm else []
    halo = _halo(deck)
    deck_text = deck.text
    results = _run(str(p), deck_text, cell, tiles, halo, jobs, scheduler, progress)
    findings = merge_findings([f for fs, _ in results for f in fs], deck, st.grid_nm)
    findings = [replace(f, hint=hint_for(f, deck.layer(f.layer), deck.scale_to_wafer))
                for f in findings]  # fmt: skip
    stats = _sum_stats(deck, [s for _, s in results])
    layout = Layout(p, st.fmt, st.unit_m, st.grid_nm, st.cells, {})
    findings.sort(key=lambda f: (f.severity_rank, f.k1, f.layer, f.bbox_nm))
    return ScanResult(findings, stats, layout, [], time.perf_counter() - t0)


def _run(path, deck_text, cell, tiles, halo, jobs, scheduler, progress):
    if scheduler:
        try:
            from distributed import Client
        except ImportError:
            raise LayoutError("--scheduler needs dask.distributed: pip install "
                              "'pitchguard[cluster]'") from None  # fmt: skip
        with Client(scheduler) as client:
            futures = client.map(tile_task, [path] * len(tiles), [deck_text] * len(tiles),
                                 [cell] * len(tiles), tiles, [halo] * len(tiles),
                                 pure=False)  # fmt: skip
            try:
                return client.gather(futures)
            except Exception as exc:  # a worker lost while reading: bad input
                raise LayoutError(f"{path}: a tile failed on the cluster: "
                                  f"{type(exc).__name__}: {exc}") from None  # fmt: skip
    from concurrent.futures import ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool
    from multiprocessing import get_context

    jobs = jobs or os.cpu_count() or 1
    out = [None] * len(tiles)
    with ProcessPoolExecutor(jobs, mp_context=get_context("fork")) as ex:
        futs = {ex.submit(tile_task, path, deck_text, cell, t, halo): k
                for k, t in enumerate(tiles)}  # fmt: skip
        done = 0
        try:
            from concurrent.futures import as_completed

            for fut in as_completed(futs):
                out[futs[fut]] = fut.result()
                done += 1
                if progress:
                    progress(f"tiles ({len(tiles)})", done, len(tiles))
        except BrokenProcessPool:
            raise LayoutError(f"{path}: the layout reader crashed in a tile worker: the file "
                              "is corrupt") from None  # fmt: skip
    return out


def _sum_stats(deck: Deck, per_tile: list[list[LayerStats]]) -> list[LayerStats]:
    out = []
    for k, rule in enumerate(deck.layers):
        ex = ExtractStats()
        shapes = 0
        secs = 0.0
        extra: dict = {}
        for stats in per_tile:
            s = stats[k]
            ex.add(s.extract)
            shapes += s.shapes
            secs += s.seconds
            for key, v in s.extract.extra.items():
                extra[key] = extra.get(key, 0) + v
        ex.extra = extra
        out.append(LayerStats(rule.name, rule.source, shapes, ex, secs))
    return out


# --------------------------------------------------------------------------- merging


def _frame(f: Finding):
    ang = math.radians(f.orientation_deg)
    d = np.array([math.cos(ang), math.sin(ang)])
    return d, canonical_normal(np.array([d[1], -d[0]]))


def _touch(a: Finding, b: Finding, eps: float) -> bool:
    d, n = _frame(a)
    pa, pb = np.array(a.outline_nm), np.array(b.outline_nm)
    for axis in (d, n):
        ua, ub = pa @ axis, pb @ axis
        if ua.min() > ub.max() + eps or ub.min() > ua.max() + eps:
            return False
    return True


def merge_findings(findings: list[Finding], deck: Deck, grid_nm: float) -> list[Finding]:
    """Merge findings of one region that tile borders cut apart."""
    n = len(findings)
    if n < 2:
        return list(findings)
    parent = list(range(n))

    def find(i):
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    scale = deck.scale_to_wafer
    boxes = np.array([f.bbox_nm for f in findings])
    eps = 2.0 * grid_nm
    order = np.argsort(boxes[:, 0])
    for a_pos in range(n):
        i = int(order[a_pos])
        fi = findings[i]
        rule = deck.layer(fi.layer)
        tol = max(rule.pitch_tolerance_nm / scale, SNAP_PITCH_SPREAD * grid_nm)
        for b_pos in range(a_pos + 1, n):
            j = int(order[b_pos])
            if boxes[j, 0] > boxes[i, 2] + eps:
                break
            fj = findings[j]
            if fj.layer != fi.layer or boxes[j, 1] > boxes[i, 3] + eps \
                    or boxes[i, 1] > boxes[j, 3] + eps:  # fmt: skip
                continue
            dang = abs(fi.orientation_deg - fj.orientation_deg) % 180.0
            if min(dang, 180.0 - dang) >= ORIENTATION_TOL_DEG:
                continue
            pi, pj = fi.pitch_nm, fj.pitch_nm
            if not (math.isinf(pi) or math.isinf(pj) or abs(pi - pj) <= tol
                    or _overlap(fi, fj, tol)):  # fmt: skip
                continue
            if _touch(fi, fj, eps):
                parent[find(i)] = find(j)
    groups: dict[int, list[Finding]] = {}
    for i in range(n):
        groups.setdefault(find(i), []).append(findings[i])
    return [g[0] if len(g) == 1 else _merge(g, deck, grid_nm) for g in groups.values()]


def _overlap(a: Finding, b: Finding, tol: float) -> bool:
    """Pitch ranges of the two parts overlap (a region spans a range of pitches)."""
    return a.pitch_nm <= b.pitch_max_nm + tol and b.pitch_nm <= a.pitch_max_nm + tol


def _merge(parts: list[Finding], deck: Deck, grid_nm: float) -> Finding:
    best = min(parts, key=lambda f: (f.severity_rank, f.pitch_nm, round(f.cut_origin_nm[1], 3),
                                     round(f.cut_origin_nm[0], 3)))
    # The frame of the worst site, exactly as the region's own outline holds it.
    o = np.array(best.outline_nm)
    d = o[1] - o[0]
    d = d / np.hypot(*d) if np.hypot(*d) > 0 else _frame(best)[0]
    nrm = np.array([d[1], -d[0]])
    pts = np.concatenate([np.array(f.outline_nm) for f in parts])
    pu, pv = pts @ d, pts @ nrm
    u0, u1, v0, v1 = pu.min(), pu.max(), pv.min(), pv.max()
    corners = (d * u0 + nrm * v0, d * u1 + nrm * v0, d * u1 + nrm * v1, d * u0 + nrm * v1)
    outline = tuple((float(x), float(y)) for x, y in corners)
    ol = np.array(outline)
    bbox = (float(ol[:, 0].min()), float(ol[:, 1].min()), float(ol[:, 0].max()),
            float(ol[:, 1].max()))
    keys = tuple(sorted(set().union(*(f.line_keys for f in parts))))
    lines = count_lines(keys, grid_nm)
    rule = deck.layer(best.layer)
    return replace(
        best,
        pitch_max_nm=max(f.pitch_max_nm for f in parts),
        lines=lines,
        periodicity=_periodicity(lines, rule.dense_min_lines),
        sites=sum(f.sites for f in parts),
        run_nm=round(float(u1 - u0), 3),
        bbox_nm=bbox,
        outline_nm=outline,
        line_keys=keys,
    )

