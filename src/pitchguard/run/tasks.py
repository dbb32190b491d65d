"""Worker-side tasks of a tiled scan, with their per-process state (opened layout, parsed deck)."""

from __future__ import annotations

import functools
import os
from dataclasses import replace
from pathlib import Path
from typing import NamedTuple

from pitchguard.deck import Deck, parse_deck
from pitchguard.errors import LayoutError
from pitchguard.geometry.sites import SITE_CELL_NM
from pitchguard.judge.hint_batch import hint_texts
from pitchguard.judge.hints import give_grating_passes, take_grating_passes
from pitchguard.judge.regions import Region
from pitchguard.layout.flat_counts import PIECES_PER_SHAPE, edge_text
from pitchguard.layout.polygons import PolygonSet, snap_to_grid
from pitchguard.optics.cut_images import give_imaged, take_imaged
from pitchguard.run.budget import apply_worker_budget, out_of_budget, tile_advice_words
from pitchguard.run.plan import CellBrief, RefBrief, Structure
from pitchguard.run.scan import LayerStats, scan_polygons

_OPEN: dict = {}


def _index(lib, fmt: str, tops, layers):
    """The hierarchy index and structure of an opened library."""
    from pitchguard.layout.hierarchy import HierarchyQuery

    q = HierarchyQuery(lib, tops, layers, lib.unit * 1e9)
    st = Structure(
        lib.unit, lib.precision * 1e9, tuple(c.name for c in tops), q.bounding_box(), fmt
    )
    return q, st


def _open(path: str, cell: str | None, layers):
    """The hierarchy index and structure, opened once per worker process (the library
    itself is let go: the index holds what tiles need)."""
    from pitchguard.layout.reader import open_layout

    key = (path, os.path.getmtime(path), cell, tuple(layers))
    if key not in _OPEN:
        _OPEN.clear()  # one layout per worker at a time
        _OPEN[key] = _index(*open_layout(Path(path), set(layers), cell), layers)
    return _OPEN[key]


@functools.lru_cache(maxsize=4)
def _deck(text: str) -> Deck:
    """The deck, parsed once per worker process."""
    return parse_deck(text)


def structure_task(path: str, cell: str | None, layers, max_shapes: int) -> Structure:
    """Open the layout, count its flat shapes from the hierarchy and refuse too many."""
    from pitchguard.layout.flat_counts import blame
    from pitchguard.layout.reader import count_shapes_within, layers_in_file, open_layout

    lib, fmt, tops = open_layout(Path(path), set(layers), cell)
    counts = count_shapes_within(Path(path), tops, set(layers), max_shapes, lib.unit * 1e9)
    by_layer = counts.shapes
    present = layers_in_file(lib, fmt, Path(path)) if not all(by_layer.values()) else ()
    q, st = _index(lib, fmt, tops, layers)
    cells, tops = _brief(q)
    return replace(
        st,
        shapes=sum(by_layer.values()),
        cells_brief=cells,
        tops_brief=tops,
        shapes_by_layer=tuple(sorted(by_layer.items())),
        present=present,
        pieces=counts.pieces,
        largest_pieces=counts.largest_pieces,
        largest_why=blame(counts, pieces=True),
    )


def _brief(q) -> tuple[tuple, tuple]:
    """The hierarchy in brief (see :attr:`Structure.cells_brief`)."""
    number = {name: k for k, name in enumerate(q.cells)}  # a cell comes after its children
    cells = []
    for cd, own in zip(q.cells.values(), q.own_counts.tolist(), strict=True):
        refs = []
        for child, aff, (kind, data) in cd.refs:
            px = py = 0.0
            cols = rows = 0
            if kind == "lattice":
                cols, rows, v1, v2 = data
                count = cols * rows
                a1, a2 = aff.m @ v1, aff.m @ v2
                if abs(a1[1]) < 1e-6 and abs(a2[0]) < 1e-6:
                    px, py = abs(a1[0]), abs(a2[1])
                elif abs(a1[0]) < 1e-6 and abs(a2[1]) < 1e-6:
                    px, py = abs(a2[0]), abs(a1[1])
                    cols, rows = rows, cols
            else:
                count = len(data) if kind == "list" else 1
            refs.append(RefBrief(number[child], count, float(px), float(py), cols, rows))
        cells.append(CellBrief(own, tuple(refs)))
    return tuple(cells), tuple(number[name] for name in q.tops)


@out_of_budget
def keys_task(path: str, cell: str | None, layers, tiles, halo: float) -> list[bytes]:
    """Content keys of ``tiles`` (see :meth:`HierarchyQuery.content_key`)."""
    import faulthandler

    faulthandler.disable()
    q, _ = _open(path, cell, layers)
    # Site pieces are cut on a global grid (geometry.sites.SITE_CELL_NM): tiles can
    # stand in for each other only at the same phase of that grid.
    return [
        (
            q.content_key((x0 - halo, y0 - halo, x1 + halo, y1 + halo), (x0, y0)),
            round(x0 % SITE_CELL_NM, 3),
            round(y0 % SITE_CELL_NM, 3),
        )
        for x0, y0, x1, y1 in tiles
    ]


class TileResult(NamedTuple):
    """What a tile task returns: the tile's flagged regions (those near its
    border with what a merge needs), counts per deck layer, and the cuts this
    worker imaged since its last tile (for the tasks that start later)."""

    regions: list[Region]
    stats: list[LayerStats]
    imaged: list


