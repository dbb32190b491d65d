"""Bounds of the numeric options, each with why, and the checks of the Python API.

One table for both: the command line's converters (``cli.numbers``) read
text into numbers within these bounds, and the API's functions check their
arguments against the same bounds with :func:`checked`.  Light on imports:
the command line imports this module before any scan.
"""

from __future__ import annotations

import math
import numbers
import re
from dataclasses import dataclass
from urllib.parse import urlsplit

from pitchguard.errors import PitchguardError

MIN_LENGTH_NM = 1e-3
"""Shortest length: a picometre, below any layout's database unit (as deck lengths)."""

MAX_LENGTH_NM = 1e7
"""Longest length: 1 cm, larger than any feature."""

COORD_MAX_UM = 1e6
"""Largest coordinate or tile, µm: 1 m, larger than any mask."""

MAX_PITCHES = 2000
"""Pitches in one sweep: each is imaged through focus."""

SHOWN = 20
"""Characters of a refused value echoed in its message."""


def number_text(v: float) -> str:
    """A bound as messages write it: whole numbers with thousands separators."""
    return f"{int(v):,}" if float(v).is_integer() and abs(v) < 1e16 else f"{v:g}"


@dataclass(frozen=True)
class Bound:
    """The numbers an option takes: ``[lo, hi]`` (``(lo, hi]`` with ``above_lo``)
    of ``unit``, whole numbers only with ``whole``; ``why`` explains the bounds."""

    lo: float
    hi: float
    why: str
    unit: str = ""
    whole: bool = False
    above_lo: bool = False

    def fault(self, v: float) -> str | None:
        """What is wrong with the finite number ``v`` ("must be ..."), or None."""
        if self.whole:
            if v < self.lo:
                return f"must be at least {number_text(self.lo)}"
            if v > self.hi:
                return f"must be at most {number_text(self.hi)} ({self.why})"
            return None
        if v < self.lo or (self.above_lo and v == self.lo) or v > self.hi:
            low = f"{'above' if self.above_lo else 'at least'} {number_text(self.lo)}"
            return f"must be {low} and at most {number_text(self.hi)} {self.unit} ({self.why})"
        return None


LENGTH_NM = Bound(
    MIN_LENGTH_NM,
    MAX_LENGTH_NM,
    "a picometre is below any database unit; 1 cm is larger than any feature",
    "nm",
)
FOCUS_NM = Bound(-1e5, 1e5, "100 µm: hundreds of times any depth of focus", "nm")
ANGLE_DEG = Bound(-360.0, 360.0, "one turn either way", "degrees")
TILE_UM = Bound(0.0, COORD_MAX_UM, "1 m: larger than any mask", "µm", above_lo=True)
SECONDS = Bound(0.1, 7 * 86400.0, "waits are checked every 0.1 s; a week outlasts any read", "s")
MEMORY_MB = Bound(1, 2**30, "1 PiB: more than any machine holds", whole=True)
JOBS = Bound(
    1, 512, "each worker is a process of its own; past 4 per core they only wait", whole=True
)
TOP_ROWS = Bound(1, 1_000_000, "terminal rows; --json lists every finding", whole=True)
PICTURED = Bound(
    0, 100_000, "two pictures each: more would make a page no browser opens", whole=True
)
SHAPE_COUNT = Bound(
    1, 2**53, "shape counts are exact in the memory model's floats up to there", whole=True
)

REGION_NEED = (
    f"X0,Y0,X1,Y1 in µm with X0 < X1, Y0 < Y1 and each within ±{number_text(COORD_MAX_UM)} "
    "(1 m: larger than any mask)"
)


def region_fault(vals: tuple[float, ...]) -> bool:
    """Whether four finite numbers fail to be a region (``REGION_NEED``)."""
    x0, y0, x1, y1 = vals
    return not (x0 < x1 and y0 < y1) or max(abs(v) for v in vals) > COORD_MAX_UM


def _value_text(value: object) -> str:
    if isinstance(value, int) and abs(value).bit_length() > 128:  # repr refuses huge ints
        return f"a whole number of about {int(abs(value).bit_length() * 0.30103)} digits"
    text = repr(value)
    return text if len(text) <= SHOWN else text[:SHOWN] + "…"


