"""2-D diffraction orders of a lattice: reciprocal vectors, orders through the pupil, k1, cutoffs.

A periodic array of compact features (contacts, vias, posts) with lattice
vectors ``a1``, ``a2`` (nm, layout frame, wafer scale) diffracts into the
orders ``f = m g1 + n g2`` of its reciprocal lattice (``a_i . g_j =
delta_ij``).  The pupil test of lines (``optics.orders``) applies to each
order in 2-D: a source point ``s`` (sigma units) sends order ``f`` through
when ``|s + f lambda / NA| <= 1``.  Since every source point sends the 0th
order through (``sigma <= 1``), an order that passes for some source point
interferes with the 0th: it is *resolved*.

Notes
-----
Hexagonal lattice of nearest-neighbour distance ``a``: ``a1 = a (1, 0)``,
``a2 = a (1/2, sqrt(3)/2)``.  Solving ``a_i . g_j = delta_ij``:
``g1 = (1/a) (1, -1/sqrt(3))`` and ``g2 = (1/a) (0, 2/sqrt(3))``, so
``|g1| = |g2| = (1/a) sqrt(4/3) = 2 / (sqrt(3) a)``; ``g1 + g2 =
(1/a) (1, 1/sqrt(3))`` has the same length, and ``g1 - g2 = (1/a) (1,
-sqrt(3))`` is the next shell at ``2/a``.  The six first orders ``+-g1,
+-g2, +-(g1 + g2)`` sit at ``2 / (sqrt(3) a)``: the lattice lines they image
are ``sqrt(3) a / 2`` apart, so with a disc or ring source the array images
down to ``a = 2 lambda / (sqrt(3) NA (1 + sigma_max))``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from pitchguard.deck import Exposure
from pitchguard.optics.orders import cutoff_pitch, sample_source

FIRST_ORDERS = ((1, 0), (0, 1), (1, 1), (1, -1))
"""First-order directions in the reduced reciprocal basis ``(b1, b2)``: ``b1,
b2, b1 + b2, b1 - b2`` (each with its opposite)."""


COLLINEAR_TOL = 1e-9
"""Relative size of a cross product below which two orders are parallel."""


@dataclass(frozen=True)
class LatticeDirection:
    """One first-order direction of a lattice (the order and its opposite)."""

    order: tuple[int, int]  # (m, n): the order m g1 + n g2 of the given basis
    frequency: tuple[float, float]  # (fx, fy), 1/nm, layout frame
    pitch_nm: float  # 1 / |f|: spacing of the lattice lines this order images
    angle_deg: float  # direction of f (the pitch direction), in [0, 180)
    k1: float  # (pitch / 2) NA / lambda
    cutoff_pitch_nm: float  # smallest line spacing this source images in this direction
    resolved: bool  # some source point sends the 0th and this order together
    two_beam_fraction: float  # source fraction sending the 0th and this order (either sign)


@dataclass(frozen=True)
class LatticeOrders:
    """What the pupil does with a lattice.

    ``rank`` is what the image can show: 0 (no order passes besides the 0th:
    uniform, nothing prints), 1 (every passing order lies on one line: the
    array images as lines, its features merge along them) or 2 (a 2-D
    pattern).
    """

    g1: tuple[float, float]  # reciprocal vectors of the given basis, 1/nm
    g2: tuple[float, float]
    first: tuple[LatticeDirection, ...]  # FIRST_ORDERS of the reduced basis, shortest first
    orders: tuple[tuple[int, int], ...]  # every (m, n) some source point passes, (0, 0) first
    pitch_min_nm: float  # 1/|b2|: the finer spacing of the two shortest independent orders
    k1: float  # (pitch_min / 2) NA / lambda
    rank: int

    @property
    def resolved(self) -> bool:
        """True when the image is a 2-D pattern (both lattice directions imaged)."""
        return self.rank == 2


def reciprocal(a1: tuple[float, float], a2: tuple[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """Reciprocal vectors ``g1, g2`` (1/nm) with ``a_i . g_j = delta_ij``.

    Notes
    -----
    With ``A`` the matrix of rows ``a1, a2``, the rows of ``G = (A^-1)^T``
    satisfy ``A G^T = I``.
    """
    a = np.array([a1, a2], dtype=np.float64)
    det = float(np.linalg.det(a))
    if not math.isfinite(det) or abs(det) <= 1e-12 * float(np.sum(a * a)):
        raise ValueError(f"lattice vectors {a1} and {a2} are parallel")
    g = np.linalg.inv(a).T
    return g[0], g[1]


def reduce_basis(b1: np.ndarray, b2: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Lagrange-Gauss reduction of a 2-D basis.

    Returns ``(r1, r2, u)``: ``r1`` is a shortest non-zero vector of the
    lattice, ``r2`` a shortest one independent of it, and ``u`` the integer
    matrix with ``[r1; r2] = u [b1; b2]``.
    """
    r = np.array([b1, b2], dtype=np.float64)
    u = np.eye(2, dtype=np.int64)
    for _ in range(200):  # converges in a few steps; the bound only guards bad input
        if r[0] @ r[0] > r[1] @ r[1]:
            r, u = r[::-1].copy(), u[::-1].copy()
        mu = round(float(r[0] @ r[1]) / float(r[0] @ r[0]))
        if mu == 0:
            break
        r[1] -= mu * r[0]
        u[1] -= mu * u[0]
    return r[0], r[1], u


