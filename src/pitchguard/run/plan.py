"""Tile planning: the tile size from a memory model and a cost model of repeated arrays."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

from pitchguard.deck import Deck
from pitchguard.errors import DeckError, LayoutError
from pitchguard.geometry.sites import SITE_CELL_NM
from pitchguard.layout.flat_counts import PIECES_PER_SHAPE, edge_text

SPARSE_TILES_MIN = 10_000


SPARSE_TILES_PER_SHAPE = 10
"""A tiling of more than SPARSE_TILES_MIN tiles and SPARSE_TILES_PER_SHAPE tiles per
shape is refused: mutated files with one vertex far out made 1.46 million 10 um
tiles for 245 shapes (ran for more than 15 minutes) and 70,509 for 277 (more than
2 minutes: a polygon read whole into every tile it crosses makes each distinct)."""


DEFAULT_TILED_MAX_SHAPES = 2_000_000_000
"""Tiled scans hold one tile at a time per worker, so they accept far larger
layouts than a flattening scan; the limit still refuses absurd arrays (a
10^5 x 10^5 array is 10^10 shapes) before any work is done."""


class RefBrief(NamedTuple):
    """A reference in brief: the child's number, its instances, and for an
    axis-aligned array its pitches (nm) and counts (0 for anything else)."""

    child: int
    instances: int
    pitch_x_nm: float
    pitch_y_nm: float
    columns: int
    rows: int


class CellBrief(NamedTuple):
    """A cell in brief: its own shapes on the deck layers and its references."""

    own_shapes: int
    refs: tuple[RefBrief, ...]


@dataclass(frozen=True)
class Structure:
    """What the guarded first read learns about a layout."""

    unit_m: float
    grid_nm: float
    cells: tuple[str, ...]
    extent_nm: tuple[float, float, float, float] | None
    fmt: str
    shapes: int = 0  # flat shapes on the deck layers, counted from the hierarchy
    # The hierarchy in brief, for planning tiles: every cell (children first)
    # and the numbers of the top cells.
    cells_brief: tuple[CellBrief, ...] = ()
    tops_brief: tuple[int, ...] = ()
    shapes_by_layer: tuple[tuple[tuple[int, int], int], ...] = ()  # flat shapes per deck layer
    present: tuple[tuple[int, int], ...] = ()  # layers in the file, when a deck layer has none
    pieces: float = 0.0  # site pieces of every flat shape's edges (layout.flat_counts)
    largest_pieces: float = 0.0  # site pieces of the largest flat shape (a bound)
    largest_why: str = ""  # what makes shapes large (the most magnified reference), for messages


def tile_halo_nm(deck: Deck) -> float:
    """Shapes read around a tile: what its sites' cuts and probes reach, and what the
    lattices of its compact features depend on (geometry.lattice.lattice_sites)."""
    from pitchguard.geometry.lattice import HALO_RANGES, SQRT2

    scale = deck.scale_to_wafer
    return max(
        max(
            2 * r.interaction_range_nm + r.min_run_nm,
            HALO_RANGES * r.interaction_range_nm + 2 * SQRT2 * r.compact_max_nm,
        )
        / scale
        for r in deck.layers
    )


def halo_words(deck: Deck) -> str:
    """What sets the halo (:func:`tile_halo_nm`), for messages: the layer whose
    interaction range, in the exposure's lambda/NA, reaches furthest."""
    scale = deck.scale_to_wafer
    rule = max(deck.layers, key=lambda r: r.interaction_range_nm / scale)
    lna = rule.exposure.lambda_over_na_nm
    return (
        f"set by the interaction range of layer {printable_name(rule.name)}, "
        f"{rule.interaction_range_nm / 1000:,.4g} um: {rule.interaction_range_nm / lna:.3g} "
        f"x its lambda/NA of {lna / 1000:,.4g} um"
    )


def printable_name(name: str) -> str:
    """A deck name for a message: quoted, control characters escaped, cut to 80."""
    shown = repr(str(name))
    return shown if len(shown) <= 80 else shown[:80] + "…"


