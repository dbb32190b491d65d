"""What a layout flattens to, worked out from its hierarchy without flattening it.

Per cell, children first and without recursion (a reference chain may be
thousands deep): shapes per asked-for layer, their vertices and edge length
(magnifications applied), the largest single shape, and the references that
multiply most.  Counts are exact Python integers: a repetition count read
back overflowed (gdstk reads a GDSII array of more than 65535 columns as
2^64 - 1 columns) must not wrap into a small number.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from pitchguard.errors import LayoutError
from pitchguard.layout.walks import MAX_DEPTH, children_first

EDGE_PIECE_NM = 10_000.0
"""Edges are cut into site pieces at a global grid of this pitch (drawn nm;
geometry.sites.SITE_CELL_NM, held equal by a test): a scan's work and memory
grow with the pieces, i.e. with the vertices plus the edge length over this."""

PIECES_PER_SHAPE = 16
"""A shape budget is turned into a budget of edge pieces at this rate: 0.5 kB a
piece against the 8 kB a tile shape of run.plan's memory model (measured:
0.28 kB a piece scanning a magnified rectangle whose edges make 840,000
pieces; a rectangle under the piece pitch is 4 pieces)."""

MAX_REPEAT_SIDE = 2**31
"""Columns or rows of one repetition at or over this are refused: 2^31 columns
at a 1 nm pitch span over 2 m, larger than any mask, so such a count is a
corrupt or overflowed one (GDSII itself stores at most 32767)."""


def repetition_count(rep) -> tuple[int, int, int]:
    """``(instances, columns, rows)`` of a gdstk repetition, exactly (no wrap):
    columns and rows are 0 for a list of offsets or no repetition."""
    cols, rows = rep.columns, rep.rows
    if cols is not None and rows is not None:
        return int(cols) * int(rows), int(cols), int(rows)
    return max(1, int(rep.size)), 0, 0


@dataclass
class _Flat:
    """One cell flattened, in numbers (lengths in user units, magnifications applied)."""

    shapes: dict = field(default_factory=dict)  # (layer, datatype) -> shapes
    vertices: int = 0
    length: float = 0.0  # edge length of every shape
    big_vertices: int = 0  # the most vertices of one shape
    big_length: float = 0.0  # the longest perimeter of one shape
    depth: int = 1  # cells from this one down to its deepest leaf


@dataclass
class FlatCounts:
    """What the top cells flatten to on the asked-for layers."""

    shapes: dict  # (layer, datatype) -> flat shapes
    pieces: float  # edge pieces of all shapes (see EDGE_PIECE_NM)
    largest_pieces: float  # edge pieces of the largest single shape (a bound)
    most_magnified: tuple | None  # (magnification, child, parent) of the largest
    largest_array: tuple | None  # (instances, columns, rows, child, parent)

    @property
    def total(self) -> int:
        return sum(self.shapes.values())


def _is_cell(c) -> bool:
    return c is not None and not isinstance(c, str) and hasattr(c, "references")


def _name(text: str) -> str:
    """A cell name for a message: quoted with control characters escaped (repr),
    cut to 80 characters."""
    shown = repr(str(text))
    return shown if len(shown) <= 80 else shown[:80] + "…"


def _check_side(path, n: int, what: str, child: str, parent: str) -> None:
    if n >= MAX_REPEAT_SIDE:
        raise LayoutError(
            f"{path}: {what} of cell {_name(child)} in cell {_name(parent)} repeats "
            f"{n:,} times along one axis, over 2^31: a corrupt or overflowed count "
            "(no mask holds 2^31 copies in a row)"
        )


def check_placement(path, ref, child: str, parent: str) -> None:
    """Refuse (LayoutError) a reference whose rotation, magnification or offsets are
    not finite numbers, or whose magnification is not above 0: no drawing places
    a cell so, and no geometry follows from it (a corrupt file)."""
    import numpy as np

    rep = ref.repetition
    values = [("rotation", ref.rotation), ("magnification", ref.magnification)]
    values.append(("origin", ref.origin))
    for name in ("spacing", "v1", "v2", "offsets", "x_offsets", "y_offsets"):
        values.append((f"repetition {name.replace('_', ' ')}", getattr(rep, name, None)))
    for what, v in values:
        if v is None:
            continue
        a = np.asarray(v, dtype=np.float64).ravel()
        if not np.isfinite(a).all():
            bad = f"a {what} of {a[~np.isfinite(a)][0]}"
            break
    else:
        if float(ref.magnification) > 0.0:
            return
        bad = f"a magnification of {float(ref.magnification):g}"
    raise LayoutError(
        f"{path}: cell {_name(child)} is placed in cell {_name(parent)} with {bad}: a corrupt "
        "file (a placement's rotation, magnification and offsets are finite numbers, the "
        "magnification above 0)"
    )


def _repeats(path, rep, cell: str) -> int:
    """Copies a shape's repetition makes (checked: see MAX_REPEAT_SIDE)."""
    n, cols, rows = repetition_count(rep)
    for side in (cols, rows):
        _check_side(path, side, "a shape's repetition", cell, cell)
    return n


