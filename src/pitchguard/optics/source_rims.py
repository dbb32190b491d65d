"""Source points refined where a pupil rim crosses them.

An image sums, per diffraction order, the source points whose shifted order
falls inside the pupil.  On a grid of cell ``h`` a point stands for its whole
cell, so a cell that a shifted pupil rim cuts counts wholly in or wholly out:
the image errs by up to the weight of the cells along each rim.  With a 0.02
sigma grid that reached 8e-3 of the open frame for a dipole imaging across its
axis (pitch along y, poles on x), where the rims run along the poles.  Each
cell within half a diagonal of some order's rim is split into ``SUB x SUB``
sub-cells (as :func:`orders.sample_source` splits the cells the source's own
edge cuts), which keeps 1-D images within 2e-3 of a fine sampling for every
shape and direction (``aerial.IMAGE_SOURCE_STEP``).
"""

from __future__ import annotations

import math

import numpy as np

from pitchguard.optics.orders import SUB, cell_step


def refine_at_rims(
    src: tuple[np.ndarray, np.ndarray],
    cell: float,
    angle_deg: float,
    shifts: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """``src`` (points in sigma units, turned by ``-angle_deg``, and weights) with
    every whole cell of side ``cell`` that some rim ``|s + shift| = 1`` crosses
    split into ``SUB x SUB`` points (``shifts``: each order's shift in sigma
    units, ``(K, 2)`` in the same frame).  Points of cells the source's edge
    already split (lighter than a whole cell) are kept as they are."""
    pts, w = src
    whole = w >= w.max() * (1.0 - 1e-9)
    d = np.hypot(pts[:, None, 0] + shifts[None, :, 0], pts[:, None, 1] + shifts[None, :, 1])
    near = whole & (np.abs(d - 1.0) <= cell * math.sqrt(0.5) * (1 + 1e-9)).any(axis=1)
    if not near.any():
        return src
    sub = ((np.arange(SUB) + 0.5) / SUB - 0.5) * cell
    ox, oy = np.meshgrid(sub, sub)
    t = math.radians(-angle_deg)  # the grid turned as source_points turns it
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    off = np.stack([ox.ravel(), oy.ravel()], axis=1) @ rot.T
    split = (pts[near][:, None, :] + off[None, :, :]).reshape(-1, 2)
    weights = np.repeat(w[near] / SUB**2, SUB**2)
    return np.concatenate([pts[~near], split]), np.concatenate([w[~near], weights])


def line_source(exposure, angle_deg: float, period_nm: float, n_max: int):
    """The source points a 1-D period is imaged with: :func:`aerial.source_points`
    refined at the rims of its orders ``-n_max..n_max`` (a coherent source, one
    point, is left alone)."""
    from pitchguard.optics.aerial import IMAGE_SOURCE_STEP, source_points

    src = source_points(exposure, angle_deg)
    if exposure.illumination.shape == "coherent":
        return src
    shift = np.arange(-n_max, n_max + 1) * exposure.wavelength_nm / (period_nm * exposure.na)
    shifts = np.stack([shift, np.zeros_like(shift)], axis=1)
    cell = cell_step(exposure.illumination, IMAGE_SOURCE_STEP)
    return refine_at_rims(src, cell, angle_deg, shifts)
