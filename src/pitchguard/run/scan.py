"""The scan of one region's polygons (extract -> cuts -> image -> judge); whole-layout scans."""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from pitchguard.deck import Deck
from pitchguard.geometry.cuts import site_cuts
from pitchguard.geometry.features import build_features
from pitchguard.geometry.lattice import (
    HALO_RANGES,
    SQRT2,
    compact_features,
    find_arrays,
    lattice_sites,
    points_on_features,
)
from pitchguard.geometry.sites import ExtractStats, find_sites, in_region
from pitchguard.judge.arrays import ArrayVerdicts, edge_findings, judge_arrays, member_arrays
from pitchguard.judge.compact_clips import judge_alone
from pitchguard.judge.findings import Finding
from pitchguard.judge.line_ends import TipVerdicts, judge_line_ends
from pitchguard.judge.order import sort_findings
from pitchguard.judge.regions import Region
from pitchguard.judge.verdicts import classify_layer
from pitchguard.layout.isolated import read_layout_isolated
from pitchguard.layout.polygons import PolygonSet
from pitchguard.layout.reader import DEFAULT_MAX_SHAPES, Layout
from pitchguard.optics.aerial import source_is_symmetric
from pitchguard.optics.cut_images import measure_cuts

Progress = Callable[[str, int, int], None]
"""``progress(label, done, total)``: called before each stage of each layer
(three stages a layer: features, sites, classify)."""


@dataclass
class LayerStats:
    """What one layer of a scan counted."""

    name: str
    source: str
    shapes: int = 0
    extract: ExtractStats = field(default_factory=ExtractStats)
    seconds: float = 0.0
    # Tiles only: the distinct cuts imaged (cut, source turn), so that a tiled
    # scan can count the distinct cuts of the whole layout.
    cut_keys: frozenset = frozenset()
    # Tiles only: the lattice sites of the compact features the tile owns; the
    # caller joins them and judges the arrays they form (run.arrays).
    lattice: object = None


@dataclass
class ScanResult:
    findings: Sequence[Finding]  # a list, or a FindingSet from tiled scans
    layers: list[LayerStats]
    layout: Layout | None = None
    warnings: list[str] = field(default_factory=list)
    seconds: float = 0.0
    # Tiled scans: {"tile_um", "tiles", "distinct", "workers"}; None for a whole scan.
    tiling: dict | None = None
    # The cell of every finding (run.cells.CellMap), when asked for.
    cells: object = None


def _in_region(ps: PolygonSet, region_nm, margin: float) -> PolygonSet:
    if region_nm is None or len(ps) == 0:
        return ps
    x0, y0, x1, y1 = region_nm
    bb = ps.bounding_boxes()
    keep = (bb[:, 2] >= x0 - margin) & (bb[:, 0] <= x1 + margin)
    keep &= (bb[:, 3] >= y0 - margin) & (bb[:, 1] <= y1 + margin)
    return ps.select(keep)


