"""Short texts about a finding shared by the reports (CI formats, terminal table, HTML)."""

from __future__ import annotations

import math

from pitchguard.deck import SEVERITIES
from pitchguard.judge.findings import CLIP_KINDS, Finding, box_um
from pitchguard.outputs.user_text import (  # noqa: F401  (the reports' names for them)
    SHOWN_CHARS,
    SHOWN_PATH_CHARS,
    clipped,
    markup_safe,
    markup_safe_path,
    printable,
    shown,
    shown_path,
)


def nm_text(x: float, digits: int = 1) -> str:
    return f"{x:.{digits}f}" if math.isfinite(x) else "-"


ISOLATED = "isolated (no neighbour within the interaction range)"
"""What a line with no pitch is called in the reports (its pitch is not a number)."""


def pitch_text(f: Finding) -> str:
    """``pitch 80.0 nm``, or :data:`ISOLATED` for a line with no neighbour."""
    return f"pitch {f.pitch_nm:.1f} nm" if math.isfinite(f.pitch_nm) else ISOLATED


def dof_limited(dof_nm, span_nm: float) -> bool:
    """True when a depth of focus spans the whole focus range sampled: the range,
    not the image, limits it, so the true value is at least this."""
    return dof_nm is not None and span_nm > 0 and dof_nm >= span_nm - 0.5


def dof_text(dof_nm, span_nm: float, unit: str = " nm") -> str:
    """A depth of focus, ``>= X`` when the focus range sampled limits it."""
    if dof_nm is None or not math.isfinite(dof_nm):
        return "-"
    if dof_limited(dof_nm, span_nm):
        return f">= {dof_nm:.0f}{unit}"
    return f"{dof_nm:.0f}{unit}"


def k1_number(f: Finding) -> str:
    """k1 to three places, ``-`` when there is none (an isolated line, a line end)."""
    return f"{f.k1:.3f}" if math.isfinite(f.k1) else "-"


def orders_text(orders: tuple[int, ...]) -> str:
    """Diffraction orders in a few characters: ``0, ±1..3`` for a full symmetric run
    (``0``, ``0, ±1`` for the shortest), else each order signed, ``-`` for none."""
    if not orders:
        return "-"
    orders = tuple(orders)
    if orders == tuple(range(orders[0], orders[-1] + 1)) and orders[0] == -orders[-1]:
        return f"0, ±1..{orders[-1]}" if orders[-1] > 1 else ("0, ±1" if orders[-1] else "0")
    return ", ".join(f"{o:+d}" if o else "0" for o in orders)


def reaches_fail_on(f: Finding, fail_on: str) -> bool:
    if fail_on == "never":
        return False
    return f.severity_rank <= SEVERITIES.index(fail_on)


def um_text(x: float) -> str:
    """Micrometres as drawn, to the 0.1 nm the report keeps, without trailing zeros."""
    text = f"{x:.4f}".rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def where_text_of(f: Finding) -> str:
    return where_text(f.centre_um)


def where_text(centre_um) -> str:
    return f"({um_text(centre_um[0])}, {um_text(centre_um[1])}) um"


def box_text(bbox_um) -> str:
    x0, y0, x1, y1 = (um_text(v) for v in bbox_um)
    return f"{x0}, {y0} to {x1}, {y1}"


def k1_text(f: Finding) -> str:
    """ ", k1 0.312" when the finding has a k1 (a line end has none)."""
    return f", k1 {f.k1:.3f}" if math.isfinite(f.k1) else ""


def describe(f: Finding) -> str:
    """One sentence a designer can act on: layer, place, pitch, what tripped, the fix."""
    where = where_text_of(f)
    box = box_text(f.bbox_um)
    return (
        f"{f.severity} on layer {clipped(f.layer)} ({f.source}): region centred at "
        f"{where} (box {box} um), "
        f"{pattern_text(f)}{k1_text(f)}. {f.check}: {f.message}. Fix: {f.hint}."
    )


def cell_sentence(c) -> str:
    """Where a report entry (judge.per_cell.CellFinding) sits in the hierarchy, as a
    sentence to append to :func:`describe`; empty when it names no cell."""
    if not c.cell:
        return ""
    n = c.placements
    path = clipped(" > ".join(map(clipped, c.path)), SHOWN_PATH_CHARS, middle=True)
    return (
        f" In cell {clipped(c.cell)} (placed {path}), box {box_text(box_um(c.cell_bbox_nm))} "
        f"um in the cell's own frame; {n} placement{'s' if n != 1 else ''}."
        + (
            " It depends on the placement (shapes of other cells within reach): fix in the "
            "parent cell."
            if c.depends_on_placement
            else ""
        )
    )


