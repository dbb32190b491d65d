"""Baselines (accepted findings) and diffs between scans, matched per cell finding.

What is compared is a scan's *cell findings* (``judge.per_cell``): one distinct
finding of a cell with all its placements.  A baseline entry records one, and
matches a cell finding of a later scan with the same cell, a compatible
signature (layer, check, line context, pitch, width, space, orientation and
line count within tolerances) and, among several such, the nearest position
in the cell's own frame.  A match accepts every placement of the cell
finding, however many there are and wherever the parent puts them.  A
placement whose surroundings within the interaction range differ belongs to
the parent cell instead (``layout.holders``), so it is another cell finding.
Findings held by a top cell are compared across top cells whatever their
names: their frame is the layout's.

Entries without a cell (per-placement entries, or any entry when the scan
names no cells) match one placement each, by position in the top frame.
Positions only choose among compatible candidates; within one cell (or the
top frame) the most common offset between candidates is taken as a shift.
"""

from __future__ import annotations

import json
import math
import os
from collections import Counter
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import NamedTuple

import numpy as np

from pitchguard.errors import PitchguardError
from pitchguard.judge.findings import Finding, box_um, centre_um
from pitchguard.judge.per_cell import CellFinding, each_alone, group_by_cell
from pitchguard.outputs.baseline_entries import (
    EXPIRES,
    FORMAT_VERSION,
    BaselineFile,
    expired,
    read_baseline,
)
from pitchguard.outputs.files import atomic_write

PITCH_TOL_NM = 1.0


PITCH_TOL_REL = 0.01


ANGLE_TOL_DEG = 1.0


SHIFT_BIN_UM = 0.5

TOP: tuple[str, ...] = ()
"""The frame key of findings held by a top cell (the layout's own frame)."""


def frame_key(cell: str, path) -> tuple[str, ...]:
    """Whose frame a cell finding's position is in: its cell, or any top cell."""
    return TOP if len(path) <= 1 else (cell,)


@dataclass(frozen=True)
class Signature:
    """What identifies a finding, coordinates aside, and where it is.

    ``frame`` is None for a single placement (``centre_um`` in the top frame),
    else :func:`frame_key` of a cell finding (``centre_um`` in that cell's frame).
    """

    layer: str
    check: str
    context: str
    pitch_nm: float
    width_nm: float
    space_nm: float
    orientation_deg: float
    lines: int
    centre_um: tuple[float, float]
    frame: tuple[str, ...] | None = None

    @classmethod
    def of(cls, f: Finding) -> Signature:
        """One placement, in the top frame."""
        return cls(
            f.layer,
            f.check,
            f.context,
            f.pitch_nm,
            f.width_nm,
            f.space_nm,
            f.orientation_deg,
            f.lines,
            f.centre_um,
        )

    @classmethod
    def of_unit(cls, c: CellFinding) -> Signature:
        """A cell finding in its cell's frame; one with no cell named, as a placement."""
        s = cls.of(c.finding)
        if not c.cell:
            return s
        centre = centre_um(box_um(c.cell_bbox_nm))
        return replace(s, centre_um=centre, frame=frame_key(c.cell, c.path))

    @classmethod
    def from_entry(cls, e: dict, where: str, per_cell: bool = True) -> Signature:
        """An entry's signature: per cell when it names one (and ``per_cell``), else
        its (first) placement's, in the top frame."""
        try:
            centre, frame = e["centre_um"], None
            if per_cell and "cell" in e:
                path = e["cell_path"]
                if not isinstance(path, list):
                    raise TypeError("cell_path is not a list")
                centre, frame = e["cell_centre_um"], frame_key(str(e["cell"]), path)
            return cls(
                str(e["layer"]),
                str(e["check"]),
                str(e.get("context", "")),
                _as_float(e["pitch_nm"]),
                _as_float(e["width_nm"]),
                _as_float(e["space_nm"]),
                float(e["orientation_deg"]),
                int(e["lines"]),
                (float(centre[0]), float(centre[1])),
                frame,
            )
        except (KeyError, TypeError, ValueError, IndexError) as exc:
            raise PitchguardError(f"{where}: baseline entry is malformed ({exc})") from None


def _as_float(v) -> float:
    return math.inf if v is None else float(v)