def _own(cell, wanted: set, scale_nm: float, path) -> _Flat:
    """The cell's own shapes on the ``wanted`` layers (a loop per polygon: kept lean,
    a flat layout's top cell holds millions)."""
    f = _Flat()
    shapes = f.shapes
    vertices, length, big_v, big_len = 0, 0.0, 0, 0.0
    for p in cell.polygons:
        ld = (p.layer, p.datatype)
        if ld not in wanted:
            continue
        rep = p.repetition
        n = _repeats(path, rep, cell.name) if rep.size else 1
        shapes[ld] = shapes[ld] + n if ld in shapes else n
        v, per = p.size, p.perimeter()
        vertices += n * v
        length += n * per
        if v > big_v:
            big_v = v
        if per > big_len:
            big_len = per
    for p in cell.paths:  # one shape per layer a path is drawn on
        lds = [ld for ld in zip(p.layers, p.datatypes, strict=True) if ld in wanted]
        if not lds:
            continue
        n = _repeats(path, p.repetition, cell.name) if p.repetition.size else 1
        for ld in lds:
            shapes[ld] = shapes.get(ld, 0) + n
        for q in p.to_polygons():
            v, per = q.size, q.perimeter()
            vertices += n * len(lds) * v
            length += n * len(lds) * per
            big_v = max(big_v, v)
            big_len = max(big_len, per)
    f.vertices, f.length = vertices, length * scale_nm
    f.big_vertices, f.big_length = big_v, big_len * scale_nm
    return f


def flat_counts(path, tops, wanted: set, scale_nm: float) -> FlatCounts:
    """:class:`FlatCounts` of ``tops`` on the ``wanted`` layers (``scale_nm``: nm
    per user unit); a repetition count past :data:`MAX_REPEAT_SIDE` is refused."""
    done: dict[str, _Flat] = {}
    most_mag = big_array = None
    for cell in children_first(tops, lambda ref: ref.cell if _is_cell(ref.cell) else None):
        f = _own(cell, wanted, scale_nm, path)
        for ref in cell.references:
            if not _is_cell(ref.cell):
                continue  # an unresolved reference (rawcell or missing): nothing to flatten
            child = ref.cell.name
            check_placement(path, ref, child, cell.name)
            n, cols, rows = repetition_count(ref.repetition)
            for side in (cols, rows):
                _check_side(path, side, "a reference", child, cell.name)
            if n > 1 and (big_array is None or n > big_array[0]):
                big_array = (n, cols, rows, child, cell.name)
            mag = abs(float(ref.magnification or 1.0))
            if mag != 1.0 and (most_mag is None or mag > most_mag[0]):
                most_mag = (mag, child, cell.name)
            c = done[child]
            for ld, k in c.shapes.items():
                f.shapes[ld] = f.shapes.get(ld, 0) + n * k
            f.vertices += n * c.vertices
            f.length += n * mag * c.length
            f.big_vertices = max(f.big_vertices, c.big_vertices)
            f.big_length = max(f.big_length, mag * c.big_length)
            f.depth = max(f.depth, c.depth + 1)
        if f.depth > MAX_DEPTH:
            raise LayoutError(
                f"{path}: references nest over {MAX_DEPTH:,} cells deep below cell "
                f"{_name(cell.name)}: a generated or corrupt hierarchy (designs nest a few tens "
                "of levels; GDSII sets no limit, the scan does)"
            )
        done[cell.name] = f
    shapes = dict.fromkeys(wanted, 0)
    vertices, length, big_v, big_len = 0, 0.0, 0, 0.0
    for top in tops:
        f = done[top.name]
        for ld, k in f.shapes.items():
            shapes[ld] += k
        vertices += f.vertices
        length += f.length
        big_v, big_len = max(big_v, f.big_vertices), max(big_len, f.big_length)
    return FlatCounts(
        shapes,
        vertices + length / EDGE_PIECE_NM,
        big_v + big_len / EDGE_PIECE_NM,
        most_mag,
        big_array,
    )


def _figure(x: float) -> str:
    return f"{x:,.0f}" if math.isfinite(x) and x < 1e15 else f"{x:.3g}"


def edge_text(pieces: float) -> str:
    """``pieces`` edge pieces in words: how many, and the edge length they stand for."""
    nm = pieces * EDGE_PIECE_NM
    length = f"{nm / 1e9:,.1f} m" if nm < 1e12 else f"{nm / 1e12:,.4g} km"
    return f"{_figure(pieces)} edge pieces of {EDGE_PIECE_NM / 1000:g} um (edges about {length})"


def blame(counts: FlatCounts, pieces: bool) -> str:
    """Which reference multiplies most: its magnification (``pieces``) or its array."""
    if pieces and counts.most_magnified is not None:
        mag, child, parent = counts.most_magnified
        return f"; cell {_name(child)} is placed in {_name(parent)} at magnification {mag:g}"
    if counts.largest_array is not None:
        n, cols, rows, child, parent = counts.largest_array
        shape = f"{cols:,} x {rows:,} array" if cols else f"{n:,} placements"
        return f"; cell {_name(child)} is placed in {_name(parent)} as a {shape}"
    return ""


def check_pieces(path, counts: FlatCounts, max_pieces: float, what: str) -> None:
    """Refuse (LayoutError) a layout whose edges make more than ``max_pieces`` pieces
    (``what`` names the budget)."""
    if not counts.pieces <= max_pieces:  # also refuses nan
        raise LayoutError(
            f"{path}: deck layers flatten to about {edge_text(counts.pieces)}, over the "
            f"budget of {_figure(max_pieces)} ({what}){blame(counts, pieces=True)}"
        )
