"""2-D aerial images of one periodic cell: the Abbe sum (reference) and the Hopkins sum of
coherent systems.

Thin mask, scalar or vector light, the conventions of ``optics.aerial`` carried to 2-D:

* Lengths in wafer nm, frequencies in 1/nm.  A :class:`Cell` is a
  ``px x py`` rectangle centred on ``(0, 0)`` and repeated along x and y.
  Its x axis runs at ``angle_deg`` in the layout (0: the layout's x); the
  source is turned by minus that angle (:func:`aerial.source_points`), so a
  dipole on x has its poles on the cell's x axis when ``angle_deg = 0``.
* Features are rectangles ``(x0, y0, x1, y1)`` in the cell frame (or simple
  polygons, :func:`polygon_spectrum`), with the feature amplitude of
  :func:`aerial.mask_amplitudes` on the background's.  A feature may cross
  the cell border (it wraps), but features must not overlap each other or
  their own periodic copies: amplitudes add.
* Orders ``(m, n)`` sit at ``(m / px, n / py)``.  A cell keeps those with
  ``|f| <= (1 + sigma_max) NA / lambda``, the only ones any source point can
  send through the pupil.
* Images are arrays ``(..., ny, nx)``: axis -2 is y, axis -1 is x, on the
  grid ``x_j = cx + (j - nx // 2) px / nx``, ``y_k = cy + (k - ny // 2) py /
  ny`` around a chosen centre ``(cx, cy)`` (sample ``(ny // 2, nx // 2)``
  lies on it; see :func:`image_axes`).  An open (all clear) mask images to 1.
* Defocus is the non-paraxial pupil phase of :func:`aerial.pupil`, in a
  medium of index ``Optics.n_medium``.
* The source is sampled as for 1-D cuts (``aerial.IMAGE_SOURCE_STEP``, so a
  pattern of lines gives the 1-D image exactly).  Against a 0.01 step, images
  of square contact arrays (k1 0.3 to 1.2, ArF immersion) change by less than
  5e-3 of the open frame (4.2e-3 worst, dipole; 3.0e-3 quadrupole; 1.8e-3
  discs and rings; a unit test holds the 5e-3), more than lines (3e-3): more
  orders meet the pupil's rim.
* A lattice that is not rectangular is imaged through its rectangular
  supercell (:func:`pitchguard.optics.cells2d.lattice_cell`); a finite group of features (the last
  rows of an array, line ends) through a clip window (:func:`pitchguard.optics.cells2d.clip_cell`),
  periodic like any cell, the background's transmission in its padding.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from pitchguard.deck import Exposure
from pitchguard.optics.aerial import (
    SOCS_KEEP,
    Optics,
    blur_factors,
    pupil,
    source_is_symmetric,
    source_points,
)
from pitchguard.optics.cells2d import Cell
from pitchguard.optics.source_folding import fold_source, unfold_tcc

SOURCE_CHUNK = 512
"""Source points per block of the Abbe sum (bounds memory: block x orders x points)."""


FRAME_ELEMENTS = 1 << 21
"""Source points x orders per block of a pupil frame (32 MB of amplitudes): few, large
products (each BLAS call costs a thread start-up, which dominates small ones on a busy
machine)."""


FIELD_BUDGET = 1 << 22
"""Complex samples per block of fields in :meth:`CoherentSystems2D.image` (64 MB)."""


RASTER_PER_LAMBDA_NA = 64
"""Image samples per lambda/NA along each axis by default (:func:`default_samples`).  Halving
the step moves the printed size of contact arrays (k1 0.3 to 1) by less than 0.1 nm (0.09 nm
measured worst: a 152 nm side printing at 36 nm, KrF; a unit test holds the 0.1 nm)."""


# --------------------------------------------------------------------------- orders and spectra


@dataclass(frozen=True, eq=False)
class CellOrders:
    """The orders ``(m, n)`` of a ``px x py`` cell that some source point can pass."""

    px_nm: float
    py_nm: float
    m: np.ndarray  # (N,) int
    n: np.ndarray  # (N,) int

    @property
    def fx(self) -> np.ndarray:
        return self.m / self.px_nm

    @property
    def fy(self) -> np.ndarray:
        return self.n / self.py_nm

    @property
    def m_max(self) -> int:
        return int(np.max(np.abs(self.m)))

    @property
    def n_max(self) -> int:
        return int(np.max(np.abs(self.n)))

    @property
    def zero(self) -> int:
        """Index of the 0th order."""
        return int(np.flatnonzero((self.m == 0) & (self.n == 0))[0])

    def __len__(self) -> int:
        return len(self.m)


@lru_cache(maxsize=1024)
def cell_orders(px_nm: float, py_nm: float, optics: Optics, sigma_max: float = 1.0) -> CellOrders:
    """Orders with ``|f| <= (1 + sigma_max) NA / lambda``, row by row (n, then m)."""
    reach = optics.cutoff * (1.0 + sigma_max)
    m_max = int(math.floor(px_nm * reach + 1e-9))
    n_max = int(math.floor(py_nm * reach + 1e-9))
    n, m = np.meshgrid(np.arange(-n_max, n_max + 1), np.arange(-m_max, m_max + 1), indexing="ij")
    m, n = m.ravel(), n.ravel()
    keep = (m / px_nm) ** 2 + (n / py_nm) ** 2 <= reach**2 * (1.0 + 1e-9)
    m, n = m[keep], n[keep]
    m.flags.writeable = False
    n.flags.writeable = False
    return CellOrders(float(px_nm), float(py_nm), m, n)


def exposure_orders(exposure: Exposure, px_nm: float, py_nm: float) -> CellOrders:
    """:func:`cell_orders` for an exposure's optics and largest source radius."""
    return cell_orders(float(px_nm), float(py_nm), Optics.of(exposure), exposure.sigma_max)


