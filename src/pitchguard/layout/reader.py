"""GDSII/OASIS reading: the cells to scan, shape counts from the hierarchy, flat layers."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, field
from pathlib import Path

from pitchguard.errors import LayoutError
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
    """A reference cycle among ``cells`` as a list of names, or None."""
    graph = {c.name: [d.name for d in c.dependencies(False) if hasattr(d, "name")] for c in cells}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(name: str) -> list[str] | None:
        state[name] = 1
        stack.append(name)
        for nxt in graph.get(name, ()):
            if state.get(nxt) == 1:
                return stack[stack.index(nxt) :] + [nxt]
            if nxt not in state:
                found = visit(nxt)
                if found:
                    return found
        stack.pop()
        state[name] = 2
        return None

    for name in graph:
        if name not in state:
            found = visit(name)
            if found:
                return found
    return None


def _count_shapes(cell, wanted: set[tuple[int, int]], memo: dict) -> dict:
    """Polygons ``cell`` flattens to per ``wanted`` layer, without flattening."""
    key = cell.name
    if key in memo:
        return memo[key]
    n: dict = {}
    for p in list(cell.polygons) + list(cell.paths):
        layers = (
            zip(p.layers, p.datatypes, strict=True)
            if hasattr(p, "layers")
            else [(p.layer, p.datatype)]
        )
        rep = p.repetition.size if p.repetition.size else 1
        for ld in layers:
            if ld in wanted:
                n[ld] = n.get(ld, 0) + rep
    for ref in cell.references:
        if isinstance(ref.cell, str) or ref.cell is None:
            continue  # an unresolved reference (rawcell or missing): nothing to flatten
        rep = ref.repetition.size if ref.repetition.size else 1
        for ld, k in _count_shapes(ref.cell, wanted, memo).items():
            n[ld] = n.get(ld, 0) + rep * k
    memo[key] = n
    return n


def count_shapes_within(path: Path, tops, wanted: set, max_shapes: int) -> dict:
    """Flat shape count of ``tops`` per ``wanted`` layer (absent layers: 0), from
    the hierarchy; refuse (LayoutError) more than ``max_shapes`` in all."""
    memo: dict = {}
    by_layer = dict.fromkeys(wanted, 0)
    for c in tops:
        for ld, k in _count_shapes(c, wanted, memo).items():
            by_layer[ld] += k
    total = sum(by_layer.values())
    if total > max_shapes:
        raise LayoutError(
            f"{path}: deck layers flatten to {total:,} shapes, over the limit of {max_shapes:,} "
            "(raise --max-shapes or scan a --region)"
        )
    return by_layer


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

    by_layer = count_shapes_within(p, tops, wanted, max_shapes)
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
