"""The marker layout: a polygon and a label per finding, a layer per severity.

Hierarchical by default: the markers of a cell's findings sit in a marker
cell of their own, drawn in the cell's frame and placed wherever the
findings occur (outputs.marker_arrays packs the placements into arrays), so
a designer sees them on the cell and the file grows with the distinct
findings, not with their placements.  ``flat`` writes one polygon per
placement in the top cell instead.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np

from pitchguard.deck import Deck
from pitchguard.errors import OutputError
from pitchguard.judge.findings import Finding
from pitchguard.judge.per_cell import CellFinding, cell_findings, orientations
from pitchguard.outputs.files import atomic_write
from pitchguard.outputs.marker_arrays import pack
from pitchguard.outputs.texts import clipped, shown_path
from pitchguard.run.scan import ScanResult

MARKER_CELL = "PITCHGUARD_MARKERS"
"""The top cell of a marker file."""

_INT32 = 2**31 - 1
_EXTENSIONS = (".gds", ".gds2", ".gdsii", ".oas", ".oasis")


def marker_label(f: Finding) -> str:
    layer = clipped(f.layer)  # a label is read in a layout viewer; the JSON has the name
    if f.context == "line-end":
        return f"{f.severity} {f.check} {layer} gap={f.space_nm:.1f}nm w={f.width_nm:.1f}nm"
    if f.array is not None and f.context in ("alone", "group"):
        w, h = f.array.feature_nm
        return f"{f.severity} {f.check} {layer} {f.context} {w:.1f}x{h:.1f}nm"
    if not math.isfinite(f.pitch_nm):
        return f"{f.severity} {f.check} {layer} isolated w={f.width_nm:.1f}nm"
    return f"{f.severity} {f.check} {layer} p={f.pitch_nm:.1f}nm k1={f.k1:.3f}"


def marker_cell_name(k: int, cell: str) -> str:
    """The ``k``-th marker cell, holding markers of layout cell ``cell``."""
    return f"PGM{k}_" + re.sub(r"[^A-Za-z0-9_$?]", "_", cell)[:40]


class _Units:
    """Nanometres to the marker file's user units, range-checked for 32-bit grids."""

    def __init__(self, out: Path, result: ScanResult):
        lay = result.layout
        self.unit_m = lay.unit_m if lay else 1e-6
        self.grid_m = (lay.grid_nm if lay else 1.0) * 1e-9
        self.per_unit = self.unit_m * 1e9  # nm per user unit
        self.grid_nm = self.grid_m * 1e9
        self.out = out

    def check(self, nm) -> None:
        if np.abs(np.asarray(nm, dtype=np.float64)).max(initial=0.0) > _INT32 * self.grid_nm:
            raise OutputError(
                f"{shown_path(self.out)}: marker coordinates exceed the 32-bit range of the grid"
            )

    def points(self, nm) -> list[tuple[float, float]]:
        self.check(nm)
        return [(x / self.per_unit, y / self.per_unit) for x, y in nm]


def _mark(cell, f: Finding, outline_nm, deck: Deck, units: _Units) -> None:
    import gdstk

    layer, datatype = deck.markers[f.severity]
    pts = units.points(outline_nm)
    cell.add(gdstk.Polygon(pts, layer=layer, datatype=datatype))
    cx = sum(p[0] for p in pts) / len(pts)
    cy = sum(p[1] for p in pts) / len(pts)
    cell.add(gdstk.Label(marker_label(f), (cx, cy), layer=layer, texttype=datatype))


def _outline_in_cell(c: CellFinding) -> np.ndarray:
    """The first placement's outline taken back into the cell's frame (nm)."""
    m = c.m[0].reshape(2, 2)
    return (np.asarray(c.finding.outline_nm, dtype=np.float64) - c.t[0]) @ np.linalg.inv(m).T


def _placements_key(c: CellFinding) -> bytes:
    """The set of placements of ``c`` (orientation and origin), order aside."""
    rows = np.round(np.column_stack([orientations(c.m), c.t]), 3) + 0.0
    return rows[np.lexsort(rows.T[::-1])].tobytes()