def scan_polygons(
    polygons: dict[tuple[int, int], PolygonSet],
    deck: Deck,
    grid_nm: float,
    region_nm: tuple[float, float, float, float] | None = None,
    progress: Progress | None = None,
    tile: bool = False,
) -> tuple[list[Region], list[LayerStats]]:
    """Scan the deck's layers in ``polygons`` (nm, as drawn): flagged regions and counts.

    With ``region_nm`` only sites whose midpoint lies in the region are judged;
    shapes up to one interaction range outside it are still seen as neighbours.  With
    ``tile`` the region is a tile of a tiled scan: regions keep the sites
    that regions of other tiles may join through (``Region.border_sites``),
    and their hints are left to the caller (``Region.hint_key``).
    """
    regions: list[Region] = []
    stats: list[LayerStats] = []
    scale = deck.scale_to_wafer
    total = 3 * len(deck.layers)

    def tick(label: str, done: int) -> None:
        if progress:
            progress(label, done, total)

    for k, rule in enumerate(deck.layers):
        t0 = time.perf_counter()
        tick(f"{rule.name}: features", 3 * k)
        # Deck lengths are wafer-scale; the geometry is as drawn.
        reach = rule.interaction_range_nm / scale
        min_run = rule.min_run_nm / scale
        ps = polygons.get((rule.layer, rule.datatype), PolygonSet.empty())
        ps = _in_region(ps, region_nm, 2 * reach)
        edges = build_features(ps, grid_nm)
        tick(f"{rule.name}: sites", 3 * k + 1)
        sites, ex = find_sites(edges, min_run, reach, grid_nm, region=region_nm)
        ex.shapes = len(ps)
        if region_nm is not None and len(ps):
            # A shape counts where the centre of its box lies: once over a tiling.
            bb = ps.bounding_boxes()
            ex.shapes = int(in_region(0.5 * (bb[:, :2] + bb[:, 2:]), region_nm).sum())
        # Compact features (contacts, vias, posts, short lines): judged as 2-D
        # patterns (arrays), so their own edges are no 1-D sites.
        compact_max = rule.compact_max_nm / scale
        margin = HALO_RANGES * reach + 2.0 * SQRT2 * compact_max
        near = _in_region(
            polygons.get((rule.layer, rule.datatype), PolygonSet.empty()), region_nm, margin
        )
        compact = compact_features(near, grid_nm, compact_max)
        lattice = lattice_sites(
            near, grid_nm, compact_max, reach, region=region_nm, compact=compact
        )
        alone = judge_alone(lattice, near, rule, scale, grid_nm, region=region_nm)
        clip_findings = alone.findings  # filtered by the arrays once they are known
        if alone.judged:
            ex.extra["compact_on_clips"] = alone.judged
        if alone.not_manhattan:
            ex.extra["compact_clips_not_manhattan"] = alone.not_manhattan
        if alone.edge:
            ex.extra["array_edge_clips"] = alone.edge
        if len(compact) and len(sites):
            mid = sites.origin + sites.direction * (0.5 * (sites.u0 + sites.u1))[:, None]
            inward = mid - sites.normal * (0.25 * grid_nm)
            on = points_on_features(inward, compact.features, 0.5 * grid_nm)
            if on.any():
                sites = sites.take(np.flatnonzero(~on))
                ex.sites -= int(on.sum())
                ex.extra["compact_sites"] = int(on.sum())
        tips = judge_line_ends(
            edges, ps, rule, scale, grid_nm, region=region_nm, compact=compact.features
        )
        regions.extend(Region(f) for f in tips.findings)
        tick(f"{rule.name}: images", 3 * k + 2)
        metrics, which_cut, cuts, angles = None, None, None, None
        cut_keys: frozenset = frozenset()
        if rule.image_checks and len(sites):
            cut_set = site_cuts(
                edges,
                sites,
                reach,
                grid_nm,
                turn_source=not source_is_symmetric(rule.exposure),
                probe_nm=min_run,
                near_nm=rule.exposure.lambda_over_na_nm / scale,
            )
            # A site whose neighbourhood (within lambda/NA of its feature) changes
            # within min_run along the line (a junction, a jog, a line end) is 2-D:
            # counted, not judged as a 1-D cut.
            keep = ~cut_set.changes
            if not keep.all():
                sites = sites.take(np.flatnonzero(keep))
                ex.sites -= int((~keep).sum())
                ex.pieces_2d += int((~keep).sum())
            which_cut, cuts, angles = cut_set.which[keep], cut_set.cuts, cut_set.angles
            if not keep.all():  # only the cuts of the sites kept are imaged
                used = np.unique(which_cut[which_cut >= 0])
                remap = np.full(len(cuts), -1, dtype=np.int64)
                remap[used] = np.arange(len(used))
                which_cut = np.where(which_cut >= 0, remap[which_cut], -1)
                cuts = [cuts[i] for i in used.tolist()]
                angles = [angles[i] for i in used.tolist()]
            metrics = measure_cuts(cuts, angles, rule, scale)
            ex.extra["unique_cuts"] = len(cuts)
            ex.extra["imaged_sites"] = int((which_cut >= 0).sum())
            if tile:
                cut_keys = frozenset(
                    (c, round(a, 1) % 180.0) for c, a in zip(cuts, angles, strict=True)
                )
        judged = np.isfinite(sites.pitch)  # the order rules judge every finite pitch
        if which_cut is not None:
            judged |= which_cut >= 0
        ex.judged_nm = float((sites.u1 - sites.u0)[judged].sum()) + tips.judged_nm + alone.judged_nm
        add_tip_counts(ex, tips)
        if not tile:
            arrays = find_arrays(lattice)
            verdicts = judge_arrays(arrays, rule, scale)
            regions.extend(Region(f) for f in verdicts.findings)
            add_array_counts(ex, verdicts)
            clip_findings = settled_clips(clip_findings, arrays, verdicts)
        regions.extend(Region(f) for f in clip_findings)
        regions.extend(
            classify_layer(
                sites,
                rule,
                scale,
                grid_nm,
                metrics,
                which_cut,
                cuts,
                angles,
                tile_nm=region_nm if tile else None,
                defer_hints=tile,
            )
        )
        stats.append(
            LayerStats(
                rule.name,
                rule.source,
                ex.shapes,
                ex,
                time.perf_counter() - t0,
                cut_keys,
                lattice if tile else None,
            )
        )
    tick("done", total)
    return regions, stats


def settled_clips(findings: list[Finding], arrays, verdicts: ArrayVerdicts) -> list[Finding]:
    """A layer's clip findings once its arrays are known: those on array members
    settled by :func:`judge.arrays.edge_findings`, the rest as they are."""
    group = [f for f in findings if f.context == "group"]
    centres = np.array([f.cut_origin_nm for f in group], dtype=np.float64).reshape(-1, 2)
    ids = member_arrays(centres, arrays)
    kept = [f for f in findings if f.context != "group"]
    kept += [f for f, a in zip(group, ids.tolist(), strict=True) if a < 0]
    return kept + edge_findings(
        [f for f, a in zip(group, ids, strict=True) if a >= 0], ids[ids >= 0], verdicts
    )