def _close(a: float, b: float) -> bool:
    # No pitch (an isolated line, a line end) is stored as null and read as inf.
    if not (math.isfinite(a) and math.isfinite(b)):
        return not (math.isfinite(a) or math.isfinite(b))
    return abs(a - b) <= max(PITCH_TOL_NM, PITCH_TOL_REL * max(abs(a), abs(b)))


def compatible(a: Signature, b: Signature) -> bool:
    """Same frame, layer, check, context and geometry within tolerance."""
    if (a.frame, a.layer, a.check, a.context) != (b.frame, b.layer, b.check, b.context):
        return False
    dang = abs(a.orientation_deg - b.orientation_deg) % 180.0
    if min(dang, 180.0 - dang) > ANGLE_TOL_DEG:
        return False
    if abs(a.lines - b.lines) > max(1, round(0.1 * max(a.lines, b.lines))):
        return False
    return (
        _close(a.pitch_nm, b.pitch_nm)
        and _close(a.width_nm, b.width_nm)
        and _close(a.space_nm, b.space_nm)
    )


def _bucket(s: Signature) -> tuple:
    """Coarse class: compatible signatures share it or sit in a neighbouring one."""
    p = s.pitch_nm
    pb = -1 if not math.isfinite(p) else int(math.floor(math.log(max(p, 1e-3)) / math.log(1.02)))
    return (s.frame, s.layer, s.check, s.context, pb)


def _candidates(old: list[Signature], new: list[Signature]) -> list[tuple[int, int]]:
    """Compatible pairs, found through pitch buckets (and positions for big groups)."""
    from scipy.spatial import cKDTree

    groups: dict[tuple, list[int]] = {}
    for i, a in enumerate(old):
        groups.setdefault(_bucket(a), []).append(i)
    pairs: list[tuple[int, int]] = []
    by_new: dict[tuple, list[int]] = {}
    for j, b in enumerate(new):
        by_new.setdefault(_bucket(b), []).append(j)
    for key, js in by_new.items():
        *head, pb = key
        olds: list[int] = []
        for d in (0,) if pb < 0 else (-2, -1, 0, 1, 2):
            olds.extend(groups.get((*head, pb + d), []))
        if not olds:
            continue
        if len(olds) * len(js) <= 250_000:
            cand = [(i, j) for j in js for i in olds]
        else:  # many identical findings: only the nearest few by position
            tree = cKDTree(np.array([old[i].centre_um for i in olds]))
            k = min(8, len(olds))
            _, nn = tree.query(np.array([new[j].centre_um for j in js]), k=k)
            nn = np.atleast_2d(nn)
            cand = [(olds[int(n)], j) for j, row in zip(js, nn, strict=True) for n in row]
        pairs.extend((i, j) for i, j in cand if compatible(old[i], new[j]))
    return pairs


def _shift(offsets: list[tuple[float, float]]) -> tuple[float, float]:
    """The most common offset (binned), refined by the mean of those near it."""
    bins = Counter((round(dx / SHIFT_BIN_UM), round(dy / SHIFT_BIN_UM)) for dx, dy in offsets)
    bx, by = bins.most_common(1)[0][0]
    near = [
        o
        for o in offsets
        if abs(o[0] / SHIFT_BIN_UM - bx) <= 1 and abs(o[1] / SHIFT_BIN_UM - by) <= 1
    ]
    return (sum(o[0] for o in near) / len(near), sum(o[1] for o in near) / len(near))


def match(old: list[Signature], new: list[Signature]) -> list[tuple[int, int]]:
    """Pairs ``(i_old, j_new)`` of compatible signatures, each index used at most
    once, nearest first once each frame's common shift is taken off."""
    pairs = _candidates(old, new)
    if not pairs:
        return []

    def offset(i, j):
        return (
            new[j].centre_um[0] - old[i].centre_um[0],
            new[j].centre_um[1] - old[i].centre_um[1],
        )

    # A frame's content may move as a whole (the layout, or a cell's drawing in its frame).
    by_frame: dict = {}
    for i, j in pairs:
        by_frame.setdefault(old[i].frame, []).append(offset(i, j))
    shift = {k: _shift(v) for k, v in by_frame.items()}

    def dist(i, j):
        dx, dy = offset(i, j)
        sx, sy = shift[old[i].frame]
        return math.hypot(dx - sx, dy - sy)

    used_i: set[int] = set()
    used_j: set[int] = set()
    out = []
    for i, j in sorted(pairs, key=lambda p: (dist(*p), p)):
        if i in used_i or j in used_j:
            continue
        used_i.add(i)
        used_j.add(j)
        out.append((i, j))
    return out