def clip_extent(extent, region):
    """``extent`` within ``region`` (None: all of it)."""
    if region is None:
        return tuple(extent)
    return (
        max(extent[0], region[0]),
        max(extent[1], region[1]),
        min(extent[2], region[2]),
        min(extent[3], region[3]),
    )


def tiles_for(extent, tile_nm: float, region=None):
    """Tiles covering ``extent``, aligned to multiples of ``tile_nm``, clipped to ``region``."""
    x0, y0, x1, y1 = clip_extent(extent, region)
    if x0 > x1 or y0 > y1:
        return []
    i0, i1 = math.floor(x0 / tile_nm), math.floor(x1 / tile_nm)
    j0, j1 = math.floor(y0 / tile_nm), math.floor(y1 / tile_nm)
    tiles = [
        (i * tile_nm, j * tile_nm, (i + 1) * tile_nm, (j + 1) * tile_nm)
        for j in range(j0, j1 + 1)
        for i in range(i0, i1 + 1)
    ]
    if region is None:
        return tiles
    rx0, ry0, rx1, ry1 = region
    return [(max(a, rx0), max(b, ry0), min(c, rx1), min(d, ry1)) for a, b, c, d in tiles]


# Memory model of a scan: a worker holds the opened file and one tile; the parent
# holds the findings.  Fitted roughly to worker peaks seen on the bench_scale chip
# (about 110, 300 and 520 MB for 30, 70 and 210 um tiles); not validated further.
WORKER_BASE_MB = 150.0


PARENT_BASE_MB = 300.0


KB_PER_TILE_SHAPE = 8.0


DENSITY_MARGIN = 4.0
"""Shapes are rarely spread evenly: a tile is planned for this many times the
layout's mean shape density."""


MAX_AUTO_TILE_UM = 50.0


SMALL_LAYOUT_SHAPES = 20_000

SPLIT_SMALL_SHAPES = 2_000
"""A small layout with at least this many shapes is split between the workers."""


# Costs of tiling in shapes-scanned equivalents: a tile's content key, and a
# distinct tile's fixed setup (fitted on the benchmark chip; DEVELOPERS.md).
KEY_COST_SHAPES = 1.3


TILE_COST_SHAPES = 340.0


DEFAULT_WORKER_MB = 2048.0
"""A worker's memory budget when no --max-memory-mb is given, or its share of
the machine's memory where that is less (:func:`machine_worker_mb`)."""


def machine_worker_mb(jobs: int) -> tuple[float | None, str]:
    """Each of ``jobs`` local workers' share (MB) of what the machine allows a scan
    given no --max-memory-mb (run.budget.machine_budget): the parent's base set
    aside from the total and the rest split, at most what one process may add;
    None where the machine does not say.  Also the budget in words."""
    from pitchguard.run.budget import machine_budget

    total, room, words = machine_budget()
    share = None if total is None else (total - PARENT_BASE_MB) / max(1, jobs)
    if room is not None:
        share = room if share is None else min(share, room)
    return share, words


def _per_worker_mb(max_memory_mb: float | None, jobs: int, distributed: bool) -> float:
    if max_memory_mb is None:
        share = None if distributed else machine_worker_mb(jobs)[0]
        return DEFAULT_WORKER_MB if share is None else min(DEFAULT_WORKER_MB, share)
    return (max_memory_mb - (0 if distributed else PARENT_BASE_MB)) / max(1, jobs)


def worker_share_mb(max_memory_mb: float | None, jobs: int, distributed: bool = False):
    """Each local worker's share of the memory (MB; run.budget enforces it): of
    --max-memory-mb, or without it of the machine's (:func:`machine_worker_mb`);
    None: workers on a cluster (their own machines' business), or a machine
    that does not say."""
    if distributed:
        return None
    if max_memory_mb is None:
        return machine_worker_mb(jobs)[0]
    return _per_worker_mb(max_memory_mb, jobs, distributed)


