"""Diffraction orders through the pupil, k1, source sampling and the cutoff pitch (pure physics)."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from pitchguard.deck import (
    Annular,
    Coherent,
    Conventional,
    Dipole,
    Exposure,
    Illumination,
    Quadrupole,
)

GRID_STEP = 0.02
"""Source sampling step in sigma units for source fractions."""


SUB = 4
"""Sub-cells per cell side where a grid cell straddles the edge of a source."""


BOUNDARY_POINTS = 1440
"""Points on each boundary arc of the source (0.25 degree steps on a full circle)."""


def _sector_centres(ill: Illumination) -> list[float]:
    """Pole centre angles in radians for dipoles and quadrupoles."""
    if isinstance(ill, Dipole):
        base = 0.0 if ill.axis == "x" else math.pi / 2
        return [base, base + math.pi]
    if isinstance(ill, Quadrupole):
        base = math.radians(ill.rotation_deg)
        return [base + k * math.pi / 2 for k in range(4)]
    return []


def _inside(ill: Illumination, sx: np.ndarray, sy: np.ndarray, tol: float = 1e-12) -> np.ndarray:
    r = np.hypot(sx, sy)
    if isinstance(ill, Coherent):
        return r <= tol
    if isinstance(ill, Conventional):
        return r <= ill.sigma + tol
    inside = (r >= ill.sigma_inner - tol) & (r <= ill.sigma_outer + tol)
    if isinstance(ill, Annular):
        return inside
    half = math.radians(ill.opening_deg) / 2
    ang = np.arctan2(sy, sx)
    in_sector = np.zeros_like(inside)
    for c in _sector_centres(ill):
        delta = np.abs((ang - c + np.pi) % (2 * np.pi) - np.pi)
        in_sector |= delta <= half + 1e-12
    return inside & in_sector


@dataclass(frozen=True)
class SourceSampling:
    """Weighted points of a uniform source, and points on its boundary.

    ``grid`` holds one point per grid cell inside the shape and, along its
    edge, one point per covered sub-cell (``SUB`` x ``SUB`` per cell);
    ``weights`` are the areas they stand for (summing to 1).  Refining the
    edge this way makes sums over the source converge much faster than a
    plain grid, and keeps the source's extreme points.
    """

    grid: np.ndarray  # (n, 2) sigma points
    boundary: np.ndarray  # (m, 2) points on the boundary, for "any" tests
    weights: np.ndarray  # (n,) area weights, sum 1


def _boundary(ill: Illumination) -> np.ndarray:
    if isinstance(ill, Coherent):
        return np.zeros((1, 2))
    radii = [ill.sigma] if isinstance(ill, Conventional) else [ill.sigma_inner, ill.sigma_outer]
    t = np.linspace(-math.pi, math.pi, BOUNDARY_POINTS, endpoint=False)
    pts = [np.stack([r * np.cos(t), r * np.sin(t)], axis=1) for r in radii if r > 0]
    centres = _sector_centres(ill)
    if centres:
        half = math.radians(ill.opening_deg) / 2
        rr = np.linspace(ill.sigma_inner, ill.sigma_outer, 200)
        for c in centres:
            for edge in (c - half, c + half):
                pts.append(np.stack([rr * math.cos(edge), rr * math.sin(edge)], axis=1))
        pts = [p[_inside(ill, p[:, 0], p[:, 1], tol=1e-9)] for p in pts]
    return np.concatenate(pts, axis=0)


@lru_cache(maxsize=64)
def cell_step(ill: Illumination, step: float = GRID_STEP) -> float:
    """The side of :func:`sample_source`'s cells: ``step``, or an eighth of the shape's
    narrowest extent (ring width, pole opening) where that is smaller."""
    widths = [getattr(ill, "sigma", 1.0)]
    if hasattr(ill, "sigma_inner"):
        widths.append(ill.sigma_outer - ill.sigma_inner)
    if hasattr(ill, "opening_deg"):
        widths.append(ill.sigma_outer * math.radians(ill.opening_deg))
    return min(step, min(widths) / 8)


def sample_source(ill: Illumination, step: float = GRID_STEP) -> SourceSampling:
    """Sample a source shape (cached per shape)."""
    if isinstance(ill, Coherent):
        z = np.zeros((1, 2))
        return SourceSampling(z, z, np.ones(1))
    h = cell_step(ill, step)
    n = int(math.ceil(1.0 / h)) + 1
    axis = (np.arange(-n, n + 1)) * h
    cx, cy = np.meshgrid(axis, axis)
    cx, cy = cx.ravel(), cy.ravel()
    # Cells wholly inside the shape are one point at their centre; cells cut by
    # its edge are split into SUB x SUB sub-cells, each kept when its centre is
    # inside.  Weights are areas.  The edge is thus sampled h / SUB finely,
    # which keeps the extreme points of the source (and so the imaging cutoff)
    # within h / (2 SUB) of the true ones.
    r = np.hypot(cx, cy)
    near = r <= 1.0 + h
    cx, cy = cx[near], cy[near]
    sub = (np.arange(SUB) + 0.5) / SUB - 0.5
    ox, oy = np.meshgrid(sub * h, sub * h)
    px = cx[:, None] + ox.ravel()[None, :]
    py = cy[:, None] + oy.ravel()[None, :]
    ins = _inside(ill, px.ravel(), py.ravel()).reshape(px.shape)
    full = ins.all(axis=1)
    part = ins.any(axis=1) & ~full
    pts = [
        np.stack([cx[full], cy[full]], axis=1),
        np.stack([px[part][ins[part]], py[part][ins[part]]], axis=1),
    ]
    w = np.concatenate([np.full(int(full.sum()), 1.0), np.full(int(ins[part].sum()), 1.0 / SUB**2)])
    return SourceSampling(np.concatenate(pts), _boundary(ill), w / w.sum())


def _extreme_points(ill: Illumination, e: np.ndarray) -> np.ndarray:
    """Source points farthest along +e and -e (exact for discs, rings and poles)."""
    if isinstance(ill, Coherent):
        return np.zeros((1, 2))
    r = ill.sigma if isinstance(ill, Conventional) else ill.sigma_outer
    cand = np.array([e * r, -e * r])
    return cand[_inside(ill, cand[:, 0], cand[:, 1], tol=1e-9)]


@dataclass(frozen=True)
class OrderResult:
    """What the pupil does with one pitch in one direction."""

    k1: float
    orders_on_axis: tuple[int, ...]  # orders an on-axis point passes
    orders: tuple[int, ...]  # orders some source point passes
    two_beam_fraction: float  # source fraction sending the 0th and a 1st order
    resolvable: bool  # some source point sends the 0th and a 1st order
    cutoff_pitch_nm: float  # smallest pitch this source can image in this direction


def pitch_direction(orientation_deg: float) -> np.ndarray:
    """Unit vector along the pitch for lines running at ``orientation_deg``."""
    phi = math.radians(orientation_deg + 90.0)
    return np.array([math.cos(phi), math.sin(phi)])


def cutoff_pitch(exposure: Exposure, orientation_deg: float) -> float:
    """Smallest pitch imaged in this direction: ``lambda / (NA q_max)``.

    Notes
    -----
    In units of NA/lambda, a source point ``s`` sends the 0th order through
    when ``|s| <= 1`` (always, sigma <= 1) and the +1st order when
    ``|s + q e| <= 1``, i.e. ``q <= -s.e + sqrt(1 - (s.e_perp)^2)``.  By the
    symmetry of every source shape here (s -> -s), the largest first-order
    shift any point admits is ``q_max = max_s (s.e + sqrt(1 - (s.e_perp)^2))``.
    For a disc or ring, or a pole centred on the pitch axis, this is
    ``1 + sigma_max`` (the textbook ``lambda / (NA (1 + sigma))``); a pole off
    the axis reaches less far because its point also sits across ``e``.
    """
    ill = exposure.illumination
    e = pitch_direction(orientation_deg)
    e_perp = np.array([-e[1], e[0]])
    samp = sample_source(ill)
    pts = np.concatenate([samp.boundary, samp.grid, _extreme_points(ill, e)])
    along = pts @ e
    across = pts @ e_perp
    reach = np.abs(along) + np.sqrt(np.clip(1.0 - across**2, 0.0, None))
    return exposure.wavelength_nm / (exposure.na * float(np.max(reach)))


@lru_cache(maxsize=65536)
def analyse_pitch(exposure: Exposure, pitch_nm: float, orientation_deg: float) -> OrderResult:
    """Orders, k1 and source fractions for a wafer-scale pitch.

    Kept per process: the tiles of a tiled scan meet the same pitches again.
    """
    lam, na = exposure.wavelength_nm, exposure.na
    k1 = float(0.5 * pitch_nm * na / lam)  # a Python float: findings travel between processes
    cutoff = cutoff_pitch(exposure, orientation_deg)
    if not math.isfinite(pitch_nm):
        return OrderResult(k1, (0,), (0,), 0.0, True, cutoff)
    q = lam / (pitch_nm * na)  # first-order shift in units of NA/lambda
    e = pitch_direction(orientation_deg)
    ill = exposure.illumination
    samp = sample_source(ill)
    pts_any = np.concatenate([samp.boundary, samp.grid, _extreme_points(ill, e)])
    tol = 1e-12
    n_axis = math.floor(1.0 / q + 1e-12)
    on_axis = tuple(range(-n_axis, n_axis + 1))
    n_max = math.floor((1.0 + exposure.sigma_max) / q + 1e-12)
    orders = []
    for n in range(-n_max, n_max + 1):
        shifted = pts_any + n * q * e
        if np.any(np.einsum("ij,ij->i", shifted, shifted) <= 1.0 + tol):
            orders.append(n)
    g = samp.grid
    zero = np.einsum("ij,ij->i", g, g) <= 1.0 + tol
    plus = g + q * e
    minus = g - q * e
    first = (np.einsum("ij,ij->i", plus, plus) <= 1.0 + tol) | (
        np.einsum("ij,ij->i", minus, minus) <= 1.0 + tol
    )
    fraction = min(1.0, float(np.sum(samp.weights * (zero & first))))
    # "Any point" test for the pair (0, +-1): exact extreme points included.
    zero_b = np.einsum("ij,ij->i", pts_any, pts_any) <= 1.0 + tol
    pb, mb = pts_any + q * e, pts_any - q * e
    first_b = (np.einsum("ij,ij->i", pb, pb) <= 1.0 + tol) | (
        np.einsum("ij,ij->i", mb, mb) <= 1.0 + tol
    )
    resolvable = bool(np.any(zero_b & first_b))
    return OrderResult(k1, on_axis, tuple(orders), fraction, resolvable, cutoff)