def rect_spectrum(
    orders: CellOrders, rects_nm, feature: complex, background: complex
) -> np.ndarray:
    """Fourier coefficients ``c_mn`` of a cell of rectangles, batched.

    ``rects_nm`` is ``(..., R, 4)`` ``(x0, y0, x1, y1)``; zero-area rows pad
    cells with fewer rectangles.  Returns ``(..., N)`` in the order of
    ``orders``.

    Notes
    -----
    ``c_mn = b delta_m0 delta_n0 + (a - b) sum_r (w_x w_y / (p_x p_y))
    sinc(m w_x / p_x) sinc(n w_y / p_y) exp(-i 2 pi (m x_c / p_x + n y_c /
    p_y))`` with ``sinc(u) = sin(pi u) / (pi u)``, for rectangles
    ``w_x x w_y`` centred at ``(x_c, y_c)``, feature amplitude ``a`` and
    background ``b`` (separable transform of a rectangle; Goodman,
    *Introduction to Fourier Optics*).
    """
    r = np.asarray(rects_nm, dtype=np.float64)
    px, py = orders.px_nm, orders.py_nm
    wx, wy = r[..., 2] - r[..., 0], r[..., 3] - r[..., 1]
    xc, yc = 0.5 * (r[..., 0] + r[..., 2]), 0.5 * (r[..., 1] + r[..., 3])
    m, n = orders.m, orders.n
    amp = (wx * wy)[..., None] / (px * py)
    shape = np.sinc(m * wx[..., None] / px) * np.sinc(n * wy[..., None] / py)
    phase = np.exp(-2j * np.pi * (m * xc[..., None] / px + n * yc[..., None] / py))
    c = (complex(feature) - complex(background)) * np.sum(amp * shape * phase, axis=-2)
    c[..., orders.zero] += background
    return c


