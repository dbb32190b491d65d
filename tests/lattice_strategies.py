"""Hypothesis strategies for arrays of compact features (vias, contacts, posts).

A :class:`ViaArray` is drawn in a local frame: ``columns`` x ``rows`` copies of
a ``w`` x ``h`` rectangle at ``origin + u a1 + v a2`` (integer nm lattice
vectors, except the hexagonal kind, whose second vector is rounded to the
grid by placement).  A :class:`Placement` mirrors (x -> -x), rotates and
translates it; :func:`polygons` returns the shapes snapped to a 1 nm grid.

The ranges keep the expected answer unambiguous:

* every feature is below ``MAX_EXTENT_NM`` in both directions and narrower
  than its pitch by at least ``MIN_GAP_NM``, so no two features touch;
* every lattice's reduced vectors are within ``INTERACTION_RANGE_NM`` (so the
  array is one array of two directions), and the kinds are built from their
  textbook constructions: square (a, 0), (0, a); rectangular (a, 0), (0, b),
  b >= a + 8; centred (staggered rows) (2s, 0), (s, t) with t > sqrt(3) s
  + 8 (so (2s, 0) stays the shortest vector); hexagonal (a, 0),
  (a/2, a sqrt(3)/2);
* copies placed side by side sit more than ``HALO_NM`` apart, so they never
  see each other;
* isolated features (:func:`scattered`) keep more than ``INTERACTION_RANGE_NM``
  from every other feature.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from hypothesis import strategies as st

from pitchguard.geometry.lattice import HALO_RANGES

GRID_NM = 1.0
MAX_EXTENT_NM = 250.0  # the layer's min_run_nm
INTERACTION_RANGE_NM = 400.0
HALO_NM = HALO_RANGES * INTERACTION_RANGE_NM + 2 * math.sqrt(2.0) * MAX_EXTENT_NM
MIN_GAP_NM = 12  # space between neighbouring features, at least
TRANSLATION_NM = 10_000_000  # +-10 mm: chip-sized coordinates

KINDS = ("square", "rectangular", "centred", "hexagonal")


@dataclass(frozen=True)
class ViaArray:
    kind: str
    a1: tuple[float, float]
    a2: tuple[float, float]
    columns: int
    rows: int
    w: int
    h: int

    @property
    def count(self) -> int:
        return self.columns * self.rows

    def centres(self) -> np.ndarray:
        u, v = np.meshgrid(np.arange(self.columns), np.arange(self.rows), indexing="ij")
        return u.reshape(-1, 1) * np.array(self.a1) + v.reshape(-1, 1) * np.array(self.a2)

    def local_polygons(self) -> list[np.ndarray]:
        return [rectangle(x, y, self.w, self.h) for x, y in self.centres()]

    @property
    def pitches(self) -> tuple[float, float]:
        """|a1|, |a2| of the drawn (already reduced) basis."""
        return math.hypot(*self.a1), math.hypot(*self.a2)


@dataclass(frozen=True)
class Placement:
    """Mirror (x -> -x), then rotate by ``rotation_deg`` about the origin, then translate."""

    rotation_deg: float
    mirror: bool
    dx: int
    dy: int

    def matrix(self) -> np.ndarray:
        t = math.radians(self.rotation_deg)
        c, s = math.cos(t), math.sin(t)
        if self.rotation_deg % 90 == 0:
            c, s = round(c), round(s)
        rot = np.array([[c, -s], [s, c]], dtype=np.float64)
        mirror = np.diag([-1.0, 1.0]) if self.mirror else np.eye(2)
        return rot @ mirror

    def apply(self, points: np.ndarray) -> np.ndarray:
        return points @ self.matrix().T + np.array([self.dx, self.dy], dtype=np.float64)


def rectangle(cx: float, cy: float, w: float, h: float) -> np.ndarray:
    """Counter-clockwise ``w`` x ``h`` rectangle centred on (cx, cy), as (4, 2)."""
    x0, y0, x1, y1 = cx - w / 2, cy - h / 2, cx + w / 2, cy + h / 2
    return np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], dtype=np.float64)


def snap(points: np.ndarray, grid_nm: float = GRID_NM) -> np.ndarray:
    return np.floor(points / grid_nm + 0.5) * grid_nm


def polygons(array: ViaArray, placement: Placement, grid_nm: float = GRID_NM) -> list[np.ndarray]:
    """The array's shapes, placed and snapped to ``grid_nm``."""
    return [snap(placement.apply(p), grid_nm) for p in array.local_polygons()]