def checked(name: str, value: object, bound: Bound) -> float | int:
    """``value`` of the API argument ``name`` as a number within ``bound`` (an int
    for a whole bound): TypeError when it is no number (a bool is none here),
    PitchguardError naming ``name`` and the bound when it is outside it."""
    kind = "a whole number" if bound.whole else "a number"
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise TypeError(f"{name} must be {kind}, got {type(value).__name__}")
    if isinstance(value, numbers.Integral):
        v: float | int = int(value)  # compared exactly, however large
    else:
        try:
            v = float(value)
        except OverflowError:  # a fraction beyond any float
            v = math.inf
        if not math.isfinite(v):
            raise PitchguardError(f"{name} must be a finite number, got {_value_text(value)}")
        if bound.whole:
            if not v.is_integer():
                raise PitchguardError(f"{name} must be a whole number, got {_value_text(value)}")
            v = int(v)
    fault = bound.fault(v)
    if fault is not None:
        raise PitchguardError(f"{name} {fault}, got {_value_text(value)}")
    return v if bound.whole else float(v) + 0.0  # -0.0 is 0


def checked_region(name: str, value: object) -> tuple[float, float, float, float]:
    """``value`` of the API argument ``name`` as a region (``REGION_NEED``)."""
    if isinstance(value, str | bytes) or not hasattr(value, "__len__") or len(value) != 4:
        raise TypeError(f"{name} must be four numbers (X0, Y0, X1, Y1), got {_value_text(value)}")
    vals = []
    for v in value:
        if isinstance(v, bool) or not isinstance(v, numbers.Real):
            raise TypeError(f"{name} must be four numbers, got {type(v).__name__} among them")
        try:
            vals.append(float(v) + 0.0)
        except OverflowError:  # an int beyond any float: beyond any bound too
            vals.append(math.inf)
    if not all(math.isfinite(v) for v in vals) or region_fault(tuple(vals)):
        raise PitchguardError(f"{name} must be {REGION_NEED}, got {_value_text(tuple(value))}")
    return tuple(vals)  # type: ignore[return-value]


SCHEDULER_TIMEOUT_S = 10.0
"""How long a scan waits for a dask scheduler to answer: one on the network answers
within a second or two, and a wrong address should not hold the command."""

SCHEDULER_SCHEMES = ("tcp", "ws", "inproc")
"""How the scans may reach a dask scheduler: tls and wss need certificates and ucx
needs UCX packages, neither of which pitchguard takes."""

NEEDS_HOST_PORT = ("tcp", "ws")
_INPROC_PATH = re.compile(r"/[0-9]+/[0-9]+")
"""An in-process scheduler's address after its host: /PROCESS/NUMBER."""

_FORM = "expected [tcp://]HOST:PORT or ws://HOST:PORT"


def scheduler_fault(address: str) -> str | None:
    """What is wrong with the form of a dask scheduler address (``[tcp://]HOST:PORT``,
    ``ws://HOST:PORT`` or an in-process scheduler's), or None."""
    text = address.strip()
    if not text:
        return f"no address given ({_FORM})"
    if "://" not in text:
        text = "tcp://" + text
    try:
        parts = urlsplit(text)
        port = parts.port
    except ValueError as exc:  # an open bracket, a port out of range
        return f"not an address: {exc} ({_FORM})"
    scheme = parts.scheme.lower()
    if scheme in ("tls", "wss", "ucx"):
        return f"{scheme}:// needs certificates or packages pitchguard does not take ({_FORM})"
    if scheme not in SCHEDULER_SCHEMES:
        return f"unknown protocol {scheme!r} ({_FORM})"
    if scheme in NEEDS_HOST_PORT:
        if not parts.hostname:
            return f"no host ({_FORM})"
        if port is None or port == 0:
            return f"no port ({_FORM})"
        if parts.path not in ("", "/") or parts.query or parts.fragment or parts.username:
            return f"more than a host and a port ({_FORM})"
    elif not (parts.hostname and _INPROC_PATH.fullmatch(parts.path)):
        return f"not an in-process address (inproc://HOST/PROCESS/NUMBER; {_FORM})"
    return None


def unreachable(address: str, why: str) -> PitchguardError:
    """The error of a scan that cannot reach the dask scheduler at ``address``."""
    from pitchguard.outputs.user_text import shown

    return PitchguardError(
        f"cannot connect to the dask scheduler at {shown(address)}: {shown(why, 240)}"
    )


def checked_scheduler(name: str, address: object) -> str | None:
    """``address`` (of the API argument ``name``) if None or of a scheduler
    address's form: TypeError when it is no string, PitchguardError when not."""
    if address is None:
        return None
    if not isinstance(address, str):
        raise TypeError(f"{name} must be a string (HOST:PORT), got {type(address).__name__}")
    fault = scheduler_fault(address)
    if fault is not None:
        raise unreachable(address, fault)
    return address