CLIP_WHERE = {
    "alone": "with no other of its shape within reach",
    "group": "in a pair, an irregular group or at the edge of an array of its kind",
}
"""Where a compact feature judged on a clip of its own sits (``ArrayShape.lattice``)."""


def pattern_text(f: Finding) -> str:
    """What the region holds: lines with their pitch, or an array's lattice."""
    a = f.array
    if f.context == "line-end":
        return (
            f"a line end {nm_text(f.width_nm)} nm wide, {f.periodicity} across a "
            f"{nm_text(f.space_nm)} nm gap, the line running at {f.orientation_deg:g} deg"
        )
    if a is not None and a.lattice in CLIP_KINDS:
        w, h = a.feature_nm
        return f"a feature {nm_text(w)} x {nm_text(h)} nm {CLIP_WHERE[a.lattice]}"
    if a is None and not math.isfinite(f.pitch_nm):
        return (
            f"{f.lines} line{'s' if f.lines != 1 else ''} {nm_text(f.width_nm)} nm wide "
            f"running at {f.orientation_deg:g} deg, {ISOLATED}"
        )
    if a is None:
        return (
            f"{f.lines} lines ({f.periodicity}) running at {f.orientation_deg:g} deg, "
            f"pitch {nm_text(f.pitch_nm)} nm "
            f"(width {nm_text(f.width_nm)} / space {nm_text(f.space_nm)} nm)"
        )
    w, h = a.feature_nm
    shape = "row" if a.lattice == "row" else f"{a.lattice} array"
    pitch = (
        f"pitch {nm_text(f.pitch_nm)} nm"
        if a.lattice == "row"
        else f"pitch {nm_text(f.pitch_nm)} x {nm_text(f.pitch_max_nm)} nm"
    )
    return (
        f"{a.features} features {nm_text(w)} x {nm_text(h)} nm ({shape}, "
        f"{a.columns} x {a.rows}) at {pitch}, a1 at {f.orientation_deg:g} deg"
    )


def finding_line(f: Finding, where: str | None = None) -> str:
    """One line per finding: severity, location, pitch, message, hint."""
    return (
        f"{f.severity} | {clipped(f.layer)} ({f.source}) at {where or where_text_of(f)} | "
        f"{pattern_brief(f)} "
        f"| {f.message} | fix: {f.hint}"
    )


def pattern_brief(f: Finding) -> str:
    """:func:`pattern_text` in a few words."""
    if f.array is not None and f.array.lattice in CLIP_KINDS:
        w, h = f.array.feature_nm
        where = "on its own" if f.array.lattice == "alone" else "in a group"
        return f"feature {nm_text(w)} x {nm_text(h)} nm {where}"
    if f.context == "line-end":
        return f"{f.periodicity} gap {nm_text(f.space_nm)} nm (line {nm_text(f.width_nm)} nm)"
    if f.array is None and not math.isfinite(f.pitch_nm):
        return f"isolated line {nm_text(f.width_nm)} nm wide"
    if f.array is None:
        return (
            f"pitch {nm_text(f.pitch_nm)} nm "
            f"(width {nm_text(f.width_nm)} / space {nm_text(f.space_nm)} nm, "
            f"k1 {f.k1:.3f}, {f.lines} lines)"
        )
    w, h = f.array.feature_nm
    return (
        f"{f.array.lattice} lattice {nm_text(f.pitch_nm)} x {nm_text(f.pitch_max_nm)} nm "
        f"({nm_text(w)} x {nm_text(h)} nm features, k1 {f.k1:.3f}, {f.array.features} features)"
    )


LIGHTS = {
    "unpolarized": "unpolarised",
    "x": "x-polarised (E along x)",
    "y": "y-polarised (E along y)",
    "tangential": "tangentially polarised",
    "radial": "radially polarised",
    "scalar": "scalar (no polarisation)",
}


def light_text(polarization: str) -> str:
    """An exposure's ``polarization`` in words."""
    return LIGHTS.get(polarization, polarization)


def medium_text(exposure) -> str:
    """Where the image forms: ``in resist n 1.7`` or ``in n 1.44``."""
    if exposure.resist_index:
        return f"in resist n {exposure.resist_index:g}"
    return f"in n {exposure.immersion_index:g}"