@st.composite
def via_arrays(draw, kinds: tuple[str, ...] = KINDS, max_side: int = 6) -> ViaArray:
    """A lattice of one of ``kinds`` with 2-``max_side`` columns and rows."""
    kind = draw(st.sampled_from(kinds))
    w = draw(st.integers(20, 120))
    h = draw(st.integers(20, 120))
    span = max(w, h) + MIN_GAP_NM
    if kind == "square":
        a = draw(st.integers(span, 300))
        a1, a2 = (a, 0), (0, a)
    elif kind == "rectangular":
        a = draw(st.integers(span, 250))
        # |a2 + a1| - |a2| is about a^2 / (2 b): it must exceed twice the extraction's
        # tolerance (3 nm) for a snapped, turned copy to keep a2 (arithmetic).
        b = draw(st.integers(a + 8, min(380, a * a // 12)))
        a1, a2 = (a, 0), (0, b)
    elif kind == "centred":
        s = draw(st.integers(math.ceil(span / 2), math.floor((340 - 8 - span) / math.sqrt(3))))
        t = draw(st.integers(math.ceil(math.sqrt(3) * s) + 8 + span, 340))
        a1, a2 = (2 * s, 0), (s, t)
    else:  # hexagonal
        a = draw(st.integers(math.ceil(span * 1.2), 300))
        a1, a2 = (a, 0), (a / 2, a * math.sqrt(3) / 2)
    columns = draw(st.integers(2, max_side))
    rows = draw(st.integers(2, max_side))
    return ViaArray(kind, a1, a2, columns, rows, w, h)


@st.composite
def placements(draw, angles: tuple[float, ...] = (0, 90, 180, 270, 30, 45, 60, 135)) -> Placement:
    return Placement(
        rotation_deg=draw(st.sampled_from(angles)),
        mirror=draw(st.booleans()),
        dx=draw(st.integers(-TRANSLATION_NM, TRANSLATION_NM)),
        dy=draw(st.integers(-TRANSLATION_NM, TRANSLATION_NM)),
    )


def scattered(rng: np.random.Generator, n: int, box_nm: float, w: int = 40) -> np.ndarray:
    """Centres of ``n`` features at random in a square of ``box_nm``, each more
    than ``INTERACTION_RANGE_NM`` from every other (rejection sampling)."""
    out: list[np.ndarray] = []
    while len(out) < n:
        p = np.round(rng.uniform(0, box_nm, 2))
        if all(np.hypot(*(p - q)) > INTERACTION_RANGE_NM + w for q in out):
            out.append(p)
    return np.array(out)


@st.composite
def layouts(draw, max_arrays: int = 3) -> list[np.ndarray]:
    """Several arrays, each placed in its own slot (far apart), and a few
    isolated features in a slot of their own; one 1 nm grid, integer placement."""
    arrays = draw(st.lists(via_arrays(max_side=5), min_size=1, max_size=max_arrays))
    angles = (0, 90, 180, 270, 30, 45)
    out: list[np.ndarray] = []
    slot = 8000.0  # an array spans at most 1.9 um each way, turned: 2.7 um
    for k, arr in enumerate(arrays):
        pl = Placement(draw(st.sampled_from(angles)), draw(st.booleans()), int(k * slot), 0)
        out.extend(polygons(arr, pl))
    seed = draw(st.integers(0, 2**16))
    for x, y in scattered(np.random.default_rng(seed), draw(st.integers(0, 4)), 2500.0):
        out.append(snap(rectangle(x + len(arrays) * slot, y, 40, 40)))
    return out
