"""Periodic cells of 2-D patterns (wafer nm): unit cells of arrays, lattice
supercells and finite clips padded into a periodic window (imaged by
:mod:`pitchguard.optics.aerial2d`)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pitchguard.geometry.cuts import window_period

LATTICE_SEARCH = 12
"""Largest lattice index tried for a rectangular supercell (:func:`lattice_cell`)."""


# --------------------------------------------------------------------------- cells


@dataclass(frozen=True)
class Cell:
    """One period of a 2-D pattern (wafer nm, cell frame centred on the cell).

    ``origin_nm`` is where the cell centre lies in the layout (a clip's
    window centre); it does not enter the image.
    """

    px_nm: float
    py_nm: float
    rects_nm: tuple[tuple[float, float, float, float], ...]  # (x0, y0, x1, y1)
    origin_nm: tuple[float, float] = (0.0, 0.0)

    def rect_array(self) -> np.ndarray:
        """Rectangles as an ``(R, 4)`` array."""
        return np.array(self.rects_nm, dtype=np.float64).reshape(-1, 4)

    def centre_of(self, index: int) -> tuple[float, float]:
        x0, y0, x1, y1 = self.rects_nm[index]
        return 0.5 * (x0 + x1), 0.5 * (y0 + y1)


def _rects(rects) -> tuple[tuple[float, float, float, float], ...]:
    return tuple(tuple(float(v) for v in r) for r in np.asarray(rects, dtype=np.float64))


def array_cell(pitch_x_nm: float, pitch_y_nm: float, width_nm: float, height_nm: float) -> Cell:
    """A rectangular array: a ``width x height`` feature centred in a ``pitch_x x pitch_y`` cell."""
    w, h = width_nm / 2.0, height_nm / 2.0
    return Cell(float(pitch_x_nm), float(pitch_y_nm), ((-w, -h, w, h),))


def lattice_cell(
    a1: tuple[float, float],
    a2: tuple[float, float],
    width_nm: float,
    height_nm: float,
    tol_nm: float = 1e-6,
) -> Cell:
    """A lattice of ``width x height`` features as its rectangular supercell.

    The supercell's sides are the shortest lattice vectors along x and along
    y (``i a1 + j a2`` with ``|i|, |j| <= LATTICE_SEARCH``); it holds one
    feature per lattice point inside it, the first at the centre.  A
    hexagonal lattice ``a (1, 0), a (1/2, sqrt 3 / 2)`` gives an ``a x sqrt(3)
    a`` cell with two features.  Raises ValueError when the lattice has no
    such vectors (turn the cell frame so that it has, with ``angle_deg``).
    """
    a = np.array([a1, a2], dtype=np.float64)
    k = np.arange(-LATTICE_SEARCH, LATTICE_SEARCH + 1)
    ii, jj = (v.ravel() for v in np.meshgrid(k, k))
    vec = ii[:, None] * a[0][None, :] + jj[:, None] * a[1][None, :]
    along_x = (np.abs(vec[:, 1]) <= tol_nm) & (vec[:, 0] > tol_nm)
    along_y = (np.abs(vec[:, 0]) <= tol_nm) & (vec[:, 1] > tol_nm)
    if not (along_x.any() and along_y.any()):
        raise ValueError(f"lattice {a1}, {a2} has no rectangular supercell within index range")
    px = float(vec[along_x, 0].min())
    py = float(vec[along_y, 1].min())
    count = int(round(px * py / abs(float(np.linalg.det(a)))))
    # Lattice points folded into [0, p) (within tol of p counts as 0), one per site.
    fold = np.mod(vec, [px, py])
    fold = np.where(fold > np.array([px, py]) - tol_nm, fold - np.array([px, py]), fold)
    _, first = np.unique(np.round(fold / tol_nm).astype(np.int64), axis=0, return_index=True)
    if len(first) != count:
        raise ValueError(f"supercell {px} x {py} nm: found {len(first)} sites, expected {count}")
    sites = (fold[first] + np.array([px, py]) / 2) % np.array([px, py]) - np.array([px, py]) / 2
    sites = sites[np.argsort(np.hypot(sites[:, 0], sites[:, 1]), kind="stable")]
    w, h = width_nm / 2.0, height_nm / 2.0
    rects = np.stack([sites[:, 0] - w, sites[:, 1] - h, sites[:, 0] + w, sites[:, 1] + h], axis=1)
    return Cell(px, py, _rects(rects))


def clip_cell(
    rects_nm,
    padding_nm: float,
    centre_nm: tuple[float, float] | None = None,
    half_extent_nm: tuple[float, float] | None = None,
) -> Cell:
    """A finite group of rectangles (layout nm) in a periodic window.

    The window is ``centre +- half_extent`` (default: the group's bounding
    box) plus ``padding_nm`` of background on each side
    (``geometry.cuts.window_period``: a 1-D cut is padded by ``lambda / NA``,
    so copies of the group lie ``2 lambda / NA`` apart).  Rectangles are
    clipped to ``centre +- half_extent``.  The cell keeps the window centre
    as its origin; its rectangles are relative to it.  Judge features at
    least the interaction range inside the window, as for cuts: the edge of
    the group sees the copies across the padding.
    """
    r = np.asarray(rects_nm, dtype=np.float64).reshape(-1, 4)
    lo, hi = r[:, :2].min(axis=0), r[:, 2:].max(axis=0)
    c = 0.5 * (lo + hi) if centre_nm is None else np.asarray(centre_nm, dtype=np.float64)
    h = 0.5 * (hi - lo) if half_extent_nm is None else np.asarray(half_extent_nm, dtype=np.float64)
    clipped = np.concatenate([np.maximum(r[:, :2], c - h), np.minimum(r[:, 2:], c + h)], axis=1)
    keep = (clipped[:, 2] > clipped[:, 0]) & (clipped[:, 3] > clipped[:, 1])
    shifted = clipped[keep] - np.concatenate([c, c])[None, :]
    return Cell(
        window_period(float(h[0]), padding_nm),
        window_period(float(h[1]), padding_nm),
        _rects(shifted),
        (float(c[0]), float(c[1])),
    )
