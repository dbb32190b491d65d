"""The Finding record every report renders; FindingSet: distinct findings and where they recur."""

from __future__ import annotations

import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, fields
from operator import attrgetter
from typing import NamedTuple

import numpy as np

from pitchguard.deck import SEVERITIES
from pitchguard.judge.checks import Violation


class ArrayShape(NamedTuple):
    """What a finding on an array of compact features adds (drawn nm, layout frame)."""

    lattice: str  # square, rectangular, centred, hexagonal, oblique, row
    a1_nm: tuple[float, float]  # shortest lattice vector
    a2_nm: tuple[float, float]  # shortest one independent of it (NaN for a row)
    feature_nm: tuple[float, float]  # w, h in the feature's frame
    feature_angle_deg: float
    features: int
    columns: int  # along a1
    rows: int  # along a2
    orders: tuple[tuple[int, int], ...]  # (m, n) of a1, a2's reciprocal vectors passed
    worst_angle_deg: float  # pitch direction of the worst lattice direction


class TipShape(NamedTuple):
    """What a finding on a line end adds: the clip it was judged on."""

    kind: str  # tip-to-tip | tip-to-side
    pullback_nm: float  # drawn minus printed tip at best focus, wafer (+ = short; nan: closed)
    gap_printed_nm: float  # printed tip to what it faces as printed, best focus, wafer
    closes_at_focus_nm: float  # least defocus at which the gap closes (nan: never in range)
    angle_deg: float  # the tip's outward direction in the layout (the clip frame's x axis)
    rects_nm: tuple[tuple[float, float, float, float], ...]  # the clip, tip frame, drawn


CLIP_KINDS = ("alone", "group")
"""``ArrayShape.lattice`` of a compact feature judged on a clip of its own: no other of
its shape within reach, or a lattice no neighbour confirms (pairs, irregular
groups, an array's ragged edge)."""


@dataclass(frozen=True, slots=True)
class Finding:
    """One region of one layer that breaks a check.  Every report renders this."""

    layer: str
    source: str  # "L/D" in the layout
    exposure: str
    check: str
    severity: str
    pitch_nm: float  # smallest pitch in the region, as drawn
    pitch_max_nm: float
    width_nm: float  # of the worst site, as drawn (line, or opening on a dark field)
    space_nm: float
    wafer_pitch_nm: float
    k1: float
    orientation_deg: float  # direction the lines run, 0 = along x
    orders: tuple[int, ...]
    orders_on_axis: tuple[int, ...]
    two_beam_fraction: float
    cutoff_pitch_nm: float  # wafer scale
    lines: int
    periodicity: str  # dense | semi-isolated | isolated
    sites: int
    run_nm: float  # longest run length among the region's sites, as drawn
    bbox_nm: tuple[float, float, float, float]
    outline_nm: tuple[tuple[float, float], ...]  # oriented rectangle, 4 corners
    limit: str
    message: str
    hint: str
    # Image metrics of the worst site (nan when not imaged); CDs in wafer nm.
    contrast: float = math.nan
    nils: float = math.nan
    cd_nm: float = math.nan
    cd_error_pct: float = math.nan
    el_pct: float = math.nan
    dof_nm: float = math.nan
    # Printed minus drawn edges along the cut (wafer nm, + towards the cut's +x):
    # how far the printed feature's centre sits off the drawn one, and the larger
    # edge displacement (+ outward).  nan where not measured.
    shift_nm: float = math.nan
    epe_nm: float = math.nan
    bias_nm: float = math.nan  # mask bias per edge judged as sized (sizing = "retarget")
    violations: tuple[Violation, ...] = ()
    context: str = ""  # worst site's line: interior | outer (last line of an array) | alone
    # The worst site's cut, for pictures: material boundaries (wafer nm, relative
    # to the feature centre), the pitch direction of the cut in the layout
    # (degrees), where the cut crosses the worst edge (drawn nm), and the
    # nominal threshold.
    cut_bounds_nm: tuple[float, ...] = ()
    cut_angle_deg: float = math.nan
    cut_origin_nm: tuple[float, float] = (math.nan, math.nan)
    threshold: float = math.nan
    # Arrays of compact features (contacts, vias, posts): the lattice; None for lines.
    array: ArrayShape | None = None
    # Line ends (context "line-end"): the clip; None otherwise.
    tip: TipShape | None = None

    @property
    def bbox_um(self) -> tuple[float, float, float, float]:
        return box_um(self.bbox_nm)

    @property
    def centre_um(self) -> tuple[float, float]:
        return centre_um(self.bbox_um)

    @property
    def severity_rank(self) -> int:
        return SEVERITIES.index(self.severity)


def box_um(bbox_nm) -> tuple[float, float, float, float]:
    """A box in nm as reports give it: um, to the 0.001 nm the layout can hold."""
    return tuple(round(v / 1000.0, 6) for v in bbox_nm)


def centre_um(bbox_um) -> tuple[float, float]:
    """The centre of a box in um (:func:`box_um`), as reports give it."""
    x0, y0, x1, y1 = bbox_um
    return (round((x0 + x1) / 2, 4), round((y0 + y1) / 2, 4))