def _passes(exposure: Exposure, f: np.ndarray) -> tuple[bool, float, float]:
    """``(resolved, cutoff_pitch_nm, two_beam_fraction)`` of the order at frequency ``f``."""
    norm = float(np.hypot(f[0], f[1]))
    angle = math.degrees(math.atan2(f[1], f[0]))
    # cutoff_pitch takes the direction of the lines; the pitch runs 90 degrees from it.
    cut = cutoff_pitch(exposure, angle - 90.0)
    resolved = 1.0 / norm >= cut * (1.0 - 1e-12)
    samp = sample_source(exposure.illumination)
    u = f * exposure.wavelength_nm / exposure.na  # the order's shift in sigma units
    g = samp.grid
    plus = np.einsum("ij,ij->i", g + u, g + u) <= 1.0 + 1e-12
    minus = np.einsum("ij,ij->i", g - u, g - u) <= 1.0 + 1e-12
    fraction = min(1.0, float(np.sum(samp.weights * (plus | minus))))
    return resolved, cut, fraction


def _rank(freqs: np.ndarray) -> int:
    if len(freqs) == 0:
        return 0
    ref = freqs[np.argmax(np.einsum("ij,ij->i", freqs, freqs))]
    cross = np.abs(freqs[:, 0] * ref[1] - freqs[:, 1] * ref[0])
    scale = np.hypot(freqs[:, 0], freqs[:, 1]) * float(np.hypot(*ref))
    return 2 if np.any(cross > COLLINEAR_TOL * scale) else 1


def lattice_orders(
    exposure: Exposure, a1: tuple[float, float], a2: tuple[float, float]
) -> LatticeOrders:
    """Orders, first-order directions, k1 and cutoffs of a lattice (wafer nm, layout frame).

    Parameters
    ----------
    exposure
        The scanner set-up; its source is taken in the layout frame (a dipole
        on ``x`` has its poles on the layout's x axis).
    a1, a2
        Lattice vectors in nm; any basis of the lattice (it is reduced).

    Notes
    -----
    A direction's cutoff is :func:`optics.orders.cutoff_pitch` for lines
    normal to it: the order ``f`` is resolved when ``1/|f|`` is at least that
    spacing (exact for discs, rings and poles, as for lines).  For a square
    lattice of pitch ``p`` the first orders ``(1, 0)``, ``(0, 1)`` sit at
    ``1/p``, so the array's cutoff is the line cutoff ``lambda / (NA (1 +
    sigma))``; see the module notes for the hexagonal lattice.
    """
    key = (tuple(map(float, a1)), tuple(map(float, a2)))
    return _lattice_orders(exposure, *key)


@lru_cache(maxsize=4096)
def _lattice_orders(exposure: Exposure, a1: tuple, a2: tuple) -> LatticeOrders:
    lam, na = exposure.wavelength_nm, exposure.na
    g1, g2 = reciprocal(a1, a2)
    b1, b2, u = reduce_basis(g1, g2)
    first = []
    for i, j in FIRST_ORDERS:
        m, n = (int(v) for v in i * u[0] + j * u[1])
        if (m, n) < (0, 0):  # one sign per direction: m > 0, or m = 0 and n > 0
            m, n = -m, -n
        f = m * g1 + n * g2
        resolved, cut, fraction = _passes(exposure, f)
        pitch = 1.0 / float(np.hypot(f[0], f[1]))
        first.append(
            LatticeDirection(
                order=(m, n),
                frequency=(float(f[0]), float(f[1])),
                pitch_nm=pitch,
                angle_deg=math.degrees(math.atan2(f[1], f[0])) % 180.0,
                k1=0.5 * pitch * na / lam,
                cutoff_pitch_nm=cut,
                resolved=bool(resolved),
                two_beam_fraction=fraction,
            )
        )
    first.sort(key=lambda d: (-d.pitch_nm, d.order))
    # Every order within the largest reach (1 + sigma_max) NA / lambda, then the exact test.
    reach = (1.0 + exposure.sigma_max) * na / lam
    m_max = int(math.floor(reach * math.hypot(*a1) + 1e-9))
    n_max = int(math.floor(reach * math.hypot(*a2) + 1e-9))
    mm, nn = np.meshgrid(np.arange(-m_max, m_max + 1), np.arange(-n_max, n_max + 1))
    mm, nn = mm.ravel(), nn.ravel()
    freqs = mm[:, None] * g1[None, :] + nn[:, None] * g2[None, :]
    near = np.einsum("ij,ij->i", freqs, freqs) <= reach**2 * (1.0 + 1e-9)
    near &= (mm != 0) | (nn != 0)
    passing = [(0, 0)]
    passing_f = []
    for m, n, f in zip(mm[near], nn[near], freqs[near], strict=True):
        if _passes(exposure, f)[0]:
            passing.append((int(m), int(n)))
            passing_f.append(f)
    order_key = {o: float(np.hypot(*(o[0] * g1 + o[1] * g2))) for o in passing}
    passing.sort(key=lambda o: (order_key[o], o))
    pitch_min = 1.0 / float(np.hypot(*b2))
    return LatticeOrders(
        g1=(float(g1[0]), float(g1[1])),
        g2=(float(g2[0]), float(g2[1])),
        first=tuple(first),
        orders=tuple(passing),
        pitch_min_nm=pitch_min,
        k1=0.5 * pitch_min * na / lam,
        rank=_rank(np.array(passing_f).reshape(-1, 2)),
    )