def polygon_spectrum(
    orders: CellOrders, polygons, feature: complex, background: complex
) -> np.ndarray:
    """Fourier coefficients ``c_mn`` of a cell of simple polygons (any angles), exact.

    ``polygons`` is a sequence of ``(k, 2)`` vertex arrays (nm, cell frame,
    either orientation, no holes, not overlapping).  Returns ``(N,)``.

    Notes
    -----
    By the divergence theorem with ``V = i f exp(-i 2 pi f.r) / (2 pi |f|^2)``
    (``div V = exp(-i 2 pi f.r)``), the transform of a polygon traversed
    anticlockwise is a sum over its edges ``d = b - a``:
    ``F(f) = sum_e i (f_x d_y - f_y d_x) / (2 pi |f|^2) exp(-i 2 pi f.(a + b) / 2)
    sinc(f.d)``, and its area at ``f = 0``; then ``c_mn = b delta + (a - b)
    F(f_mn) / (p_x p_y)``.
    """
    starts, ends = [], []
    area = 0.0
    for poly in polygons:
        v = np.asarray(poly, dtype=np.float64).reshape(-1, 2)
        w = np.roll(v, -1, axis=0)
        signed = 0.5 * float(np.sum(v[:, 0] * w[:, 1] - w[:, 0] * v[:, 1]))
        if signed < 0:  # make it anticlockwise
            v, w = w[::-1], v[::-1]
        starts.append(v)
        ends.append(w)
        area += abs(signed)
    a = np.concatenate(starts)
    b = np.concatenate(ends)
    d, mid = b - a, 0.5 * (a + b)
    fx, fy = orders.fx, orders.fy
    f2 = fx * fx + fy * fy
    nz = f2 > 0
    cross = fx[None, nz] * d[:, 1:2] - fy[None, nz] * d[:, 0:1]  # (E, N')
    along = fx[None, nz] * d[:, 0:1] + fy[None, nz] * d[:, 1:2]
    phase = np.exp(-2j * np.pi * (fx[None, nz] * mid[:, 0:1] + fy[None, nz] * mid[:, 1:2]))
    transform = np.zeros(len(orders), dtype=np.complex128)
    transform[nz] = np.sum(1j * cross * phase * np.sinc(along), axis=0) / (2 * np.pi * f2[nz])
    transform[~nz] = area
    c = (complex(feature) - complex(background)) * transform / (orders.px_nm * orders.py_nm)
    c[orders.zero] += background
    return c


def cell_spectra(
    cells: list[Cell], orders: CellOrders, feature: complex, background: complex
) -> np.ndarray:
    """``(len(cells), N)`` spectra of cells sharing the period of ``orders``."""
    width = max(len(c.rects_nm) for c in cells)
    rects = np.zeros((len(cells), width, 4))
    for k, c in enumerate(cells):
        rects[k, : len(c.rects_nm)] = c.rect_array()
    return rect_spectrum(orders, rects, feature, background)


# --------------------------------------------------------------------------- images


