"""Converters of the numeric options: finite numbers within the bounds of
``pitchguard.option_bounds`` (shared with the Python API), which say why.

Each raises :class:`argparse.ArgumentTypeError` with one line, which the
parser prints after the option's name (and cli.config after the settings
key).  Python's own parsers are too lenient here: ``float`` takes ``inf``,
``nan`` and ``1e400`` (infinite), ``int`` takes digit strings thousands
long, and truncating a float to an int turns ``2.5`` into 2 silently.
"""

from __future__ import annotations

import argparse
import math
import re

from pitchguard import option_bounds as bounds
from pitchguard.option_bounds import MAX_PITCHES, Bound
from pitchguard.option_bounds import number_text as _num

MAX_TEXT = 40
"""Longest number text read: more digits than any bound here needs."""

_WHOLE = re.compile(r"[+-]?[0-9]+")


SHOWN = bounds.SHOWN


def _shown(text: str) -> str:
    # repr escapes control and format characters (escape sequences, bidi overrides).
    return repr(text if len(text) <= SHOWN else text[:SHOWN] + "…")


def _real(text: str) -> float:
    t = text.strip()
    if len(t) > MAX_TEXT:
        raise argparse.ArgumentTypeError(f"expected a number, got {_shown(text)}")
    try:
        v = float(t)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {_shown(text)}") from None
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {_shown(text)}")
    return v + 0.0  # -0.0 is 0


def _whole(text: str) -> int:
    t = text.strip()
    if len(t) <= MAX_TEXT and _WHOLE.fullmatch(t):
        return int(t)
    try:
        v = _real(text)
    except argparse.ArgumentTypeError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {_shown(text)}") from None
    if not v.is_integer():
        raise argparse.ArgumentTypeError(f"expected a whole number, got {_shown(text)}")
    return int(v)


def converter(bound: Bound):
    """A converter of an option's text to a number within ``bound``; float
    notation of a whole number is taken for a whole bound (``1e6``)."""
    read = _whole if bound.whole else _real

    def convert(text: str) -> float | int:
        v = read(text)
        fault = bound.fault(v)
        if fault is not None:
            raise argparse.ArgumentTypeError(f"{fault}, got {_shown(text)}")
        return v

    convert.__name__ = "whole number" if bound.whole else "number"
    convert.number_text = True  # its text may start with '-' (cli.parser)
    return convert


length_nm = converter(bounds.LENGTH_NM)
focus_nm = converter(bounds.FOCUS_NM)
angle_deg = converter(bounds.ANGLE_DEG)
tile_um = converter(bounds.TILE_UM)
seconds = converter(bounds.SECONDS)
memory_mb = converter(bounds.MEMORY_MB)
jobs = converter(bounds.JOBS)
top_rows = converter(bounds.TOP_ROWS)
pictured = converter(bounds.PICTURED)
shape_count = converter(bounds.SHAPE_COUNT)


def region_um(text: str) -> tuple[float, float, float, float]:
    """``X0,Y0,X1,Y1`` in µm (option_bounds.REGION_NEED)."""
    need = f"expected {bounds.REGION_NEED}, got {_shown(text)}"
    parts = text.split(",")
    if len(parts) != 4:
        raise argparse.ArgumentTypeError(need)
    try:
        vals = tuple(_real(v) for v in parts)
    except argparse.ArgumentTypeError:
        raise argparse.ArgumentTypeError(need) from None
    if bounds.region_fault(vals):
        raise argparse.ArgumentTypeError(need)
    return vals  # type: ignore[return-value]


def pitch_range(text: str) -> tuple[float, float, float]:
    """``FROM:TO:STEP`` in nm: lengths (option_bounds.LENGTH_NM) with FROM < TO,
    at most MAX_PITCHES of them."""
    parts = text.split(":")
    if len(parts) != 3:
        raise argparse.ArgumentTypeError(
            f"expected FROM:TO:STEP in nm, e.g. 80:400:5, got {_shown(text)}"
        )
    lo, hi, step = (_real(v) for v in parts)
    least = bounds.MIN_LENGTH_NM
    if (
        not (least <= lo < hi <= bounds.MAX_LENGTH_NM and step >= least)
        or (hi - lo) / step > MAX_PITCHES
    ):
        raise argparse.ArgumentTypeError(
            f"need {_num(least)} <= FROM < TO <= {_num(bounds.MAX_LENGTH_NM)} nm, "
            f"STEP >= {_num(least)} nm and at most {MAX_PITCHES} pitches (each is imaged "
            f"through focus), got {_shown(text)}"
        )
    return lo, hi, step


for _convert in (region_um, pitch_range):
    _convert.number_text = True