def units_of(findings, cells) -> list[CellFinding]:
    """What baselines and diffs compare: cell findings, or with no cells named
    (``cells`` None) every finding alone."""
    return each_alone(findings) if cells is None else group_by_cell(findings, cells)


class Pairing(NamedTuple):
    """Baseline entries paired with a scan: whole cell findings, then placements."""

    units: list[CellFinding]  # the scan's cell findings (each finding alone without cells)
    by_unit: list[tuple[int, int]]  # (entry, unit): every placement of the unit
    by_placement: list[tuple[int, int]]  # (entry, finding index): one placement


def pair_entries(entries: list[dict], findings, cells, where: str) -> Pairing:
    """Entries with a cell match the scan's cell findings; the rest (and, with no
    cells named, all) match the placements left one by one."""
    units = units_of(findings, cells)
    per_cell = cells is not None
    sigs = [Signature.from_entry(e, where, per_cell) for e in entries]
    by_unit: list[tuple[int, int]] = []
    left = np.ones(len(findings), dtype=bool)
    if per_cell:
        cell_e = [i for i, s in enumerate(sigs) if s.frame is not None]
        got = match([sigs[i] for i in cell_e], [Signature.of_unit(u) for u in units])
        by_unit = [(cell_e[i], j) for i, j in got]
        for _, j in by_unit:
            left[units[j].items] = False
    plain_e = [i for i, s in enumerate(sigs) if s.frame is None]
    by_placement: list[tuple[int, int]] = []
    if plain_e:
        rest = np.flatnonzero(left).tolist()
        got = match([sigs[i] for i in plain_e], [Signature.of(findings[k]) for k in rest])
        by_placement = [(plain_e[i], rest[j]) for i, j in got]
    return Pairing(units, by_unit, by_placement)


class Accepted(NamedTuple):
    """A baseline entry and what it accepts: a cell finding, or one placement."""

    entry: dict
    unit: CellFinding
    per_cell: bool  # matched as a cell finding (else one placement, top frame)


@dataclass
class Gate:
    """Findings split by a baseline."""

    new: list[Finding]  # every placement no entry accepts
    accepted: list[Accepted]  # per matched entry
    stale: list[dict]
    path: Path | None = None
    extra: dict = field(default_factory=dict)
    new_index: list[int] = field(default_factory=list)  # of ``new`` in the findings given
    expired: list[dict] = field(default_factory=list)  # entries past their date: match nothing

    @property
    def accepted_placements(self) -> int:
        return sum(a.unit.placements for a in self.accepted)


def _alone(u: CellFinding, k: int, f: Finding) -> CellFinding:
    """Placement ``k`` (finding ``f``) of the cell finding ``u``, as one of its own."""
    at = int(np.flatnonzero(u.items == k)[0])
    one = slice(at, at + 1)
    return u._replace(finding=f, items=u.items[one], m=u.m[one], t=u.t[one])


def _unit_of(units: list[CellFinding], n: int) -> np.ndarray:
    out = np.zeros(n, dtype=np.int64)
    for j, u in enumerate(units):
        out[u.items] = j
    return out


def apply_baseline(
    findings, entries: list[dict], path: Path | None = None, cells=None, today=None
) -> Gate:
    """Split ``findings`` (with their ``cells``, a ``run.cells.CellMap``, or None)
    by the baseline ``entries``; those whose ``expires`` date is ``today`` (default:
    the local date) or earlier accept nothing."""
    import datetime as dt

    day = today or dt.date.today()
    gone = [e for e in entries if expired(e, day)]
    entries = [e for e in entries if not expired(e, day)]
    p = pair_entries(entries, findings, cells, str(path))
    new = np.ones(len(findings), dtype=bool)
    accepted: list[Accepted] = []
    for i, j in p.by_unit:
        new[p.units[j].items] = False
        accepted.append(Accepted(entries[i], p.units[j], True))
    unit_of = _unit_of(p.units, len(findings)) if p.by_placement else None
    for i, k in p.by_placement:
        new[k] = False
        u = _alone(p.units[int(unit_of[k])], k, findings[k])
        accepted.append(Accepted(entries[i], u, False))
    accepted.sort(key=lambda a: int(a.unit.items[0]))
    matched = {i for i, _ in p.by_unit} | {i for i, _ in p.by_placement}
    new_index = np.flatnonzero(new).tolist()
    return Gate(
        new=[findings[k] for k in new_index],
        accepted=accepted,
        stale=[e for i, e in enumerate(entries) if i not in matched],
        path=path,
        new_index=new_index,
        expired=gone,
    )