def budget_words(max_memory_mb: float | None, jobs: int, distributed: bool = False) -> str:
    """The memory a scan plans within, in words for a message."""
    if max_memory_mb is not None:
        return f"--max-memory-mb {max_memory_mb:g} for {jobs} worker{'s' if jobs > 1 else ''}"
    share, words = (None, "") if distributed else machine_worker_mb(jobs)
    if share is None or share >= DEFAULT_WORKER_MB:
        return f"a worker's {DEFAULT_WORKER_MB:g} MB (no --max-memory-mb was given)"
    return f"a worker's {share:,.0f} MB share of {words} (no --max-memory-mb was given)"


def share_words(max_memory_mb: float | None, jobs: int, share: float | None) -> str:
    """A worker's enforced share (:func:`worker_share_mb`) in words for a message."""
    if share is None:
        return "no bound"
    if max_memory_mb is not None:
        return f"a worker's {share:,.0f} MB share of --max-memory-mb {max_memory_mb:g}"
    words = machine_worker_mb(jobs)[1]
    return f"a worker's {share:,.0f} MB share of {words} (no --max-memory-mb was given)"


ANCHOR_MATRICES = 3
"""A layer's anchor is imaged as a 2-D square array (optics.resist2d.anchor_threshold_2d)
through the n x n cross coefficients of its n diffraction orders (complex, 16
bytes an entry): the matrix, its eigenvectors and the eigen-solver's
workspace hold about this many such matrices at once."""


def deck_memory_mb(deck: Deck) -> tuple[float, str]:
    """The memory (MB) one process needs for the deck's largest image that does not
    depend on the layout, and what it is (empty: none worth naming): an anchor's
    2-D cell grows with the square of its orders, i.e. with (pitch / (lambda/NA))^4."""
    from pitchguard.optics.aerial2d import exposure_orders

    worst, why = 0.0, ""
    for rule in deck.layers:
        anchor = rule.anchor
        if anchor is None:
            continue
        p = anchor.pitch_nm
        n = len(exposure_orders(rule.exposure, p, p))
        mb = ANCHOR_MATRICES * 16.0 * n * n / 2**20
        if mb > worst:
            lna = rule.exposure.lambda_over_na_nm
            worst = mb
            why = (
                f"layer {printable_name(rule.name)}: its anchor pitch of {p:,.6g} nm is "
                f"{p / lna:.3g} lambda/NA ({lna:,.6g} nm), imaged as a 2-D cell of {n:,} "
                "diffraction orders"
            )
    return worst, why


def check_deck_memory(deck: Deck, per_process_mb: float | None, budget: str) -> None:
    """Refuse (DeckError) a deck whose layout-independent images alone need more than
    a process may use (``per_process_mb``; None: no bound), before any work."""
    if per_process_mb is None:
        return
    mb, why = deck_memory_mb(deck)
    if mb > per_process_mb:
        raise DeckError(
            f"{deck.path or '<deck>'}: {why}, about {mb:,.0f} MB of imaging matrices, over "
            f"{budget}: give the anchor at the layer's dense minimum pitch (a few lambda/NA)"
        )


def tile_shape_limit(max_memory_mb: float | None, jobs: int, distributed: bool = False) -> int:
    """The most shapes one tile may hold within a worker's budget (the memory model)."""
    per_worker = _per_worker_mb(max_memory_mb, jobs, distributed)
    return max(1, int((per_worker - WORKER_BASE_MB) * 1024.0 / KB_PER_TILE_SHAPE))


def tile_piece_limit(max_memory_mb: float | None, jobs: int, distributed: bool = False) -> float:
    """The most edge pieces (layout.flat_counts) one tile may hold within a worker's
    budget: the shape limit at PIECES_PER_SHAPE pieces a shape."""
    return float(PIECES_PER_SHAPE) * tile_shape_limit(max_memory_mb, jobs, distributed)


