"""Images of one clip at fixed points through focus, each within a stated tolerance of
the full Hopkins sum (the points a clip's metrics read: lines through a feature, a line
end's axis, edge midpoints), with the plain Abbe sum as the reference."""

from __future__ import annotations

import numpy as np

from pitchguard.deck import Exposure
from pitchguard.optics.aerial import Optics, source_points
from pitchguard.optics.aerial2d import CellOrders, abbe_image_2d, coherent_systems_2d
from pitchguard.optics.cells2d import Cell

KERNEL_TOL = 1e-3
"""Largest intensity error (clear field = 1) that :class:`PointImages` allows itself by
dropping coherent systems; see there for the bound.  An error ``e`` moves a printed edge
by ``e CD / (NILS T)``: about 0.1 nm for a typical hole (threshold ~0.3, NILS ~3), up
to 1 nm for a dim clip (a 90 nm hole at threshold 0.028); 1e-4 would halve the speed
of clips of unique vias."""


class PointImages:
    """Images of one cell through focus at fixed points ``(px, py)``, each within
    KERNEL_TOL of the exact Hopkins sum; or, ``plain``, the Abbe sum
    (:func:`abbe_image_2d`), the reference.

    Notes
    -----
    Split the spectrum at its mean: ``c = c_0 delta_0 + d`` (``d_0 = 0``).
    With kernels ``K = V^H`` and eigenvalues ``lambda`` of the TCC, the image
    ``I(r) = sum_k lambda_k |c_0 K_k0 + g_k(r)|^2``, ``g_k(r) = sum_n K_kn d_n
    e_n(r)``, ``e_n(r) = exp(i 2 pi f_n . r)``, expands to

    ``|c_0|^2 TCC_00 + 2 Re(conj(c_0) sum_n TCC_0n d_n e_n(r)) + sum_k
    lambda_k |g_k(r)|^2``

    (``TCC_0n = sum_k lambda_k conj(K_k0) K_kn``).  The first two terms are
    exact at the cost of one system.  In the last, the systems with
    ``lambda_k < KERNEL_TOL / |d|^2`` are dropped: they add at most
    ``lambda_max_dropped sum_k |g_k(r)|^2 = lambda_max_dropped |d|^2`` (``V``
    unitary; ``|d|^2`` is the transmission's variance over the window).  A
    clip of small features has a small variance, so fewer systems (a 40 nm
    hole at ArF immersion: 9 against 61 above KERNEL_TOL).
    """

    def __init__(
        self,
        exposure: Exposure,
        cell: Cell,
        spectrum: np.ndarray,
        orders: CellOrders,
        px: np.ndarray,
        py: np.ndarray,
        angle_deg: float,
        plain: bool = False,
        basis: np.ndarray | None = None,
        blur_nm: float = 0.0,
    ):
        self.exposure, self.cell, self.spectrum, self.orders = exposure, cell, spectrum, orders
        self.blur_nm = blur_nm  # the layer's resist blur (wafer nm)
        self.px, self.py, self.angle_deg, self.plain = px, py, angle_deg, plain
        if basis is None and not plain:
            basis = plane_waves(orders, px, py)
        self.basis = basis  # (N, P), shareable by every cell of this period and these points
        zero = orders.zero
        self.c0 = complex(spectrum[zero])
        self.d = np.array(spectrum, dtype=np.complex128)
        self.d[zero] = 0.0
        self.variance = float(np.sum(self.d.real**2 + self.d.imag**2))

    def _split(self, focus_nm: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
        """``(lambda, K d, TCC_0n d, |c_0|^2 TCC_00)`` at ``focus_nm``, the systems that the
        bound keeps."""
        sys = coherent_systems_2d(
            self.exposure, self.cell.px_nm, self.cell.py_nm, focus_nm, self.angle_deg, self.blur_nm
        )
        ev, kern = sys.eigenvalues, sys.kernels  # largest first
        row = sys.dc_row()
        zero = self.orders.zero
        if self.variance > 0:
            kept = int(np.searchsorted(-ev, -KERNEL_TOL / self.variance, side="right"))
        else:
            kept = 0
        base = abs(self.c0) ** 2 * float(row[zero].real)
        return ev[:kept], kern[:kept] * self.d, row * self.d * np.conj(self.c0), base

    def __call__(self, focus_nm: float, points: slice | np.ndarray = slice(None)) -> np.ndarray:
        """Intensities at ``focus_nm`` at the points ``points`` selects (a slice or indices)."""
        e = self.exposure
        if self.plain and self.blur_nm > 0:  # every system: the Abbe sum cannot blur
            return self.at(focus_nm, self.px[points], self.py[points])[0]
        if self.plain:
            src = source_points(e, self.angle_deg)
            return abbe_image_2d(
                self.spectrum, self.orders, Optics.of(e), src, focus_nm,
                self.px[points], self.py[points], self.angle_deg,
            )  # fmt: skip
        ev, coef, cross, base = self._split(focus_nm)
        b = self.basis[:, points]
        field = coef @ b
        return base + 2.0 * (cross @ b).real + ev @ (field.real**2 + field.imag**2)

    def at(self, focus_nm: float, x_nm, y_nm) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Intensity and its x and y derivatives ``(P,)`` at the points ``(x, y)``."""
        o = self.orders
        x = np.atleast_1d(np.asarray(x_nm, dtype=np.float64))
        y = np.atleast_1d(np.asarray(y_nm, dtype=np.float64))
        if self.plain:
            sys = coherent_systems_2d(
                self.exposure,
                self.cell.px_nm,
                self.cell.py_nm,
                focus_nm,
                self.angle_deg,
                self.blur_nm,
            )
            inten, d_x, d_y = sys.at(self.spectrum, x, y)
            return inten[0], d_x[0], d_y[0]
        ev, coef, cross, base = self._split(focus_nm)
        b = plane_waves(o, x, y)
        gx, gy = 2j * np.pi * o.fx, 2j * np.pi * o.fy
        field, fdx, fdy = coef @ b, (coef * gx) @ b, (coef * gy) @ b
        inten = base + 2.0 * (cross @ b).real + ev @ (field.real**2 + field.imag**2)
        d_x = 2.0 * ((cross * gx) @ b).real + ev @ (2.0 * np.real(np.conj(field) * fdx))
        d_y = 2.0 * ((cross * gy) @ b).real + ev @ (2.0 * np.real(np.conj(field) * fdy))
        return inten, d_x, d_y


class PointImagesBatch:
    """:class:`PointImages` of ``B`` cells of one period at once: spectra ``(B, N)``,
    images ``(B, P)``; each cell keeps the systems its own bound asks for, so every
    row equals :class:`PointImages` of that cell alone to rounding, and is the same
    whatever other cells share the batch."""

    def __init__(
        self,
        exposure: Exposure,
        cell: Cell,
        spectra: np.ndarray,
        orders: CellOrders,
        angle_deg: float,
        basis: np.ndarray,
        blur_nm: float = 0.0,
    ):
        self.exposure, self.cell, self.orders, self.angle_deg = exposure, cell, orders, angle_deg
        self.blur_nm = blur_nm
        self.basis = basis  # (N, P)
        zero = orders.zero
        self.c0 = np.array(spectra[:, zero], dtype=np.complex128)
        self.d = np.array(spectra, dtype=np.complex128)
        self.d[:, zero] = 0.0
        self.variance = np.sum(self.d.real**2 + self.d.imag**2, axis=1)

    def _groups(self, focus_nm: float, rows: np.ndarray):
        """The cells ``rows`` grouped by how many systems their bound keeps: per group
        ``(members, weights (K,), coefficients (b, K, N), cross term (b, 1, N), the mean's
        image (b,))``.  Products run per cell on these shapes alone, so a cell's image
        does not depend on which cells share the batch."""
        sys = coherent_systems_2d(
            self.exposure, self.cell.px_nm, self.cell.py_nm, focus_nm, self.angle_deg, self.blur_nm
        )
        ev, kern = sys.eigenvalues, sys.kernels
        row = sys.dc_row()
        var = self.variance[rows]
        with np.errstate(divide="ignore"):
            floor = np.where(var > 0, KERNEL_TOL / var, np.inf)
        kept = np.searchsorted(-ev, -floor, side="right")
        for k in np.unique(kept).tolist():
            at = np.flatnonzero(kept == k)
            d, c0 = self.d[rows[at]], self.c0[rows[at]]
            coef = kern[None, :k, :] * d[:, None, :]
            cross = (row[None, :] * d * np.conj(c0)[:, None])[:, None, :]
            base = np.abs(c0) ** 2 * float(row[self.orders.zero].real)
            yield at, ev[:k], coef, cross, base

    def __call__(
        self, focus_nm: float, points: slice | np.ndarray = slice(None), rows=None
    ) -> np.ndarray:
        """Intensities ``(b, P)`` at ``focus_nm`` of the cells ``rows`` (indices; None:
        all), at the points ``points`` selects."""
        rows = np.arange(len(self.d)) if rows is None else np.asarray(rows)
        b = self.basis[:, points]
        out = np.empty((len(rows), b.shape[1]))
        for at, w, coef, cross, base in self._groups(focus_nm, rows):
            field = coef @ b  # (b, K, P), one product per cell
            out[at] = base[:, None] + 2.0 * (cross @ b)[:, 0].real
            out[at] += w @ (field.real**2 + field.imag**2)
        return out

    def at(self, focus_nm: float, x_nm: np.ndarray, y_nm: np.ndarray) -> tuple:
        """Intensity and its x and y derivatives ``(B, P)`` at each cell's own points
        ``(x, y)`` ``(B, P)``."""
        o = self.orders
        nb, p = x_nm.shape
        waves = plane_waves(o, x_nm.ravel(), y_nm.ravel()).reshape(len(o), nb, p)
        waves = waves.transpose(1, 0, 2)  # (B, N, P)
        gx, gy = 2j * np.pi * o.fx, 2j * np.pi * o.fy
        inten, d_x, d_y = (np.empty((nb, p)) for _ in range(3))
        for at, w, coef, cross, base in self._groups(focus_nm, np.arange(nb)):
            b = waves[at]
            field, fdx, fdy = coef @ b, (coef * gx) @ b, (coef * gy) @ b  # (b, K, P)
            inten[at] = base[:, None] + 2.0 * (cross @ b)[:, 0].real
            inten[at] += w @ (field.real**2 + field.imag**2)
            d_x[at] = 2.0 * ((cross * gx) @ b)[:, 0].real
            d_x[at] += w @ (2.0 * np.real(np.conj(field) * fdx))
            d_y[at] = 2.0 * ((cross * gy) @ b)[:, 0].real
            d_y[at] += w @ (2.0 * np.real(np.conj(field) * fdy))
        return inten, d_x, d_y


def plane_waves(orders: CellOrders, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """``exp(i 2 pi f_mn . r)`` ``(N, P)`` at the points ``(x, y)``: powers of one wave per
    axis (``2 m_max + 1`` and ``2 n_max + 1`` exponentials per point, not ``N``)."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    mx, ny = orders.m_max, orders.n_max
    wx = np.exp(2j * np.pi * np.arange(-mx, mx + 1)[:, None] * (x / orders.px_nm))
    wy = np.exp(2j * np.pi * np.arange(-ny, ny + 1)[:, None] * (y / orders.py_nm))
    return wx[orders.m + mx] * wy[orders.n + ny]