def image_axes(
    orders: CellOrders, nx: int, ny: int, centre_nm: tuple[float, float] = (0.0, 0.0)
) -> tuple[np.ndarray, np.ndarray]:
    """The ``x`` and ``y`` sample positions of :meth:`CoherentSystems2D.image`."""
    cx, cy = centre_nm
    x = cx + (np.arange(nx) - nx // 2) * orders.px_nm / nx
    y = cy + (np.arange(ny) - ny // 2) * orders.py_nm / ny
    return x, y


def default_samples(orders: CellOrders, optics: Optics) -> tuple[int, int]:
    """``(nx, ny)``: a step of at most ``lambda / NA / RASTER_PER_LAMBDA_NA`` and at least
    four samples per order along each axis, rounded up to an even count."""
    step = optics.wavelength_nm / optics.na / RASTER_PER_LAMBDA_NA

    def count(period: float, order_max: int) -> int:
        n = max(int(math.ceil(period / step)), 4 * order_max + 1, 16)
        return n + (n % 2)

    return count(orders.px_nm, orders.m_max), count(orders.py_nm, orders.n_max)


def abbe_image_2d(
    spectrum: np.ndarray,
    orders: CellOrders,
    optics: Optics,
    src: tuple[np.ndarray, np.ndarray],
    defocus_nm: float,
    x_nm,
    y_nm,
    angle_deg: float = 0.0,
) -> np.ndarray:
    """Reference image at points ``(x, y)`` (broadcast together): one coherent image per
    source point, summed.

    ``I(r) = sum_s w_s |sum_mn c_mn P(f_mn + s) exp(i 2 pi f_mn . r)|^2`` with
    the source point at ``s = sigma NA / lambda`` (cell frame, turned by
    ``angle_deg`` from the layout's); vector light sums each point's states and
    field components too (:mod:`pitchguard.optics.polarization`).
    """
    pts, w = src
    spectrum = np.asarray(spectrum, dtype=np.complex128).reshape(len(orders))
    x, y = np.broadcast_arrays(np.asarray(x_nm, dtype=np.float64), np.asarray(y_nm, float))
    xf, yf = x.ravel(), y.ravel()
    fx, fy = orders.fx, orders.fy
    out = np.zeros(x.size)
    chunk = max(1, FIELD_BUDGET // (len(orders) * SOURCE_CHUNK))  # points per block
    for k in range(0, len(w), SOURCE_CHUNK):
        s = pts[k : k + SOURCE_CHUNK]
        sfx = fx[None, :] + s[:, 0:1] * optics.cutoff
        sfy = fy[None, :] + s[:, 1:2] * optics.cutoff
        amp = pupil(sfx, sfy, optics, defocus_nm) * spectrum[None, :]
        rows = optics.field_factors(sfx, sfy, s, angle_deg) if optics.vector else [1.0]
        for p0 in range(0, x.size, chunk):
            arg = fx[:, None] * xf[None, p0 : p0 + chunk] + fy[:, None] * yf[None, p0 : p0 + chunk]
            basis = np.exp(2j * np.pi * arg)
            for row in rows:
                field = (amp * row) @ basis  # (S, P)
                out[p0 : p0 + chunk] += w[k : k + SOURCE_CHUNK] @ (field.real**2 + field.imag**2)
    return out.reshape(x.shape)


def coarse_size(samples: int, order_max: int) -> int:
    """Samples per axis on which fields are summed: ``samples`` when that is fewer than
    the intensity's band needs (exact pointwise), else the smallest power of two
    holding the band ``|k| <= 2 order_max`` exactly."""
    return min(samples, 1 << (4 * order_max + 1).bit_length())


def resample(inten: np.ndarray, orders: CellOrders, nx: int, ny: int) -> np.ndarray:
    """Intensities ``(m, cy, cx)`` on a grid of :func:`coarse_size` brought to ``(m, ny, nx)``.

    The intensity holds only ``|k_x| <= 2 m_max``, ``|k_y| <= 2 n_max``, so
    zero-padding its spectrum interpolates it exactly (band-limited).  An axis
    already at its final size is left alone.
    """
    _, cy, cx = inten.shape
    if cy != ny:
        spec = np.fft.fft(inten, axis=1)
        band = np.arange(-2 * orders.n_max, 2 * orders.n_max + 1)
        out = np.zeros((len(inten), ny, cx), dtype=np.complex128)
        out[:, band % ny, :] = spec[:, band % cy, :]
        inten = np.fft.ifft(out, axis=1).real * (ny / cy)
    if cx != nx:
        spec = np.fft.rfft(inten, axis=2)
        top = 2 * orders.m_max + 1
        out = np.zeros((len(inten), ny, nx // 2 + 1), dtype=np.complex128)
        out[:, :, :top] = spec[:, :, :top]
        inten = np.fft.irfft(out, n=nx, axis=2) * (nx / cx)
    return inten


class PupilFrame2D:
    """What the coherent systems of one source and cell period share through focus: where
    each order of each source point falls in the pupil, and the defocus phase per unit
    focus there (the 2-D counterpart of ``aerial.PupilFrame``), in blocks of source
    points.  :meth:`blocks` gives ``A = sqrt(w_s) P(f_k + s)`` block by block at any
    focus, the same values as ``aerial.pupil``, for one complex exponential per passing
    order.  With vector light each source point gives a row per polarisation state and
    field component (the factors of :mod:`pitchguard.optics.polarization`).

    A source symmetric about the frame's axes is folded onto them (``fold``;
    :mod:`pitchguard.optics.source_folding`): the blocks then hold a half or a
    quarter of the points, and :meth:`CoherentSystems2D` unfolds the TCC."""

    def __init__(
        self,
        optics: Optics,
        src: tuple[np.ndarray, np.ndarray],
        orders: CellOrders,
        angle_deg: float = 0.0,
        fold: bool = True,
    ):
        pts, w = src
        self.orders = orders
        self.folds: tuple[int, ...] = ()
        if fold:
            pts, w, self.folds = fold_source(pts, w, optics.polarization, angle_deg)
        n_over_l = optics.n_medium / optics.wavelength_nm
        per_point = 6 if optics.vector else 1  # rows of A per source point
        rows = max(SOURCE_CHUNK // per_point, FRAME_ELEMENTS // (len(orders) * per_point))
        self._blocks = []
        for k in range(0, len(w), rows):
            s = pts[k : k + rows]
            fx = orders.fx[None, :] + s[:, 0:1] * optics.cutoff
            fy = orders.fy[None, :] + s[:, 1:2] * optics.cutoff
            f2 = fx * fx + fy * fy
            inside = f2 <= optics.cutoff**2 * (1.0 + 1e-12)  # as aerial.pupil decides
            root_w = np.broadcast_to(np.sqrt(w[k : k + rows])[:, None], f2.shape)[inside]
            kz = np.sqrt(np.maximum(n_over_l**2 - f2[inside], 0.0)) - n_over_l
            factors = None
            if optics.vector:
                factors = optics.field_factors(fx, fy, s, angle_deg)[:, inside]
            self._blocks.append((inside, root_w, kz, factors))

    def blocks(self, defocus_nm: float):
        """``A`` at ``defocus_nm``, one block of source points at a time."""
        for inside, root_w, kz, factors in self._blocks:
            passing = root_w * np.exp(2j * np.pi * defocus_nm * kz) if defocus_nm else root_w
            if factors is None:
                a = np.zeros(inside.shape, dtype=np.complex128)
                a[inside] = passing
            else:
                a = np.zeros((len(factors),) + inside.shape, dtype=np.complex128)
                a[:, inside] = factors * passing
                a = a.reshape(-1, inside.shape[1])
            yield a


class CoherentSystems2D:
    """Hopkins imaging of one cell period at one focus, as a sum of coherent systems.

    Notes
    -----
    With ``A[s, k] = sqrt(w_s) P(f_k + s)`` the transmission cross
    coefficients are ``TCC = A^H A``; with ``TCC = V diag(lambda) V^H`` the
    image is ``I(r) = sum_j lambda_j |sum_k conj(V[k, j]) c_k exp(i 2 pi f_k . r)|^2``
    (Hopkins; the same sum as :func:`abbe_image_2d`, regrouped).  Kernels
    below ``keep`` of the largest eigenvalue are dropped
    (``aerial.SOCS_KEEP``).
    """

    def __init__(
        self,
        optics: Optics,
        src: tuple[np.ndarray, np.ndarray],
        orders: CellOrders,
        defocus_nm: float = 0.0,
        keep: float = SOCS_KEEP,
        blur_nm: float = 0.0,
        angle_deg: float = 0.0,
    ):
        frame = PupilFrame2D(optics, src, orders, angle_deg)
        self._decompose(frame, defocus_nm, keep, blur_nm)

    @classmethod
    def from_frame(
        cls,
        frame: PupilFrame2D,
        defocus_nm: float = 0.0,
        keep: float = SOCS_KEEP,
        blur_nm: float = 0.0,
    ) -> CoherentSystems2D:
        """The systems at one focus from a :class:`PupilFrame2D` kept for several."""
        out = object.__new__(cls)
        out._decompose(frame, defocus_nm, keep, blur_nm)
        return out

    def _decompose(
        self, frame: PupilFrame2D, defocus_nm: float, keep: float, blur_nm: float = 0.0
    ) -> None:
        n = len(frame.orders)
        tcc = np.zeros((n, n), dtype=np.complex128)
        for a in frame.blocks(defocus_nm):
            tcc += a.conj().T @ a
        tcc = unfold_tcc(tcc, frame.orders.m, frame.orders.n, frame.folds)
        if blur_nm > 0:  # a blurred image: aerial.blur_factors at each order difference
            fx, fy = frame.orders.fx, frame.orders.fy
            dfx, dfy = fx[:, None] - fx[None, :], fy[:, None] - fy[None, :]
            tcc = tcc * blur_factors(np.sqrt(dfx * dfx + dfy * dfy), blur_nm)
        ev, v = np.linalg.eigh(tcc)
        order = np.argsort(ev)[::-1]
        ev, v = ev[order], v[:, order]
        kept = ev >= keep * (ev[0] if len(ev) and ev[0] > 0 else 1.0)
        self.orders = frame.orders
        self.eigenvalues = ev[kept]
        self.kernels = v[:, kept].conj().T  # (K, N)

    def dc_row(self) -> np.ndarray:
        """``TCC_0n = sum_k lambda_k conj(K_k0) K_kn`` ``(N,)``: how the 0th order mixes with
        every other (``TCC_00`` is the open frame's intensity), kept once computed."""
        row = getattr(self, "_dc_row", None)
        if row is None:
            k0 = self.kernels[:, self.orders.zero]
            row = (self.eigenvalues * np.conj(k0)) @ self.kernels
            self._dc_row = row
        return row

    def through_opposite_focus(self) -> CoherentSystems2D:
        """The systems at minus this focus: ``A(-z) = conj(A(z))`` (the defocus phase is odd
        in focus, the rest of ``A`` real), so the same eigenvalues and conjugate kernels."""
        other = object.__new__(CoherentSystems2D)
        other.orders = self.orders
        other.eigenvalues = self.eigenvalues
        other.kernels = self.kernels.conj()
        return other

    def image(
        self, spectra: np.ndarray, nx: int, ny: int, centre_nm: tuple[float, float] = (0.0, 0.0)
    ) -> np.ndarray:
        """Intensities ``(m, ny, nx)`` on the grid of :func:`image_axes` around ``centre_nm``.

        The fields hold ``|m| <= m_max``, ``|n| <= n_max``, so the intensity
        holds twice that band: fields are transformed on the smallest power
        of two grid that holds the intensity's band exactly (or on
        ``nx x ny`` if smaller, exact pointwise), and the intensity is
        brought to ``nx x ny`` by zero-padding its spectrum (exact
        band-limited interpolation).
        """
        o = self.orders
        if nx < 2 * o.m_max + 1 or ny < 2 * o.n_max + 1:
            raise ValueError("nx, ny must be at least the number of orders along each axis")
        spectra = np.atleast_2d(spectra)
        # Moving the mask by -shift puts the grid's sample (0, 0) at the first sample position.
        sx = centre_nm[0] - (nx // 2) * o.px_nm / nx
        sy = centre_nm[1] - (ny // 2) * o.py_nm / ny
        phase = np.exp(2j * np.pi * (o.fx * sx + o.fy * sy))
        cx, cy = coarse_size(nx, o.m_max), coarse_size(ny, o.n_max)
        k = len(self.eigenvalues)
        inten = np.empty((len(spectra), cy, cx))
        step = max(1, FIELD_BUDGET // max(1, k * cx * cy))
        iy, ix = o.n % cy, o.m % cx
        for b0 in range(0, len(spectra), step):
            coef = self.kernels[:, None, :] * (spectra[b0 : b0 + step] * phase)[None, :, :]
            buf = np.zeros(coef.shape[:2] + (cy, cx), dtype=np.complex128)
            buf[:, :, iy, ix] = coef
            field = np.fft.ifft2(buf) * (cx * cy)
            inten[b0 : b0 + step] = np.tensordot(
                self.eigenvalues, field.real**2 + field.imag**2, axes=1
            )
        return resample(inten, o, nx, ny)

    def at(
        self, spectra: np.ndarray, x_nm, y_nm, slopes: bool = True
    ) -> tuple[np.ndarray, np.ndarray | None, np.ndarray | None]:
        """Intensity and its x and y derivatives ``(m, P)`` at points ``(x, y)``
        (derivatives None without ``slopes``).

        ``x``, ``y`` are ``(P,)`` (shared) or ``(m, P)`` (one row per spectrum).
        """
        o = self.orders
        spectra = np.atleast_2d(spectra)
        coef = self.kernels[:, None, :] * spectra[None, :, :]  # (K, m, N)
        x = np.atleast_2d(np.asarray(x_nm, dtype=np.float64))
        y = np.atleast_2d(np.asarray(y_nm, dtype=np.float64))
        arg = o.fx[None, :, None] * x[:, None, :] + o.fy[None, :, None] * y[:, None, :]
        basis = np.exp(2j * np.pi * arg)  # (m|1, N, P)
        shape = (len(spectra),) + basis.shape[1:]
        basis = np.broadcast_to(basis, shape)
        field = np.einsum("kmn,mnp->kmp", coef, basis)
        ev = self.eigenvalues
        if not slopes:
            return np.einsum("k,kmp->mp", ev, field.real**2 + field.imag**2), None, None
        dfx = np.einsum("kmn,mnp->kmp", coef * (2j * np.pi * o.fx), basis)
        dfy = np.einsum("kmn,mnp->kmp", coef * (2j * np.pi * o.fy), basis)
        inten = np.einsum("k,kmp->mp", ev, field.real**2 + field.imag**2)
        d_x = np.einsum("k,kmp->mp", ev, 2 * np.real(np.conj(field) * dfx))
        d_y = np.einsum("k,kmp->mp", ev, 2 * np.real(np.conj(field) * dfy))
        return inten, d_x, d_y


def source_angle(exposure: Exposure, angle_deg: float) -> float:
    """The source turn that matters: none for round sources, else modulo 180 degrees
    (every source shape here is point-symmetric, and so is linearly polarised light),
    to 0.1 degree."""
    return 0.0 if source_is_symmetric(exposure) else round(angle_deg, 1) % 180.0


def coherent_systems_2d(
    exposure: Exposure,
    px_nm: float,
    py_nm: float,
    focus_nm: float,
    angle_deg: float = 0.0,
    blur_nm: float = 0.0,
) -> CoherentSystems2D:
    """The imaging systems of a ``px x py`` cell at one focus, of an image blurred by
    a Gaussian of ``blur_nm`` (the layer's resist blur), kept per process.

    The systems at ``-z`` are the conjugates of those at ``+z``
    (:meth:`CoherentSystems2D.through_opposite_focus`): a focus pair costs one TCC.
    """
    return _systems(
        exposure,
        float(px_nm),
        float(py_nm),
        float(focus_nm),
        source_angle(exposure, angle_deg),
        float(blur_nm),
    )


@lru_cache(maxsize=512)
def _systems(
    exposure: Exposure,
    px_nm: float,
    py_nm: float,
    focus_nm: float,
    angle_deg: float,
    blur_nm: float = 0.0,
) -> CoherentSystems2D:
    if focus_nm < 0:
        return _systems(
            exposure, px_nm, py_nm, -focus_nm, angle_deg, blur_nm
        ).through_opposite_focus()
    return CoherentSystems2D.from_frame(
        _frame(exposure, px_nm, py_nm, angle_deg), focus_nm, blur_nm=blur_nm
    )


def clear_systems_cache() -> None:
    """Forget this process's imaging systems and pupil frames (:func:`coherent_systems_2d`)."""
    _systems.cache_clear()
    _frame.cache_clear()


@lru_cache(maxsize=16)
def _frame(exposure: Exposure, px_nm: float, py_nm: float, angle_deg: float) -> PupilFrame2D:
    return PupilFrame2D(
        Optics.of(exposure),
        source_points(exposure, angle_deg),
        exposure_orders(exposure, px_nm, py_nm),
        angle_deg,
    )
