"""Converters of the numeric options: finite numbers within bounds that say why.

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

MAX_TEXT = 40
"""Longest number text read: more digits than any bound here needs."""

_WHOLE = re.compile(r"[+-]?[0-9]+")


SHOWN = 20
"""Characters of a rejected value echoed in its message."""


def _shown(text: str) -> str:
    # repr escapes control and format characters (escape sequences, bidi overrides).
    return repr(text if len(text) <= SHOWN else text[:SHOWN] + "…")


def _num(v: float) -> str:
    return f"{int(v):,}" if v.is_integer() and abs(v) < 1e16 else f"{v:g}"


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


def whole(lo: int, hi: int, why: str):
    """A converter to an int in ``[lo, hi]``; ``why`` explains ``hi``.  Float
    notation of a whole number is taken (``1e6``)."""

    def convert(text: str) -> int:
        v = _whole(text)
        if v < lo:
            raise argparse.ArgumentTypeError(f"must be at least {lo}, got {_shown(text)}")
        if v > hi:
            raise argparse.ArgumentTypeError(f"must be at most {hi:,} ({why}), got {_shown(text)}")
        return v

    convert.__name__ = "whole number"
    return convert


def real(lo: float, hi: float, unit: str, why: str, above_lo: bool = False):
    """A converter to a finite float in ``[lo, hi]`` (``(lo, hi]`` with
    ``above_lo``) of ``unit``; ``why`` explains the bounds."""
    bounds = f"{'above' if above_lo else 'at least'} {_num(lo)} and at most {_num(hi)} {unit}"

    def convert(text: str) -> float:
        v = _real(text)
        if v < lo or (above_lo and v == lo) or v > hi:
            raise argparse.ArgumentTypeError(f"expected {bounds} ({why}), got {_shown(text)}")
        return v

    convert.__name__ = "number"
    return convert


LENGTH_MAX_NM = 1e7
COORD_MAX_UM = 1e6

length_nm = real(0.0, LENGTH_MAX_NM, "nm", "1 cm: larger than any feature", above_lo=True)
focus_nm = real(-1e5, 1e5, "nm", "100 µm: hundreds of times any depth of focus")
angle_deg = real(-360.0, 360.0, "degrees", "one turn either way")
tile_um = real(0.0, COORD_MAX_UM, "µm", "1 m: larger than any mask", above_lo=True)
seconds = real(0.1, 7 * 86400.0, "s", "waits are checked every 0.1 s; a week outlasts any read")
memory_mb = whole(1, 2**30, "1 PiB: more than any machine holds")
jobs = whole(1, 512, "each worker is a process of its own; past 4 per core they only wait")
top_rows = whole(1, 1_000_000, "terminal rows; --json lists every finding")
pictured = whole(0, 100_000, "two pictures each: more would make a page no browser opens")
shape_count = whole(1, 2**53, "shape counts are exact in the memory model's floats up to there")


def region_um(text: str) -> tuple[float, float, float, float]:
    """``X0,Y0,X1,Y1`` in µm: finite, within ±COORD_MAX_UM, X0 < X1 and Y0 < Y1."""
    need = (
        f"expected X0,Y0,X1,Y1 in µm with X0 < X1, Y0 < Y1 and each within ±{_num(COORD_MAX_UM)} "
        f"(1 m: larger than any mask), got {_shown(text)}"
    )
    parts = text.split(",")
    if len(parts) != 4:
        raise argparse.ArgumentTypeError(need)
    try:
        vals = tuple(_real(v) for v in parts)
    except argparse.ArgumentTypeError:
        raise argparse.ArgumentTypeError(need) from None
    x0, y0, x1, y1 = vals
    if not (x0 < x1 and y0 < y1) or max(abs(v) for v in vals) > COORD_MAX_UM:
        raise argparse.ArgumentTypeError(need)
    return vals  # type: ignore[return-value]


MAX_PITCHES = 2000
"""Pitches in one sweep: each is imaged through focus."""


def pitch_range(text: str) -> tuple[float, float, float]:
    """``FROM:TO:STEP`` in nm: 0 < FROM < TO <= LENGTH_MAX_NM, STEP > 0, at most MAX_PITCHES."""
    parts = text.split(":")
    if len(parts) != 3:
        raise argparse.ArgumentTypeError(
            f"expected FROM:TO:STEP in nm, e.g. 80:400:5, got {_shown(text)}"
        )
    lo, hi, step = (_real(v) for v in parts)
    if not (0 < lo < hi <= LENGTH_MAX_NM and step > 0) or (hi - lo) / step > MAX_PITCHES:
        raise argparse.ArgumentTypeError(
            f"need 0 < FROM < TO <= {_num(LENGTH_MAX_NM)} nm, STEP > 0 and at most "
            f"{MAX_PITCHES} pitches (each is imaged through focus), got {_shown(text)}"
        )
    return lo, hi, step