def _place(top, marker, c: CellFinding, units: _Units) -> None:
    """References to ``marker`` at every placement of ``c``, packed into arrays
    per orientation."""
    import gdstk

    orient = orientations(c.m)
    kinds, which = np.unique(orient, axis=0, return_inverse=True)
    origins = np.rint(c.t / units.grid_nm).astype(np.int64)
    units.check(c.t)
    g = units.grid_nm / units.per_unit  # grid step in user units
    for k, (rot, mag, mirrored) in enumerate(kinds.tolist()):
        for a in pack(origins[which.ravel() == k]):
            ref = gdstk.Reference(
                marker,
                (a.x * g, a.y * g),
                rotation=np.radians(rot),
                magnification=mag,
                x_reflection=bool(mirrored),
            )
            if a.columns > 1 or a.rows > 1:
                ref.repetition = gdstk.Repetition(
                    a.columns, a.rows, spacing=(max(a.dx, 1) * g, max(a.dy, 1) * g)
                )
            top.add(ref)


def build_markers(result: ScanResult, deck: Deck, out: Path, flat: bool = False):
    """The marker library (gdstk) of a scan; see the module's docstring."""
    import gdstk

    units = _Units(out, result)
    lib = gdstk.Library("PITCHGUARD", unit=units.unit_m, precision=units.grid_m)
    top = lib.new_cell(MARKER_CELL)
    if flat or result.cells is None:
        for f in result.findings:
            _mark(top, f, f.outline_nm, deck, units)
        return lib
    # Entries of one cell with the same placements share a marker cell.
    shared: dict[tuple[str, bytes], list[CellFinding]] = {}
    for c in cell_findings(result):
        shared.setdefault((c.cell, _placements_key(c)), []).append(c)
    for k, ((cell_name, _), entries) in enumerate(shared.items()):
        first = entries[0]
        if len(first.path) <= 1:  # findings of the top cell itself
            for c in entries:
                _mark(top, c.finding, c.finding.outline_nm, deck, units)
            continue
        marker = lib.new_cell(marker_cell_name(k, cell_name))
        for c in entries:
            _mark(marker, c.finding, _outline_in_cell(c), deck, units)
        _place(top, marker, first, units)
    return lib


def write_markers(
    out: Path, result: ScanResult, deck: Deck, inputs: list[Path], flat: bool = False
) -> None:
    """Write the marker layout (:func:`build_markers`) atomically, never over an input.

    Units (user unit and database grid) are copied from the scanned layout so
    the markers overlay it exactly.  The format follows the extension.
    """
    out = Path(out)
    ext = out.suffix.lower()
    if ext not in _EXTENSIONS:
        raise OutputError(f"{shown_path(out)}: marker file must end in .gds or .oas")
    lib = build_markers(result, deck, out, flat)

    oasis = ext in (".oas", ".oasis")

    def w(tmp: Path) -> None:
        if oasis:
            lib.write_oas(str(tmp), validation="crc32")
        else:
            lib.write_gds(str(tmp))

    atomic_write(out, w, inputs, check=oasis_problem if oasis else gds_problem)


_ENDLIB = b"\x00\x04\x04\x00"
"""A GDSII stream's last record (4 bytes, ENDLIB)."""


def gds_problem(path: Path) -> str | None:
    """Why the GDSII file at ``path`` is not whole, or None: the layout library does
    not report its write errors (a full disk leaves a short file)."""
    with open(path, "rb") as fh:
        size = fh.seek(0, 2)
        if size >= 4:
            fh.seek(size - 4)
            if fh.read(4) == _ENDLIB:
                return None
    return f"the layout library wrote {size:,} bytes and no end of library (disk full?)"


def oasis_problem(path: Path) -> str | None:
    """:func:`gds_problem` for OASIS, written with a CRC-32 signature: the file's END
    record ends with validation scheme 1 and the CRC-32 (little-endian) of every
    byte before the signature (OASIS, SEMI P39, validation)."""
    import zlib

    crc, last = 0, -1
    with open(path, "rb") as fh:
        size = fh.seek(0, 2)
        if size >= 5:
            fh.seek(0)
            left = size - 4
            while left:
                block = fh.read(min(left, 1 << 20))
                if not block:
                    break
                crc = zlib.crc32(block, crc)
                left -= len(block)
                last = block[-1]
            signature = fh.read(4)
            if not left and last == 1 and int.from_bytes(signature, "little") == crc:
                return None
    return f"the layout library wrote {size:,} bytes that do not check (disk full?)"