@out_of_budget
def tile_task(
    path: str,
    deck_text: str,
    cell: str | None,
    tile,
    halo: float,
    max_shapes: int | None = None,
    imaged=(),
):
    """Scan one tile (see :class:`TileResult`).

    A tile holding more than ``max_shapes`` shapes, or edges making more than
    ``PIECES_PER_SHAPE * max_shapes`` site pieces (counted from the hierarchy
    before any is read: a corrupt or extreme array can pile millions of shapes
    into one tile, a magnified reference kilometres of edge) is refused with a
    LayoutError rather than run out of memory.
    ``imaged``: cuts other workers imaged (see optics.cut_images.take_imaged); the cuts
    this worker imaged since its last tile are returned for the others.
    """
    import faulthandler

    faulthandler.disable()
    deck = _deck(deck_text)
    layers = [(r.layer, r.datatype) for r in deck.layers]
    q, st = _open(path, cell, layers)
    x0, y0, x1, y1 = tile
    window = (x0 - halo, y0 - halo, x1 + halo, y1 + halo)
    if max_shapes is not None:
        n, pieces = q.work(window)
        if n > max_shapes:
            raise LayoutError(
                f"{path}: the tile at ({x0 / 1000:g}, {y0 / 1000:g}) um holds up to {n:,} shapes, "
                f"more than a worker's memory budget allows ({max_shapes:,})"
                f"{tile_advice_words(_densest(q, n))}"
            )
        if not pieces <= PIECES_PER_SHAPE * max_shapes:
            raise LayoutError(
                f"{path}: the tile at ({x0 / 1000:g}, {y0 / 1000:g}) um reads shapes of "
                f"{edge_text(pieces)}, more than a worker's memory budget allows "
                f"({PIECES_PER_SHAPE * max_shapes:,}): use a larger --max-memory-mb or a --region"
            )
    polys = q.query(window)
    for ps in polys.values():  # onto the database grid, exactly as read_layout does
        snap_to_grid(ps, st.grid_nm)
    # Hints are left to the caller: it makes each distinct one once (a hint does not
    # depend on where the finding is); a region merged across tiles keeps its worst
    # part's.
    give_imaged(imaged)
    regions, stats = scan_polygons(polys, deck, st.grid_nm, region_nm=tuple(tile), tile=True)
    # Regions with no site near the border are final here: what only a merge
    # needs is dropped before they travel (half the bytes of such regions).
    regions = [r if r.on_border else r.finished() for r in regions]
    return TileResult(regions, stats, take_imaged())


def _densest(q, n: int) -> str:
    """The cell holding the most shapes of its own on the deck layers, in words, where
    they are at least half of the ``n`` a tile holds (else the tile's shapes come
    from placements: no one cell to name)."""
    if not len(q.own_counts) or 2 * int(q.own_counts.max()) < n:
        return ""
    k = int(q.own_counts.argmax())
    name = repr(list(q.cells)[k])
    name = name if len(name) <= 80 else name[:80] + "…"
    return f"the layout's densest cell, {name}, holds {int(q.own_counts[k]):,} shapes of its own"


def hints_task(deck_text: str, keys: list[tuple], judged=()) -> tuple[dict, list]:
    """Hint texts for ``(layer name, hint key)`` pairs, made together (judge.hint_batch).

    ``judged``: ideal gratings other workers judged (judge.hints.take_grating_passes);
    returns the texts and the gratings judged here.
    """
    deck = _deck(deck_text)
    rules = {r.name: r for r in deck.layers}
    give_grating_passes(judged)
    # Looked up by repr: a key may hold nan, which equals nothing once pickled.
    made = hint_texts([(rules[name], key) for name, key in keys])
    texts = {(name, repr(key)): t for (name, key), t in zip(keys, made, strict=True)}
    return texts, take_grating_passes()


@out_of_budget
def clips_task(path: str, cell: str | None, layers, grid_nm: float, windows):
    """Polygons (nm, on the grid) meeting any of ``windows``, per layer, each once."""
    q, _ = _open(path, cell, layers)
    found: dict = {ld: {} for ld in layers}
    for w in windows:
        for ld, ps in q.query(tuple(w)).items():
            for pts in snap_to_grid(ps, grid_nm):
                found[ld].setdefault(pts.tobytes(), pts)
    return {ld: PolygonSet.from_arrays(v.values()) for ld, v in found.items()}


def init_worker() -> None:
    """Set up a local worker process.

    Workers leave signals to the main process: forked, they would inherit its
    SIGTERM handler and print a traceback when the pool is stopped.  Each
    worker runs its linear algebra on one thread: the workers already fill
    the cores, and the numerical library's own threads on top of them
    oversubscribe them.  dask.distributed
    workers started by a nanny get the same by default.
    """
    import signal

    from threadpoolctl import threadpool_limits

    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    threadpool_limits(1)
    apply_worker_budget()
    # What the parent imaged or judged before the fork is not this scan's to share.
    take_imaged()
    take_grating_passes()


@out_of_budget
def holders_task(path: str, cell: str | None, layers, windows, regions, lay):
    """The cells of findings (run.cells.holders_of): ``windows`` and ``regions``
    (n, 4) nm and each one's layer as a number into ``layers``."""
    from pitchguard.layout.walks import deep_enough
    from pitchguard.run.cells import holders_of

    q, _ = _open(path, cell, layers)
    with deep_enough():  # the holders' walk recurses a level at a time
        return holders_of(q, windows, regions, [tuple(layers[k]) for k in lay.tolist()])