def _at(xy) -> str:
    return f"({float(xy[0]):g}, {float(xy[1]):g}) µm"


def _pitch(p) -> str:
    return "no pitch" if p is None or not math.isfinite(p) else f"pitch {float(p):.1f} nm"


def entry_text(e: dict) -> str:
    """A baseline entry in one line of the terminal."""
    head = f"{e['layer']} {e['check']} {_pitch(e['pitch_nm'])}"
    if "cell" not in e:
        return f"{head} at {_at(e['centre_um'])}"
    if frame_key(e["cell"], e["cell_path"]) == TOP:
        return f"{head} in top cell {e['cell']} at {_at(e['cell_centre_um'])}"
    return f"{head} in cell {e['cell']} at {_at(e['cell_centre_um'])} of the cell"


def unit_text(c: CellFinding) -> str:
    """A cell finding (or a finding with no cell named) in one line of the terminal."""
    f = c.finding
    head = f"{f.layer} {f.check} {_pitch(f.pitch_nm)}"
    if not c.cell:
        return f"{head} at {_at(f.centre_um)}"
    if frame_key(c.cell, c.path) == TOP:
        return f"{head} in top cell {c.cell} at {_at(f.centre_um)}"
    n = c.placements
    return (
        f"{head} in cell {c.cell} at {_at(centre_um(box_um(c.cell_bbox_nm)))} of the cell, "
        f"{n} placement{'s' if n != 1 else ''}, first at {_at(f.centre_um)}"
    )


def accepted_to_dict(a: Accepted) -> dict:
    """An accepted entry as the JSON report lists it: what it accepted, and the
    people's notes."""
    u, f = a.unit, a.unit.finding
    return {
        "layer": f.layer,
        "check": f.check,
        "cell": u.cell or None,
        "cell_path": list(u.path),
        "cell_centre_um": list(centre_um(box_um(u.cell_bbox_nm))) if u.cell else None,
        "centre_um": list(f.centre_um),
        "placements": u.placements,
        "matched": "cell" if a.per_cell else "placement",
        "reason": a.entry.get("reason", ""),
        "owner": a.entry.get("owner", ""),
        EXPIRES: a.entry.get(EXPIRES),
    }


def entry_of(c: CellFinding, reason: str = "", owner: str = "", expires: str | None = None) -> dict:
    """A baseline entry: a cell finding (its first placement's place in the top
    frame for people), or a finding with no cell named; ``expires`` (an ISO date)
    only when given."""
    f = c.finding
    e = {
        "layer": f.layer,
        "check": f.check,
        "severity": f.severity,
        "pitch_nm": f.pitch_nm if math.isfinite(f.pitch_nm) else None,
        "width_nm": f.width_nm if math.isfinite(f.width_nm) else None,
        "space_nm": f.space_nm if math.isfinite(f.space_nm) else None,
        "orientation_deg": f.orientation_deg,
        "lines": f.lines,
        "context": f.context,
    }
    if c.cell:
        cell_box = box_um(c.cell_bbox_nm)
        e["cell"] = c.cell
        e["cell_path"] = list(c.path)
        e["cell_bbox_um"] = list(cell_box)
        e["cell_centre_um"] = list(centre_um(cell_box))
        e["placements"] = c.placements
    e["centre_um"] = list(f.centre_um)
    e["bbox_um"] = list(f.bbox_um)
    e["reason"] = reason
    e["owner"] = owner
    if expires is not None:
        e[EXPIRES] = expires
    return e


def load_baseline_file(path: Path) -> BaselineFile:
    """A baseline file, every entry checked (see ``baseline_entries``)."""
    base = read_baseline(path)
    for e in base.entries:  # whatever the scan names: per cell and per placement
        Signature.from_entry(e, str(path))
        Signature.from_entry(e, str(path), per_cell=False)
    return base


def load_baseline(path: Path) -> list[dict]:
    """A baseline file's entries, every one checked."""
    return load_baseline_file(path).entries


def deck_note(base: BaselineFile, path: Path, deck_name: str) -> str | None:
    """Why a baseline written with another deck may not fit this one, or None."""
    if base.deck is None or base.deck == deck_name:
        return None
    return (
        f"baseline {shown(path, 200)} was written with deck {shown(base.deck)!r}, not with "
        f"{shown(deck_name)!r}: its entries may not match this deck's findings"
    )