def add_tip_counts(ex: ExtractStats, v: TipVerdicts) -> None:
    """Count a layer's line ends into its stats: found, imaged, and not judged."""
    for key, n in (
        ("line_ends", v.ends),
        ("line_ends_judged", v.judged),
        ("line_ends_nothing_in_reach", v.open_by_distance),
        ("line_ends_not_manhattan", v.not_manhattan),
    ):
        if n:
            ex.extra[key] = ex.extra.get(key, 0) + n


def add_array_counts(ex: ExtractStats, v: ArrayVerdicts) -> None:
    """Count what the arrays of a layer gave into its stats; their members' edges
    are judged."""
    ex.judged_nm += v.judged_nm
    ex.extra["arrays"] = ex.extra.get("arrays", 0) + v.arrays
    ex.extra["array_features"] = ex.extra.get("array_features", 0) + v.members
    ex.extra["compact_not_in_array"] = ex.extra.get("compact_not_in_array", 0) + v.isolated
    if v.orders_only:
        ex.extra["arrays_orders_only"] = ex.extra.get("arrays_orders_only", 0) + v.orders_only


def require_layers(
    deck: Deck, path: Path, cells: Sequence[str], by_layer: dict, present: Sequence
) -> None:
    """Refuse (LayoutError, exit 2) a scan in which a deck layer not marked
    ``optional`` has no shapes: a layer map that does not match the layout
    would otherwise pass every scan."""
    from pitchguard.errors import LayoutError

    missing = [r for r in deck.layers if not r.optional and not by_layer.get((r.layer, r.datatype))]
    if not missing:
        return
    names = ", ".join(f"{r.name} ({r.source})" for r in missing)
    has = ", ".join(f"{lay}/{dt}" for lay, dt in present) or "no shapes on any layer"
    where = "cell " + ", ".join(cells) if cells else "the layout"
    raise LayoutError(
        f"{path}: deck layers with no shapes in {where}: {names}; the file has {has} "
        "(fix the deck's source numbers, or mark the layer optional = true)"
    )


UNTILED_ADVICE = (
    "scan it tiled (without --untiled: tiles never hold the whole layout; "
    "--max-memory-mb and fewer --jobs bound them), or a --region at a time"
)


def scan_layout(
    path: str | Path,
    deck: Deck,
    cell: str | None = None,
    region_um: tuple[float, float, float, float] | None = None,
    max_shapes: int = DEFAULT_MAX_SHAPES,
    progress: Progress | None = None,
    read_timeout_s: float | None = None,
    cells: bool = False,
) -> ScanResult:
    """Read ``path`` (in a child process) and scan it with ``deck``; with ``cells``
    name the cell of every finding too (run.cells, in another child process).

    Memory running out is one line (LayoutError): a deck whose own images need
    more than this process may use is refused before the layout is read."""
    from pitchguard.run.budget import machine_budget, memory_guard
    from pitchguard.run.plan import check_deck_memory

    t0 = time.perf_counter()
    total, room, words = machine_budget()
    check_deck_memory(deck, min(v for v in (total, room, math.inf) if v is not None), words)
    warnings: list[str] = []
    if progress:
        progress("reading layout", 0, 3 * len(deck.layers))
    with memory_guard(path, "reading the layout untiled", UNTILED_ADVICE):
        layout = read_layout_isolated(
            path,
            [(r.layer, r.datatype) for r in deck.layers],
            cell=cell,
            max_shapes=max_shapes,
            warnings=warnings,
            **({"timeout_s": read_timeout_s} if read_timeout_s else {}),
        )
    require_layers(deck, Path(path), layout.cells, layout.shapes_by_layer, layout.present)
    region_nm = tuple(v * 1000.0 for v in region_um) if region_um else None
    # Linear algebra on one thread, as in a tiled scan's workers: the products are
    # small (threads cost more than they give), and the same thread count rounds
    # alike, so the whole scan's numbers equal a tiled scan's bit for bit.
    what = f"scanning {layout.shape_count:,} shapes untiled, in one process"
    with memory_guard(path, what, UNTILED_ADVICE), threadpool_limits(1):
        regions, stats = scan_polygons(layout.layers, deck, layout.grid_nm, region_nm, progress)
        findings = sort_findings([r.finding for r in regions])
    cmap = None
    if cells:
        from pitchguard.layout.isolated import run_isolated
        from pitchguard.run.cells import finding_windows
        from pitchguard.run.tasks import holders_task

        windows, regions, lay = finding_windows(findings, deck)
        layers = [(r.layer, r.datatype) for r in deck.layers]
        cmap = run_isolated(
            holders_task,
            (str(path), cell, layers, windows, regions, lay),
            Path(path),
            "finding the cells of findings",
            **({"timeout_s": read_timeout_s} if read_timeout_s else {}),
        )
    return ScanResult(findings, stats, layout, warnings, time.perf_counter() - t0, None, cmap)
