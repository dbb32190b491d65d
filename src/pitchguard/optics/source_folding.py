"""Folding a mirror-symmetric source: a quarter of the points builds the whole TCC.

With ``A[s, k] = sqrt(w_s) g(f_k + s)`` (``g`` the pupil, with vector light a
row per polarisation state and field component), ``TCC = A^H A = sum_s w_s
g(f_k + s) g(f_l + s)^H``.  Let ``M`` mirror the y axis, ``(x, y) -> (x, -y)``.
When the source's weights are unchanged by ``M`` and so is its light
(:func:`polarization.mirror_symmetric`: then ``g(M f)`` equals ``g(f)`` up to the
sign of whole rows, which cancels in ``g g^H``), the mirrored points' terms are
``TCC_half(M f_k, M f_l)``: the same matrix with its orders permuted.  So

``TCC = TCC_half + P TCC_half P^T``

where ``TCC_half`` sums the points with ``sy > 0`` and half the weight of those
with ``sy = 0`` (each is its own mirror image), and ``P`` maps order ``(m, n)``
to ``(m, -n)``.  The x mirror is the same with ``(m, n) -> (-m, n)``.  Every
built-in source is symmetric about both axes of its own frame, so a Manhattan
cell needs a quarter of the source points; a turned source folds only when its
sampled points still mirror onto themselves (checked, never assumed).
"""

from __future__ import annotations

import numpy as np

from pitchguard.optics.polarization import mirror_symmetric

AXIS_TOL = 1e-12
"""Source coordinates (sigma) within this of a mirror axis lie on it; points are
matched to their mirror images to the same tolerance (a turned grid carries
rounding of that order)."""


def _mirrors_onto_itself(pts: np.ndarray, w: np.ndarray, axis: int) -> bool:
    flipped = pts.copy()
    flipped[:, axis] = -flipped[:, axis]

    def ordered(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        key = np.round(p, 7)  # far finer than the source step, far coarser than rounding
        order = np.lexsort((key[:, 1], key[:, 0]))
        return p[order], w[order]

    a, wa = ordered(pts)
    b, wb = ordered(flipped)
    return bool(np.allclose(a, b, rtol=0.0, atol=1e-9) and np.allclose(wa, wb, rtol=1e-9, atol=0.0))


def fold_source(
    pts: np.ndarray, w: np.ndarray, polarization: str, angle_deg: float, fold: bool = True
) -> tuple[np.ndarray, np.ndarray, tuple[int, ...]]:
    """``(points, weights, axes)``: the source folded about each frame axis it is
    mirror-symmetric about (``1``: ``sy -> -sy``, ``0``: ``sx -> -sx``); points on a
    fold line keep half their weight.  ``axes`` is empty when nothing folds."""
    if not fold or len(w) < 2 or not mirror_symmetric(polarization, angle_deg):
        return pts, w, ()
    axes = []
    for axis in (1, 0):
        if not _mirrors_onto_itself(pts, w, axis):
            continue
        keep = pts[:, axis] > -AXIS_TOL
        on_line = np.abs(pts[:, axis]) <= AXIS_TOL
        w = np.where(on_line, 0.5 * w, w)[keep]
        pts = pts[keep]
        axes.append(axis)
    return pts, w, tuple(axes)


def mirror_permutation(m: np.ndarray, n: np.ndarray, axis: int) -> np.ndarray:
    """Index of each order's mirror image: ``(m, -n)`` for axis 1, ``(-m, n)`` for
    axis 0.  The order set must hold every mirror image (a cell's orders do)."""
    mm, nn = (m, -n) if axis == 1 else (-m, n)
    span = int(max(np.abs(m).max(), np.abs(n).max())) * 2 + 1
    key = m.astype(np.int64) * span + n
    order = np.argsort(key)
    at = np.searchsorted(key[order], mm.astype(np.int64) * span + nn)
    perm = order[np.minimum(at, len(order) - 1)]
    if not (np.array_equal(m[perm], mm) and np.array_equal(n[perm], nn)):
        raise ValueError("the orders are not closed under the mirror")
    return perm


def unfold_tcc(tcc: np.ndarray, m: np.ndarray, n: np.ndarray, axes: tuple[int, ...]) -> np.ndarray:
    """The whole source's TCC from the folded source's (:func:`fold_source`)."""
    for axis in axes:
        perm = mirror_permutation(m, n, axis)
        tcc = tcc + tcc[np.ix_(perm, perm)]
    return tcc
