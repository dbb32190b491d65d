"""A baseline file read and checked: every key of every entry of the right type,
finite and in range, and entries past their ``expires`` date told apart.

A baseline is edited by people (reasons, owners, expiry dates) and may come
from anywhere, so nothing in it is trusted: a wrong value is one error line
naming the file, the entry and the key, never a crash later in matching or
in a report.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import re
from pathlib import Path
from typing import NamedTuple

from pitchguard.errors import PitchguardError, nesting_depth, read_input_text

FORMAT_VERSION = 1
"""Entries with a cell add keys to version 1 (a reader that ignores them gates
per placement: stricter, never looser)."""

MAX_NESTING = 8
"""Deepest nesting of objects and arrays a baseline may have (it needs four)."""

MAX_COORD_UM = 1e7
"""Largest coordinate (µm): 10 m, beyond any layout (GDSII holds 32-bit integers
of its database unit: 2.1 m at 1 nm)."""

MAX_LENGTH_NM = 1e9
"""Largest pitch, width or space (nm): a metre."""

MAX_COUNT = 10**12
"""Largest line or placement count."""

MAX_TEXT = 100_000
"""Longest text (characters) of a key: names, reasons, owners."""

EXPIRES = "expires"
"""The entry key of an expiry date (``"YYYY-MM-DD"``): from that day on the
entry accepts nothing."""

_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")

SHOWN = 60
"""How much of a bad value an error quotes."""


class BaselineFile(NamedTuple):
    """A baseline as read: its entries and the deck it was written with."""

    entries: list[dict]
    deck: str | None  # the deck's name when written; None if not recorded


def _quoted(v) -> str:
    text = repr(v)
    return text if len(text) <= SHOWN else text[: SHOWN - 1] + "…"


def _not_finite(text: str):
    raise ValueError(f"{text} is not a number")


def _finite_float(text: str) -> float:
    v = float(text)
    if not math.isfinite(v):
        raise ValueError(f"{text} is not a finite number")
    return v


def read_baseline(path: Path) -> BaselineFile:
    """Read and check a baseline file (PitchguardError, one line, if anything is wrong)."""
    where = str(path)
    text = read_input_text(Path(path), "baseline", PitchguardError)
    try:
        data = json.loads(text, parse_constant=_not_finite, parse_float=_finite_float)
    except json.JSONDecodeError as exc:
        raise PitchguardError(
            f"{where}: not a JSON baseline: {exc.msg} at line {exc.lineno}"
        ) from None
    except ValueError as exc:  # NaN, Infinity, or a number too large for a float
        raise PitchguardError(f"{where}: not a JSON baseline: {exc}") from None
    except RecursionError:
        raise PitchguardError(
            f"{where}: not a baseline: arrays or objects nest deeper than the JSON "
            f"parser follows (a baseline nests {MAX_NESTING} levels at most)"
        ) from None
    if not isinstance(data, dict) or data.get("pitchguard_baseline") != FORMAT_VERSION:
        raise PitchguardError(
            f'{where}: not a pitchguard baseline (expected "pitchguard_baseline": {FORMAT_VERSION})'
        )
    if nesting_depth(data, MAX_NESTING) > MAX_NESTING:
        raise PitchguardError(
            f"{where}: not a baseline: arrays or objects nest deeper than {MAX_NESTING} levels"
        )
    entries = data.get("entries")
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
        raise PitchguardError(f'{where}: baseline "entries" must be a list of objects')
    for i, e in enumerate(entries):
        problem = entry_problem(e)
        if problem:
            raise PitchguardError(f"{where}: baseline entry is malformed: entry {i + 1}: {problem}")
    deck = data.get("deck")
    return BaselineFile(entries, deck if isinstance(deck, str) else None)


def _number(v, lo: float, hi: float, nullable: bool = False) -> str | None:
    if v is None and nullable:
        return None
    if isinstance(v, bool) or not isinstance(v, int | float):
        return f"expected a number{' or null' if nullable else ''}, got {_quoted(v)}"
    if not (lo <= v <= hi):
        return f"{_quoted(v)} is outside {lo:g}..{hi:g}"
    return None


def _point(v, size: int) -> str | None:
    if not isinstance(v, list) or len(v) != size:
        return f"expected a list of {size} numbers, got {_quoted(v)}"
    for x in v:
        p = _number(x, -MAX_COORD_UM, MAX_COORD_UM)
        if p:
            return p + " (µm)"
    return None


def _text(v) -> str | None:
    if not isinstance(v, str):
        return f"expected text, got {_quoted(v)}"
    if len(v) > MAX_TEXT:
        return f"text of {len(v):,} characters is longer than {MAX_TEXT:,}"
    return None


def _count(v) -> str | None:
    if isinstance(v, bool) or not isinstance(v, int):
        return f"expected a whole number, got {_quoted(v)}"
    return None if 0 <= v <= MAX_COUNT else f"{v} is outside 0..{MAX_COUNT:g}"


def _path(v) -> str | None:
    if not isinstance(v, list) or not v:
        return f"expected a list of cell names, got {_quoted(v)}"
    for name in v:
        p = _text(name)
        if p:
            return p
    return None


def _date(v) -> str | None:
    if not isinstance(v, str) or not _ISO_DATE.match(v):
        return f'expected a date "YYYY-MM-DD", got {_quoted(v)}'
    try:
        dt.date.fromisoformat(v)
    except ValueError:
        return f"{_quoted(v)} is not a calendar date"
    return None


_REQUIRED = {
    "layer": _text,
    "check": _text,
    "pitch_nm": lambda v: _number(v, 0.0, MAX_LENGTH_NM, nullable=True),
    "width_nm": lambda v: _number(v, 0.0, MAX_LENGTH_NM, nullable=True),
    "space_nm": lambda v: _number(v, 0.0, MAX_LENGTH_NM, nullable=True),
    "orientation_deg": lambda v: _number(v, -360.0, 360.0),
    "lines": _count,
    "centre_um": lambda v: _point(v, 2),
}
_OPTIONAL = {
    "context": _text,
    "severity": _text,
    "reason": _text,
    "owner": _text,
    "cell": _text,
    "cell_path": _path,
    "cell_centre_um": lambda v: _point(v, 2),
    "cell_bbox_um": lambda v: _point(v, 4),
    "bbox_um": lambda v: _point(v, 4),
    "placements": _count,
    EXPIRES: _date,
}


def entry_problem(e: dict) -> str | None:
    """What is wrong with a baseline entry (``key: why``), or None."""
    for key, check in _REQUIRED.items():
        if key not in e:
            return f"{key}: required key is missing"
        p = check(e[key])
        if p:
            return f"{key}: {p}"
    if "cell" in e:
        for key in ("cell_path", "cell_centre_um"):
            if key not in e:
                return f"{key}: required with cell"
    for key, check in _OPTIONAL.items():
        if key in e:
            p = check(e[key])
            if p:
                return f"{key}: {p}"
    return None


def expired(e: dict, today: dt.date) -> bool:
    """Whether the entry's ``expires`` date (checked when read) has come."""
    when = e.get(EXPIRES)
    return when is not None and dt.date.fromisoformat(when) <= today
