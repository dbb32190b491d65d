"""Hypothesis strategies for layout geometry: line/space arrays and their placements.

A :class:`LineArray` is drawn in a local frame (lines along +y, pitch along +x,
integer nm), each line cut into abutting pieces; a :class:`Placement` mirrors,
rotates and translates it and repeats it as several copies far enough apart
not to see each other.  :func:`polygons` returns the shapes as ``(n, 2)`` nm
arrays snapped to a 1 nm grid, ready for ``PolygonSet.from_arrays``.

The ranges keep the expected answer unambiguous:

* every width is below ``MIN_RUN_NM`` and every line length above it, so line
  ends are 2-D (counted, not judged) and only the long sides are sites;
* every width and space is below ``INTERACTION_RANGE_NM``, so each long side
  finds its far side and (inside the array) its neighbour;
* copies side by side are either at least ``INTERACTION_RANGE_NM`` plus a
  margin apart, so the outer sides of each copy are isolated, or exactly one
  pitch apart, so together they continue one longer array (an array assembled
  from arrayed references, as layouts often are).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from hypothesis import strategies as st

GRID_NM = 1.0
MIN_RUN_NM = 250.0
INTERACTION_RANGE_NM = 400.0

WIDTH_NM = (20, 200)
SPACE_NM = (20, 300)
COUNT = (1, 8)
LENGTH_NM = (400, 2000)
PIECES = (2, 4)
COPY_MARGIN_NM = 100  # extra distance between copies, on top of the interaction range
STACK_GAP_NM = (50, 600)  # gap between copies stacked end to end along the lines
TRANSLATION_NM = 10_000_000  # +-10 mm: chip-sized coordinates

MANHATTAN_DEG = (0, 90, 180, 270)
DIAGONAL_DEG = (45, 135, 225, 315)


@dataclass(frozen=True)
class LineArray:
    """``count`` lines of ``width`` with ``space`` between them, each ``length`` long.

    ``cuts[i]`` are the positions (nm from the bottom end) where line ``i`` is
    cut into abutting pieces.
    """

    width: int
    space: int
    count: int
    length: int
    cuts: tuple[tuple[int, ...], ...]

    @property
    def pitch(self) -> int:
        return self.width + self.space

    def local_polygons(self) -> list[np.ndarray]:
        out = []
        for i, cuts in enumerate(self.cuts):
            x0 = i * self.pitch
            ys = (0, *cuts, self.length)
            for y0, y1 in zip(ys[:-1], ys[1:], strict=True):
                out.append(rectangle(x0, y0, x0 + self.width, y1))
        return out


@dataclass(frozen=True)
class Placement:
    """Mirror (x -> -x), then rotate by ``rotation_deg`` about the origin, then translate.

    The array is repeated ``columns`` times along the pitch and ``rows`` times
    along the lines (``stack_gap`` nm between line ends of stacked copies).
    With ``continuous`` the columns are one pitch apart and form one array.
    """

    rotation_deg: int
    mirror: bool
    dx: int
    dy: int
    columns: int
    rows: int
    stack_gap: int
    continuous: bool = False

    @property
    def copies(self) -> int:
        return self.columns * self.rows

    def arrays(self, count: int) -> tuple[int, int]:
        """(separate arrays, lines in each) that the copies form."""
        if self.continuous:
            return self.rows, count * self.columns
        return self.copies, count

    @property
    def manhattan(self) -> bool:
        return self.rotation_deg % 90 == 0

    @property
    def line_orientation_deg(self) -> float:
        """Direction the lines run after placement, 0 <= angle < 180 (local lines run along y)."""
        return (90.0 + self.rotation_deg) % 180.0

    def matrix(self) -> np.ndarray:
        """2x2 linear part; exact integers for multiples of 90 degrees."""
        if self.manhattan:
            c, s = {0: (1, 0), 90: (0, 1), 180: (-1, 0), 270: (0, -1)}[self.rotation_deg % 360]
        else:
            t = math.radians(self.rotation_deg)
            c, s = math.cos(t), math.sin(t)
        rot = np.array([[c, -s], [s, c]], dtype=np.float64)
        mirror = np.diag([-1.0, 1.0]) if self.mirror else np.eye(2)
        return rot @ mirror


def rectangle(x0: float, y0: float, x1: float, y1: float) -> np.ndarray:
    """Counter-clockwise rectangle as a ``(4, 2)`` float array."""
    return np.array([[x0, y0], [x1, y0], [x1, y1], [x0, y1]], dtype=np.float64)


def polygons(array: LineArray, placement: Placement, grid_nm: float = GRID_NM) -> list[np.ndarray]:
    """All shapes of all copies, placed and snapped to ``grid_nm``."""
    if placement.continuous:
        span_x = array.count * array.pitch
    else:
        span_x = array.count * array.pitch - array.space + INTERACTION_RANGE_NM + COPY_MARGIN_NM
    span_y = array.length + placement.stack_gap
    local = array.local_polygons()
    m = placement.matrix()
    shift = np.array([placement.dx, placement.dy], dtype=np.float64)
    out = []
    for cx in range(placement.columns):
        for cy in range(placement.rows):
            offset = np.array([cx * span_x, cy * span_y], dtype=np.float64)
            for p in local:
                placed = (p + offset) @ m.T + shift
                out.append(np.round(placed / grid_nm) * grid_nm)
    return out


@st.composite
def line_arrays(draw, min_count: int = COUNT[0], max_count: int = COUNT[1]) -> LineArray:
    """Random line/space arrays on an integer nm grid, each line cut into 2-4 pieces."""
    width = draw(st.integers(*WIDTH_NM))
    space = draw(st.integers(*SPACE_NM))
    count = draw(st.integers(min_count, max_count))
    length = draw(st.integers(*LENGTH_NM))
    # Cuts on a 5 nm raster: a piece only a grid step or two long, turned by
    # 45 degrees and snapped, becomes a notch (a real change of the outline,
    # not what these properties test).
    step = 5
    cuts = tuple(
        tuple(
            step * c
            for c in sorted(
                draw(
                    st.sets(
                        st.integers(1, (length - 1) // step),
                        min_size=PIECES[0] - 1,
                        max_size=PIECES[1] - 1,
                    )
                )
            )
        )
        for _ in range(count)
    )
    return LineArray(width, space, count, length, cuts)


@st.composite
def placements(draw, angles: tuple[int, ...] = MANHATTAN_DEG + DIAGONAL_DEG) -> Placement:
    """Mirrored or not, rotated by one of ``angles``, translated, arrayed 1-2 x 1-2."""
    return Placement(
        rotation_deg=draw(st.sampled_from(angles)),
        mirror=draw(st.booleans()),
        dx=draw(st.integers(-TRANSLATION_NM, TRANSLATION_NM)),
        dy=draw(st.integers(-TRANSLATION_NM, TRANSLATION_NM)),
        columns=draw(st.integers(1, 2)),
        rows=draw(st.integers(1, 2)),
        stack_gap=draw(st.integers(*STACK_GAP_NM)),
        continuous=draw(st.booleans()),
    )
