"""The marker layout: one polygon and label per finding, a layer per severity."""

from __future__ import annotations

from pathlib import Path

from pitchguard.deck import Deck
from pitchguard.errors import OutputError
from pitchguard.judge.findings import Finding
from pitchguard.outputs.files import atomic_write
from pitchguard.run.scan import ScanResult

MARKER_CELL = "PITCHGUARD_MARKERS"


_INT32 = 2**31 - 1


def marker_label(f: Finding) -> str:
    if f.context == "line-end":
        return f"{f.severity} {f.check} {f.layer} gap={f.space_nm:.1f}nm w={f.width_nm:.1f}nm"
    if f.array is not None and f.context in ("alone", "group"):
        w, h = f.array.feature_nm
        return f"{f.severity} {f.check} {f.layer} {f.context} {w:.1f}x{h:.1f}nm"
    return f"{f.severity} {f.check} {f.layer} p={f.pitch_nm:.1f}nm k1={f.k1:.3f}"


def write_markers(out: Path, result: ScanResult, deck: Deck, inputs: list[Path]) -> None:
    """Marker layout: one polygon and one text label per finding, a layer per severity.

    Units (user unit and database grid) are copied from the scanned layout so
    the markers overlay it exactly.  The format follows the extension.
    """
    import gdstk

    out = Path(out)
    ext = out.suffix.lower()
    if ext not in (".gds", ".gds2", ".gdsii", ".oas", ".oasis"):
        raise OutputError(f"{out}: marker file must end in .gds or .oas")
    lay = result.layout
    unit_m = lay.unit_m if lay else 1e-6
    grid_m = (lay.grid_nm if lay else 1.0) * 1e-9
    per_unit = unit_m * 1e9  # nm per user unit
    lib = gdstk.Library("PITCHGUARD", unit=unit_m, precision=grid_m)
    cell = lib.new_cell(MARKER_CELL)
    limit_nm = _INT32 * grid_m * 1e9
    for f in result.findings:
        layer, datatype = deck.markers[f.severity]
        pts = [(x / per_unit, y / per_unit) for x, y in f.outline_nm]
        if any(abs(c) > limit_nm / per_unit for p in pts for c in p):
            raise OutputError(f"{out}: marker coordinates exceed the 32-bit range of the grid")
        cell.add(gdstk.Polygon(pts, layer=layer, datatype=datatype))
        cx = sum(p[0] for p in pts) / 4
        cy = sum(p[1] for p in pts) / 4
        cell.add(gdstk.Label(marker_label(f), (cx, cy), layer=layer, texttype=datatype))

    def w(tmp: Path) -> None:
        if ext in (".oas", ".oasis"):
            lib.write_oas(str(tmp))
        else:
            lib.write_gds(str(tmp))

    atomic_write(out, w, inputs)