def check_largest_shape(path, st: Structure, limit: float, budget: str) -> None:
    """Refuse a layout whose largest shape alone is more work than a tile may hold
    (``limit`` edge pieces): every tile it meets reads all of it."""
    if not st.largest_pieces <= limit:  # also refuses nan
        raise LayoutError(
            f"{path}: one shape alone, once placed, is {edge_text(st.largest_pieces)}, over "
            f"the {limit:,.0f} pieces a tile may hold within {budget}{st.largest_why}"
        )


def plan_tiles(
    st: Structure,
    halo_nm: float,
    jobs: int,
    max_memory_mb: float | None,
    tile_um: float | None,
    distributed: bool = False,
    path=None,
    halo_why: str = "",
) -> tuple[float, int]:
    """Tile size (nm) and local worker count for a memory cap (MB, all processes).

    Without a cap each worker may use about 2 GB, less where the machine's
    share (:func:`machine_worker_mb`) is less.  With one, the parent's share
    is set aside and the rest split between the workers.  Either way workers
    are dropped while even the smallest tile does not fit, and a layout whose
    smallest tile does not fit one worker is refused (LayoutError), as is one
    whose largest shape alone is more than a tile may hold.  ``halo_why``:
    what sets the halo (:func:`halo_words`), for those messages.
    """
    t, n = _plan_tiles(st, halo_nm, jobs, max_memory_mb, tile_um, distributed, path, halo_why)
    check_largest_shape(
        path or "layout",
        st,
        tile_piece_limit(max_memory_mb, n, distributed),
        budget_words(max_memory_mb, n, distributed),
    )
    return t, n


SMALLER_TILE_SAVES = 0.5
"""A smaller --tile-um is advice only where the smallest tile's window is less than
this share of the planned tile's (the halo around each tile is read whatever
its size)."""


def tile_memory_words(tile_nm: float, halo_nm: float, halo_why: str = "") -> str:
    """What drives a tile's memory where a smaller tile cannot help much, in words
    (empty where it can): the tile is the smallest, or its halo dominates."""
    why = f" ({halo_why})" if halo_why else ""
    if tile_nm <= SITE_CELL_NM:
        return (
            f"tiles are already the smallest, {SITE_CELL_NM / 1000:g} um, each read with a "
            f"halo of {halo_nm / 1000:,.4g} um{why}"
        )
    if ((SITE_CELL_NM + 2 * halo_nm) / (tile_nm + 2 * halo_nm)) ** 2 > SMALLER_TILE_SAVES:
        return (
            f"each {tile_nm / 1000:g} um tile is read with a halo of {halo_nm / 1000:,.4g} um"
            f"{why}, so smaller tiles save little"
        )
    return ""


def _window_words(st: Structure, halo_nm: float, shapes: float, halo_why: str) -> str:
    """Why even the smallest tile needs the memory it does: its window."""
    w = (SITE_CELL_NM + 2 * halo_nm) / 1000.0
    why = f" ({halo_why})" if halo_why else ""
    return (
        f": even a {SITE_CELL_NM / 1000:g} um tile is read with a halo of "
        f"{halo_nm / 1000:,.4g} um{why}, a window of {w:,.4g} um holding up to about "
        f"{shapes:,.0f} of the layout's {st.shapes:,} shapes"
    )