FIELDS = tuple(f.name for f in fields(Finding))
_FIELD_VALUES = attrgetter(*FIELDS)
_PLACED = tuple(FIELDS.index(n) for n in ("bbox_nm", "outline_nm", "cut_origin_nm"))


def replaced(f: Finding, **changes) -> Finding:
    """A copy of ``f`` with ``changes``: :func:`dataclasses.replace`, in half the time.

    The constructor is called with every field by position (``replace`` passes
    them by keyword and checks each); a chip's findings are copied by the
    million when they are placed.  Tests check it against ``replace``.
    """
    values = list(_FIELD_VALUES(f))
    for name, value in changes.items():
        values[FIELDS.index(name)] = value
    return Finding(*values)


def placed(f: Finding, dx: float, dy: float) -> Finding:
    """``f`` moved by ``(dx, dy)`` nm: the same as ``replaced`` with its box, outline
    and cut origin moved (tested), by index."""
    values = list(_FIELD_VALUES(f))
    x0, y0, x1, y1 = f.bbox_nm
    cx, cy = f.cut_origin_nm
    ib, io, ic = _PLACED
    values[ib] = (x0 + dx, y0 + dy, x1 + dx, y1 + dy)
    values[io] = tuple([(x + dx, y + dy) for x, y in f.outline_nm])
    values[ic] = (cx + dx, cy + dy)
    return Finding(*values)


class FindingSet(Sequence):
    """Findings stored as distinct findings and the offsets they recur at.

    A layout repeats itself: a tiled scan of a chip finds 10^5-10^6 regions
    that are copies of a few hundred, moved.  Item ``k`` is
    ``distinct[which[k]]`` moved by ``offset[k]`` (nm); it is made when it is
    read and is equal, field for field, to a finding made at
    that place.  Counting, sorting and gating work on the columns without
    making the items.  Reads as a list of :class:`Finding` (and compares
    equal to one with the same items).
    """

    __slots__ = ("distinct", "which", "offset")

    def __init__(self, distinct: list[Finding], which: np.ndarray, offset: np.ndarray):
        self.distinct = distinct
        self.which = np.asarray(which, dtype=np.int64)
        self.offset = np.asarray(offset, dtype=np.float64).reshape(-1, 2)
        if len(self.which) != len(self.offset):
            raise ValueError("which and offset differ in length")

    @classmethod
    def of(cls, findings: Sequence[Finding]) -> FindingSet:
        """``findings`` as a set, each its own distinct finding."""
        if isinstance(findings, FindingSet):
            return findings
        n = len(findings)
        return cls(list(findings), np.arange(n), np.zeros((n, 2)))

    def __len__(self) -> int:
        return len(self.which)

    def _item(self, d: int, dx: float, dy: float) -> Finding:
        f = self.distinct[d]
        if dx == 0.0 and dy == 0.0:
            return f
        return placed(f, dx, dy)

    def __getitem__(self, k):
        if isinstance(k, slice):
            return FindingSet(self.distinct, self.which[k], self.offset[k])
        dx, dy = self.offset[k].tolist()
        return self._item(int(self.which[k]), dx, dy)

    def __iter__(self) -> Iterator[Finding]:
        chunk = 4096
        for c in range(0, len(self.which), chunk):
            which = self.which[c : c + chunk].tolist()
            for d, (dx, dy) in zip(which, self.offset[c : c + chunk].tolist(), strict=True):
                yield self._item(d, dx, dy)

    def __eq__(self, other) -> bool:
        if not isinstance(other, Sequence) or isinstance(other, str):
            return NotImplemented
        return len(self) == len(other) and all(a == b for a, b in zip(self, other, strict=True))

    __hash__ = None  # mutable container semantics, as a list

    def __repr__(self) -> str:
        return f"FindingSet({len(self)} findings, {len(self.distinct)} distinct)"

    def counts(self) -> np.ndarray:
        """How many items each distinct finding has (0 for those not among them)."""
        return np.bincount(self.which, minlength=len(self.distinct))

    def boxes(self) -> np.ndarray:
        """Per item: ``bbox_nm`` (n, 4)."""
        base = np.array([f.bbox_nm for f in self.distinct], dtype=np.float64).reshape(-1, 4)
        return base[self.which] + np.tile(self.offset, 2)

    def box_pairs(self) -> np.ndarray:
        """Per item: ``bbox_nm`` as two complex numbers, ``x0 + i y0`` and
        ``x1 + i y1`` (2, n); the same sums as :meth:`boxes`, made in place (a
        chip's million findings: a third of the memory to touch)."""
        base = np.array([f.bbox_nm for f in self.distinct], dtype=np.float64).reshape(-1, 4)
        pairs = np.empty((2, len(self.which)), dtype=np.complex128)
        for k, (part, c) in enumerate(
            ((pairs[0].real, 0), (pairs[0].imag, 1), (pairs[1].real, 2), (pairs[1].imag, 3))
        ):
            np.add(base[:, c][self.which], self.offset[:, k % 2], out=part)
        return pairs

    def select(self, keep) -> FindingSet:
        """The items picked by a boolean mask or an index array, in that order."""
        return FindingSet(self.distinct, self.which[keep], self.offset[keep])
