"""Baselines (accepted findings) and diffs between scans, matched by signature."""

from __future__ import annotations

import json
import math
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

from pitchguard.errors import PitchguardError, read_input_text
from pitchguard.judge.findings import Finding
from pitchguard.outputs.files import atomic_write

FORMAT_VERSION = 1


PITCH_TOL_NM = 1.0


PITCH_TOL_REL = 0.01


ANGLE_TOL_DEG = 1.0


SHIFT_BIN_UM = 0.5


@dataclass(frozen=True)
class Signature:
    """What identifies a finding, coordinates aside."""

    layer: str
    check: str
    context: str
    pitch_nm: float
    width_nm: float
    space_nm: float
    orientation_deg: float
    lines: int
    centre_um: tuple[float, float]

    @classmethod
    def of(cls, f: Finding) -> Signature:
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
    def from_entry(cls, e: dict, where: str) -> Signature:
        try:
            return cls(
                str(e["layer"]),
                str(e["check"]),
                str(e.get("context", "")),
                _as_float(e["pitch_nm"]),
                _as_float(e["width_nm"]),
                _as_float(e["space_nm"]),
                float(e["orientation_deg"]),
                int(e["lines"]),
                (float(e["centre_um"][0]), float(e["centre_um"][1])),
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
    """Same layer, check, context and geometry within tolerance."""
    if (a.layer, a.check, a.context) != (b.layer, b.check, b.context):
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
    return (s.layer, s.check, s.context, pb)


def _candidates(old: list[Signature], new: list[Signature]) -> list[tuple[int, int]]:
    """Compatible pairs, found through pitch buckets (and positions for big groups)."""
    import numpy as np
    from scipy.spatial import cKDTree

    groups: dict[tuple, list[int]] = {}
    for i, a in enumerate(old):
        groups.setdefault(_bucket(a), []).append(i)
    pairs: list[tuple[int, int]] = []
    by_new: dict[tuple, list[int]] = {}
    for j, b in enumerate(new):
        by_new.setdefault(_bucket(b), []).append(j)
    for key, js in by_new.items():
        layer, check, context, pb = key
        olds: list[int] = []
        for d in (0,) if pb < 0 else (-2, -1, 0, 1, 2):
            olds.extend(groups.get((layer, check, context, pb + d), []))
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


def match(old: list[Signature], new: list[Signature]) -> list[tuple[int, int]]:
    """Pairs ``(i_old, j_new)``, each index used at most once."""
    pairs = _candidates(old, new)
    if not pairs:
        return []

    def offset(i, j):
        return (
            new[j].centre_um[0] - old[i].centre_um[0],
            new[j].centre_um[1] - old[i].centre_um[1],
        )

    # The most common offset between paired positions is taken as a global shift.
    bins = Counter(
        (round(dx / SHIFT_BIN_UM), round(dy / SHIFT_BIN_UM))
        for dx, dy in (offset(i, j) for i, j in pairs)
    )
    bx, by = bins.most_common(1)[0][0]
    near = [
        o
        for o in (offset(i, j) for i, j in pairs)
        if abs(o[0] / SHIFT_BIN_UM - bx) <= 1 and abs(o[1] / SHIFT_BIN_UM - by) <= 1
    ]
    sx = sum(o[0] for o in near) / len(near)
    sy = sum(o[1] for o in near) / len(near)

    def dist(i, j):
        dx, dy = offset(i, j)
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


@dataclass
class Gate:
    """Findings split by a baseline."""

    new: list[Finding]
    accepted: list[tuple[Finding, dict]]
    stale: list[dict]
    path: Path | None = None
    extra: dict = field(default_factory=dict)
    new_index: list[int] = field(default_factory=list)  # of ``new`` in the findings given


def entry_of(f: Finding, reason: str = "", owner: str = "") -> dict:
    return {
        "layer": f.layer,
        "check": f.check,
        "severity": f.severity,
        "pitch_nm": f.pitch_nm if math.isfinite(f.pitch_nm) else None,
        "width_nm": f.width_nm if math.isfinite(f.width_nm) else None,
        "space_nm": f.space_nm if math.isfinite(f.space_nm) else None,
        "orientation_deg": f.orientation_deg,
        "lines": f.lines,
        "context": f.context,
        "centre_um": list(f.centre_um),
        "bbox_um": list(f.bbox_um),
        "reason": reason,
        "owner": owner,
    }


def load_baseline(path: Path) -> list[dict]:
    where = str(path)
    text = read_input_text(Path(path), "baseline", PitchguardError)
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise PitchguardError(
            f"{where}: not a JSON baseline: {exc.msg} at line {exc.lineno}"
        ) from None
    if not isinstance(data, dict) or data.get("pitchguard_baseline") != FORMAT_VERSION:
        raise PitchguardError(
            f'{where}: not a pitchguard baseline (expected "pitchguard_baseline": {FORMAT_VERSION})'
        )
    entries = data.get("entries")
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
        raise PitchguardError(f'{where}: baseline "entries" must be a list of objects')
    for e in entries:
        Signature.from_entry(e, where)  # validate early: one clear error
    return entries


def apply_baseline(findings: list[Finding], entries: list[dict], path: Path | None = None) -> Gate:
    old = [Signature.from_entry(e, str(path)) for e in entries]
    new = [Signature.of(f) for f in findings]
    pairs = match(old, new)
    matched_new = {j for _, j in pairs}
    matched_old = {i for i, _ in pairs}
    accepted = [(findings[j], entries[i]) for i, j in sorted(pairs, key=lambda p: p[1])]
    new_index = [j for j in range(len(findings)) if j not in matched_new]
    return Gate(
        new=[findings[j] for j in new_index],
        accepted=accepted,
        stale=[e for i, e in enumerate(entries) if i not in matched_old],
        path=path,
        new_index=new_index,
    )


def write_baseline(
    path: Path, findings: list[Finding], deck_name: str, layout: str, inputs: list[Path]
) -> None:
    """Record ``findings``; reasons and owners of an existing baseline at ``path`` are kept."""
    previous: list[dict] = []
    if Path(path).exists():
        try:
            previous = load_baseline(path)
        except PitchguardError:
            previous = []  # not ours or broken: rewritten whole (atomically)
    entries = [entry_of(f) for f in findings]
    if previous:
        for i, j in match(
            [Signature.from_entry(e, str(path)) for e in previous],
            [Signature.of(f) for f in findings],
        ):
            entries[j]["reason"] = previous[i].get("reason", "")
            entries[j]["owner"] = previous[i].get("owner", "")
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


@dataclass
class Diff:
    introduced: list[Finding]
    fixed: list[Finding]
    unchanged: list[tuple[Finding, Finding]]  # (base, new)
    introduced_index: list[int] = field(default_factory=list)  # into the new findings


def diff(base: list[Finding], new: list[Finding]) -> Diff:
    pairs = match([Signature.of(f) for f in base], [Signature.of(f) for f in new])
    mb = {i for i, _ in pairs}
    mn = {j for _, j in pairs}
    introduced_index = [j for j in range(len(new)) if j not in mn]
    return Diff(
        introduced=[new[j] for j in introduced_index],
        introduced_index=introduced_index,
        fixed=[f for i, f in enumerate(base) if i not in mb],
        unchanged=[(base[i], new[j]) for i, j in sorted(pairs, key=lambda p: p[1])],
    )