def _plan_tiles(st, halo_nm, jobs, max_memory_mb, tile_um, distributed, path=None, halo_why=""):
    if st.extent_nm:
        x0, y0, x1, y1 = st.extent_nm
        area = max((x1 - x0) * (y1 - y0), 1.0)
        density = DENSITY_MARGIN * st.shapes / area  # shapes per nm^2
    else:
        density = 0.0

    def window_shapes(t_nm: float) -> float:
        # A window holds no more than the whole layout, however dense its shapes.
        return min(density * (t_nm + 2 * halo_nm) ** 2, float(st.shapes))

    def worker_mb(t_nm: float) -> float:
        return WORKER_BASE_MB + KB_PER_TILE_SHAPE / 1024.0 * window_shapes(t_nm)

    smallest = worker_mb(SITE_CELL_NM)
    n = jobs
    if max_memory_mb is None:
        if not distributed:
            while n > 1 and (machine_worker_mb(n)[0] or math.inf) < smallest:
                n -= 1
            share, words = machine_worker_mb(n)
            if share is not None and share < smallest:
                raise LayoutError(
                    f"{path or 'layout'}: this scan needs about "
                    f"{math.ceil(PARENT_BASE_MB + smallest):,} MB or more, over {words}"
                    f"{_window_words(st, halo_nm, window_shapes(SITE_CELL_NM), halo_why)}; "
                    "scan a --region at a time, or on a machine with more memory"
                )
    else:
        n = 1 if distributed else jobs
        while n > 1 and PARENT_BASE_MB + n * smallest > max_memory_mb:
            n -= 1
        if _per_worker_mb(max_memory_mb, n, distributed) < smallest:
            need = PARENT_BASE_MB + smallest
            raise LayoutError(
                f"--max-memory-mb {max_memory_mb:g} is too small for this layout: "
                f"a scan needs about {math.ceil(need)} MB or more"
                f"{_window_words(st, halo_nm, window_shapes(SITE_CELL_NM), halo_why)}"
            )
    per_worker = _per_worker_mb(max_memory_mb, n, distributed)
    jobs = n
    if tile_um is not None:
        t = max(SITE_CELL_NM, math.ceil(tile_um * 1000.0 / SITE_CELL_NM) * SITE_CELL_NM)
        return t, jobs
    if st.extent_nm and st.shapes <= SMALL_LAYOUT_SHAPES:
        # Small layouts: one tile (up to four, by alignment) is fastest, and a
        # sparse layout of huge extent does not turn into millions of tiles;
        # with several workers and enough shapes to keep them busy (unique
        # geometry costs about a millisecond a shape), about two tiles per worker.
        x0, y0, x1, y1 = st.extent_nm
        side = max(x1 - x0, y1 - y0, SITE_CELL_NM)
        if jobs > 1 and st.shapes >= SPLIT_SMALL_SHAPES:
            side = min(side, math.sqrt((x1 - x0) * (y1 - y0) / (2 * jobs)))
        return math.ceil(max(side, SITE_CELL_NM) / SITE_CELL_NM) * SITE_CELL_NM, jobs
    sizes = [
        t
        for t in (
            k * SITE_CELL_NM for k in range(1, int(MAX_AUTO_TILE_UM * 1000 // SITE_CELL_NM) + 1)
        )
        if t == SITE_CELL_NM or worker_mb(t) <= per_worker
    ]
    return min(sizes, key=lambda t: (tile_work(st, t, halo_nm), -t)), jobs


TILE_ADVICE_RATIO = 3.0
"""A chosen tile size whose estimated work is this many times the automatic
one's is worth a note (the estimate, :func:`tile_work`, is rough: within a
factor of two of measured times, see DEVELOPERS.md)."""


def tile_advice(
    st: Structure,
    halo_nm: float,
    tile_nm: float,
    jobs: int,
    max_memory_mb: float | None,
    distributed: bool = False,
    tile_um: float | None = None,
) -> str | None:
    """A note when the tile size asked for repeats the layout's arrays much worse
    than the size the scan would choose (tiles that repeat are scanned once).
    ``tile_um``: the size asked for, named when rounding changed it."""
    if not st.extent_nm or st.shapes <= SMALL_LAYOUT_SHAPES:
        return None
    auto_nm, _ = plan_tiles(st, halo_nm, jobs, max_memory_mb, None, distributed)
    ratio = tile_work(st, tile_nm, halo_nm) / max(tile_work(st, auto_nm, halo_nm), 1e-9)
    if ratio < TILE_ADVICE_RATIO:
        return None
    asked = ""
    if tile_um is not None and abs(tile_um * 1000.0 - tile_nm) > 1e-6:
        asked = f" (--tile-um {tile_um:g}, rounded up to whole {SITE_CELL_NM / 1000:g} um)"
    return (
        f"tiles of {tile_nm / 1000:g} um{asked} meet this layout's arrays at many "
        f"phases: about {ratio:.0f}x the work of {auto_nm / 1000:g} um tiles, the scan's "
        "choice (an estimate; leave out --tile-um to use it)"
    )


def phase_fraction(pitch: float, count: int, t: float) -> float:
    """Of the tiles (size ``t``) along an array of ``count`` at ``pitch``, the share
    that differ: the tile grid meets the array at ``pitch / gcd(t, pitch)`` phases
    (a fact of arithmetic), plus one for the array's ends; 1 when the array fits in
    one tile."""
    span = count * pitch / t
    if span <= 1.0:
        return 1.0
    g = math.gcd(int(round(t)), int(round(pitch))) or 1
    return min(span, pitch / g + 1.0) / span


def tile_work(st: Structure, t: float, halo_nm: float = 0.0) -> float:
    """Rough cost of tile size ``t`` (nm), in shapes-scanned equivalents.

    Shapes in distinct tiles: every cell's own shapes, plus each reference's
    child work times its instances, times, for an axis-aligned array, the
    share of distinct tiles along each axis (:func:`phase_fraction`), so
    arrays nested in arrays multiply.  Scanned with their halo, plus a cost per
    tile (its content key) and per distinct tile (setting up its scan).
    """
    work: list[float] = []
    for own, refs in st.cells_brief:
        w = float(own)
        for child, count, px, py, cols, rows in refs:
            share = 1.0
            if px > 0 and py > 0:
                share = phase_fraction(px, cols, t) * phase_fraction(py, rows, t)
            w += count * work[child] * share
        work.append(w)
    scanned = sum(work[k] for k in st.tops_brief)
    if not st.extent_nm:
        return scanned
    x0, y0, x1, y1 = st.extent_nm
    tiles = ((x1 - x0) / t + 1) * ((y1 - y0) / t + 1)
    distinct = max(1.0, tiles * min(1.0, scanned / max(st.shapes, 1)))
    halo = ((t + 2 * halo_nm) / t) ** 2
    return scanned * halo + KEY_COST_SHAPES * tiles + TILE_COST_SHAPES * distinct


MAX_TILES = 2_000_000
"""More tiles than this means coordinates far out of any mask's range (a corrupt
file) or a tile size far too small for the chip: refused before any work."""


def check_tile_count(path, extent, region, tile_nm: float, shapes: int = 0) -> None:
    """Refuse tilings too large to be meant: more tiles than MAX_TILES, or a layout
    whose tiles would be mostly empty (a corrupt coordinate far out, say)."""
    if not extent:
        return
    x0, y0, x1, y1 = clip_extent(extent, region)
    if not all(math.isfinite(v) for v in (x0, y0, x1, y1)):
        raise LayoutError(f"{path}: coordinates are not finite numbers")
    n = (math.floor(x1 / tile_nm) - math.floor(x0 / tile_nm) + 1) * (
        math.floor(y1 / tile_nm) - math.floor(y0 / tile_nm) + 1
    )
    if n > MAX_TILES:
        raise LayoutError(
            f"{path}: the layout spans {(x1 - x0) / 1e6:,.1f} x {(y1 - y0) / 1e6:,.1f} mm, "
            f"{n:,} tiles of {tile_nm / 1000:g} um (limit {MAX_TILES:,}): coordinates out of "
            "range, or use a larger --tile-um or a --region"
        )
    if n > SPARSE_TILES_MIN and n > SPARSE_TILES_PER_SHAPE * max(shapes, 1):
        raise LayoutError(
            f"{path}: the layout spans {(x1 - x0) / 1e6:,.4g} x {(y1 - y0) / 1e6:,.4g} mm with "
            f"only {shapes:,} shapes: {n:,} tiles of {tile_nm / 1000:g} um would be almost "
            "all empty (a coordinate may be corrupt); use a larger --tile-um or a --region"
        )
