"""GDSII/OASIS reading: the cells to scan, shape counts from the hierarchy, flat layers."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

from pitchguard.errors import LayoutError
from pitchguard.layout.flat_counts import (
    PIECES_PER_SHAPE,
    FlatCounts,
    blame,
    check_pieces,
    flat_counts,
)
from pitchguard.layout.formats import captured_stderr, sniff_format
from pitchguard.layout.polygons import PolygonSet, snap_to_grid

DEFAULT_MAX_SHAPES = 20_000_000
"""Refuse to flatten more shapes than this (about 5 GB of polygons)."""


@dataclass(frozen=True)
class Layout:
    """What a scan needs from a layout file."""

    path: Path
    format: str  # "gds" or "oas"
    unit_m: float  # user unit in metres
    grid_nm: float  # database unit in nanometres
    cells: tuple[str, ...]  # the top cells scanned
    layers: dict[tuple[int, int], PolygonSet]
    shapes_by_layer: dict = field(default_factory=dict)  # flat shapes per layer read
    # Layer/datatypes in the file, listed only when a layer read has no shapes.
    present: tuple[tuple[int, int], ...] = ()

    @property
    def nm_per_user_unit(self) -> float:
        return self.unit_m * 1e9

    @property
    def shape_count(self) -> int:
        return sum(len(p) for p in self.layers.values())


def _find_cycle(cells) -> list[str] | None:
    """A reference cycle among ``cells`` as a list of names, or None (a depth-first
    walk with its own stack: a reference chain may be thousands deep)."""
    graph = {c.name: [d.name for d in c.dependencies(False) if hasattr(d, "name")] for c in cells}
    state: dict[str, int] = {}  # 1: on the current path, 2: done
    for root in graph:
        if root in state:
            continue
        state[root] = 1
        path = [root]
        stack = [iter(graph[root])]
        while stack:
            for nxt in stack[-1]:
                if state.get(nxt) == 1:
                    return path[path.index(nxt) :] + [nxt]
                if nxt not in state:
                    state[nxt] = 1
                    path.append(nxt)
                    stack.append(iter(graph.get(nxt, ())))
                    break
            else:
                stack.pop()
                state[path.pop()] = 2
    return None


def count_shapes_within(
    path: Path, tops, wanted: set, max_shapes: int, scale_nm: float = 1000.0
) -> FlatCounts:
    """What ``tops`` flatten to on the ``wanted`` layers, from the hierarchy
    (:func:`layout.flat_counts.flat_counts`; ``scale_nm``: nm per user unit).

    Refused (LayoutError): more than ``max_shapes`` shapes in all, or edges making
    more than ``PIECES_PER_SHAPE * max_shapes`` site pieces (a magnified
    reference can turn a few shapes into kilometres of edge), or a repetition
    count out of range.
    """
    counts = flat_counts(path, tops, wanted, scale_nm)
    total = counts.total
    if total > max_shapes:
        raise LayoutError(
            f"{path}: deck layers flatten to {total:,} shapes, over the limit of {max_shapes:,} "
            f"(raise --max-shapes or scan a --region){blame(counts, pieces=False)}"
        )
    check_pieces(
        path,
        counts,
        PIECES_PER_SHAPE * max_shapes,
        f"{PIECES_PER_SHAPE} pieces for each of the {max_shapes:,} shapes --max-shapes allows",
    )
    return counts


def layers_in_file(lib, fmt: str, path: Path) -> tuple[tuple[int, int], ...]:
    """Every layer/datatype holding shapes in the file (a GDSII library read
    through a layer filter holds only those layers, so the file is asked)."""
    import gdstk

    if fmt == "gds":
        with captured_stderr():
            found = gdstk.gds_info(str(path))["layers_and_datatypes"]
    else:
        found = lib.layers_and_datatypes()
    return tuple(sorted(tuple(int(v) for v in ld) for ld in found))


def flatten_layer(tops, layer_datatype: tuple[int, int], scale: float) -> PolygonSet:
    """All polygons of one layer/datatype under ``tops``, flattened and packed.

    ``scale`` converts user units to nm.  References (rotation, reflection,
    magnification, arrays) and repetitions are applied; paths become polygons.
    """
    layer, datatype = layer_datatype
    polys = []
    for top in tops:
        polys.extend(
            q.points
            for q in top.get_polygons(
                apply_repetitions=True,
                include_paths=True,
                depth=None,
                layer=layer,
                datatype=datatype,
            )
        )
    return PolygonSet.from_arrays(polys, scale)


def open_layout(path: Path, wanted: set, cell: str | None, noise: list[str] | None = None):
    """Parse a layout file: ``(library, format, top cells)``, with clear errors.

    Reference cycles are refused here, before anything is flattened (the
    library crashes on them).  Library warnings are appended to ``noise``.
    """
    import gdstk

    p = Path(path)
    fmt = sniff_format(p)
    with captured_stderr() as captured:
        try:
            if fmt == "gds":
                lib = gdstk.read_gds(str(p), filter=wanted or None)
            else:
                lib = gdstk.read_oas(str(p))
        except (OSError, RuntimeError, MemoryError, ValueError) as exc:
            what = str(exc) or type(exc).__name__
            label = "GDSII" if fmt == "gds" else "OASIS"
            raise LayoutError(f"{p}: cannot read {label} file: {what}") from None
    if noise is not None:
        noise.extend(captured)
    cycle = _find_cycle(lib.cells)
    if cycle:
        raise LayoutError(f"{p}: cell reference cycle: {' -> '.join(cycle)}")
    if cell is not None:
        tops = [c for c in lib.cells if c.name == cell]
        if not tops:
            raise LayoutError(f"{p}: no cell named {cell!r}")
    else:
        tops = [c for c in lib.top_level() if isinstance(c, gdstk.Cell)]
        if not tops:
            raise LayoutError(f"{p}: layout has no top cell")
    return lib, fmt, tops


def read_layout(
    path: str | Path,
    layers: Iterable[tuple[int, int]],
    cell: str | None = None,
    max_shapes: int = DEFAULT_MAX_SHAPES,
    warnings: list[str] | None = None,
) -> Layout:
    """Read ``path`` and flatten the given ``(layer, datatype)`` pairs to nm polygons.

    Parameters
    ----------
    path
        GDSII or OASIS file; the format is taken from the file's header.
    layers
        Only these layer/datatype pairs are loaded (the rest is ignored).
    cell
        Top cell to scan; by default every top-level cell.
    max_shapes
        Refuse (LayoutError) a layout that would flatten to more polygons.
    warnings
        If given, library warnings met while reading are appended to it.
    """

    p = Path(path)
    wanted = set(layers)
    noise: list[str] = []
    lib, fmt, tops = open_layout(p, wanted, cell, noise)
    if warnings is not None:
        warnings.extend(noise)

    by_layer = count_shapes_within(p, tops, wanted, max_shapes, lib.unit * 1e9).shapes
    present = layers_in_file(lib, fmt, p) if not all(by_layer.values()) else ()

    scale = lib.unit * 1e9
    out: dict[tuple[int, int], PolygonSet] = {}
    with captured_stderr() as noise:
        for ld in sorted(wanted):
            out[ld] = snap_to_grid(flatten_layer(tops, ld, scale), lib.precision * 1e9)
    if warnings is not None:
        warnings.extend(noise)
    return Layout(
        path=p,
        format=fmt,
        unit_m=lib.unit,
        grid_nm=lib.precision * 1e9,
        cells=tuple(c.name for c in tops),
        layers=out,
        shapes_by_layer=by_layer,
        present=present,
    )