def expired_note(gate: Gate, path: Path, first: int = 3) -> str | None:
    """The entries past their expiry date (count and the first few), or None."""
    n = len(gate.expired)
    if not n:
        return None
    some = "; ".join(
        f"{shown(entry_text(e), 120)} (expired {e[EXPIRES]})" for e in gate.expired[:first]
    )
    more = f"; and {n - first} more" if n > first else ""
    return (
        f"baseline {shown(path, 200)}: {n} entr{'y' if n == 1 else 'ies'} past "
        f"{'its' if n == 1 else 'their'} expiry date accept{'s' if n == 1 else ''} "
        f"nothing: {some}{more}"
    )


def shown(text, limit: int = 80) -> str:
    """A user's text as a message shows it: cut to ``limit`` characters, control
    characters escaped."""
    from pitchguard.outputs.texts import printable

    text = str(text)
    return printable(text if len(text) <= limit else text[: limit - 1] + "…")


def write_baseline(
    path: Path,
    findings,
    deck_name: str,
    layout: str,
    inputs: list[Path],
    cells=None,
) -> int:
    """Record ``findings`` (per cell finding with their ``cells``, else one entry
    each); reasons, owners and expiry dates of an existing baseline at ``path``
    are kept.  Returns the number of entries written."""
    previous: list[dict] = []
    if os.path.isfile(path):  # only a regular file can hold one (False on any OS error)
        try:
            previous = load_baseline(path)
        except PitchguardError:
            previous = []  # not ours or broken: rewritten whole (atomically)
    p = pair_entries(previous, findings, cells, str(path))
    notes: dict[int, dict] = {}
    for i, j in p.by_unit:
        notes[j] = previous[i]
    if p.by_placement:
        unit_of = _unit_of(p.units, len(findings))
        for i, k in sorted(p.by_placement, key=lambda q: q[1]):
            notes.setdefault(int(unit_of[k]), previous[i])
    entries = []
    for j, u in enumerate(p.units):
        e = notes.get(j, {})
        entries.append(entry_of(u, e.get("reason", ""), e.get("owner", ""), e.get(EXPIRES)))
    payload = {
        "pitchguard_baseline": FORMAT_VERSION,
        "deck": deck_name,
        "layout": layout,
        "note": "accepted findings: fill in reason and owner; remove entries listed as stale",
        "entries": entries,
    }

    def w(tmp: Path) -> None:
        tmp.write_text(json.dumps(payload, indent=2, allow_nan=False) + "\n", encoding="utf-8")

    atomic_write(Path(path), w, inputs)
    return len(entries)


@dataclass
class Diff:
    """Two scans compared per cell finding (per placement when either names no cells)."""

    introduced: list[Finding]  # every placement of the new scan's unmatched cell findings
    fixed: list[CellFinding]  # the base scan's unmatched cell findings
    unchanged: list[tuple[CellFinding, CellFinding]]  # (base, new)
    introduced_index: list[int] = field(default_factory=list)  # into the new findings

    @property
    def fixed_placements(self) -> int:
        return sum(c.placements for c in self.fixed)

    @property
    def unchanged_placements(self) -> int:
        """Placements of the unchanged cell findings in the new scan."""
        return sum(c.placements for _, c in self.unchanged)


def diff(base, new, base_cells=None, new_cells=None) -> Diff:
    """Compare the findings of two scans (``*_cells``: their ``run.cells.CellMap``)."""
    if base_cells is None or new_cells is None:
        base_cells = new_cells = None
    bu, nu = units_of(base, base_cells), units_of(new, new_cells)
    pairs = match([Signature.of_unit(c) for c in bu], [Signature.of_unit(c) for c in nu])
    mb = {i for i, _ in pairs}
    mn = {j for _, j in pairs}
    introduced = np.zeros(len(new), dtype=bool)
    for j, c in enumerate(nu):
        if j not in mn:
            introduced[c.items] = True
    introduced_index = np.flatnonzero(introduced).tolist()
    return Diff(
        introduced=[new[k] for k in introduced_index],
        introduced_index=introduced_index,
        fixed=[c for i, c in enumerate(bu) if i not in mb],
        unchanged=[(bu[i], nu[j]) for i, j in sorted(pairs, key=lambda p: int(nu[p[1]].items[0]))],
    )
