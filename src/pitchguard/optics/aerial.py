"""1-D aerial images: the Abbe sum (reference) and the Hopkins sum of coherent systems."""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from pitchguard.deck import AttenuatedMask, Exposure
from pitchguard.optics.orders import sample_source
from pitchguard.optics.polarization import (
    field_factors,
    image_index,
    is_scalar,
    jones_states,
    mirror_symmetric,
    turns_with_frame,
)
from pitchguard.optics.source_folding import fold_source, unfold_tcc

IMAGE_SOURCE_STEP = 0.02
"""Source sampling step (sigma units) for imaging: cells the source's edge cuts are
split (``orders.sample_source``), and for 1-D cuts those a pupil rim of an order
cuts (``source_rims``).  Against a 0.005 step refined alike, 1-D images through
pitch (k1 0.3-1.2) stay within 2e-3 of the open frame for discs, rings, dipoles
and quadrupoles in any direction (1.3e-3 worst measured, a dipole across its
axis; a unit test holds 2e-3).  The image cost does not depend on it, only the
one-off TCC build does."""


SOCS_KEEP = 1e-7
"""Kernels whose eigenvalue is below this fraction of the largest are dropped."""


@dataclass(frozen=True)
class Optics:
    """What the imaging needs of an exposure, in nm."""

    wavelength_nm: float
    na: float
    n_medium: float
    polarization: str = "scalar"  # see optics.polarization.POLARIZATIONS
    image_index: float | None = None  # the resist's index; None: the immersion medium's

    @classmethod
    def of(cls, exposure: Exposure) -> Optics:
        return cls(
            exposure.wavelength_nm,
            exposure.na,
            exposure.immersion_index,
            exposure.polarization,
            exposure.resist_index,
        )

    @property
    def vector(self) -> bool:
        return not is_scalar(self.polarization)

    def field_factors(self, fx: np.ndarray, fy: np.ndarray, pts: np.ndarray, angle_deg: float):
        """Vector factors ``(R * 3, S, ...)`` of :func:`polarization.field_factors` for the
        source points ``pts`` (frame turned by ``angle_deg``) at frequencies ``(fx, fy)``."""
        jones, weights = jones_states(self.polarization, pts, angle_deg)
        return field_factors(fx, fy, jones, weights, self.wavelength_nm, image_index(self))

    @property
    def cutoff(self) -> float:
        """Coherent cutoff frequency NA / lambda (1/nm)."""
        return self.na / self.wavelength_nm


def mask_amplitudes(exposure: Exposure, field: str) -> tuple[complex, complex]:
    """``(feature, background)`` amplitudes for drawn shapes on a clear or dark field."""
    dark = (
        -math.sqrt(exposure.mask.transmission) if isinstance(exposure.mask, AttenuatedMask) else 0.0
    )
    return (dark, 1.0) if field == "clear" else (1.0, dark)


@lru_cache(maxsize=256)
def source_points(exposure: Exposure, pitch_angle_deg: float, step: float = IMAGE_SOURCE_STEP):
    """Source points ``(sx, sy)`` in sigma units and weights, turned into the image frame.

    ``pitch_angle_deg`` is the direction of the pitch in the layout; the
    points are turned by minus that angle so the pitch runs along +x.
    """
    samp = sample_source(exposure.illumination, step)
    t = math.radians(-pitch_angle_deg)
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    return samp.grid @ rot.T, samp.weights


def source_is_symmetric(exposure: Exposure) -> bool:
    """True when turning the source changes nothing (coherent, disc, ring; light
    unpolarised or polarised around the pupil centre)."""
    round_source = exposure.illumination.shape in ("coherent", "conventional", "annular")
    return round_source and not turns_with_frame(exposure.polarization)


def pupil(fx: np.ndarray, fy: np.ndarray, optics: Optics, defocus_nm: float) -> np.ndarray:
    """Pupil function at spatial frequencies ``(fx, fy)`` (1/nm), with defocus."""
    f2 = fx * fx + fy * fy
    inside = f2 <= optics.cutoff**2 * (1.0 + 1e-12)
    p = inside.astype(np.complex128)
    if defocus_nm:
        # The phase only where the pupil passes light (most of a source's orders
        # miss it): the same values as over the whole array, at a fraction of it.
        n_over_l = optics.n_medium / optics.wavelength_nm
        kz = np.sqrt(np.maximum(n_over_l**2 - f2[inside], 0.0)) - n_over_l
        p[inside] = np.exp(2j * np.pi * defocus_nm * kz)
    return p


def blur_factors(df: np.ndarray, blur_nm: float) -> np.ndarray:
    """What a Gaussian blur of standard deviation ``blur_nm`` leaves of the image's
    component at frequency ``df`` (1/nm): its Fourier transform,
    ``exp(-2 pi^2 sigma^2 f^2)``.

    Every image here is a Hopkins sum ``sum_nm c_n conj(c_m) TCC_nm exp(i 2 pi
    (f_n - f_m) x)``, so blurring the image multiplies ``TCC_nm`` by this
    factor at ``f_n - f_m``: the blurred TCC stays Hermitian and positive
    semi-definite (a Hadamard product with a Gaussian kernel matrix, Schur's
    product theorem), and decomposes into coherent systems as before.
    """
    return np.exp(-2.0 * np.pi**2 * blur_nm**2 * df * df)


def n_orders(period_nm: float, optics: Optics, sigma_max: float = 1.0) -> int:
    """Largest order index any source point can send through the pupil."""
    return int(math.floor(period_nm * optics.cutoff * (1.0 + sigma_max) + 1e-9))


def segment_spectrum(
    period_nm: float, edges_nm: np.ndarray, values: np.ndarray, n_max: int
) -> np.ndarray:
    """Fourier coefficients ``c_n``, ``n = -n_max..n_max``, of a piecewise-constant period.

    The period ``[x0, x0 + period)`` is cut at ``edges_nm`` (sorted, length
    ``k + 1``, spanning exactly one period); segment ``j`` between
    ``edges[j]`` and ``edges[j + 1]`` has amplitude ``values[j]``.
    Batched: ``edges_nm`` may be ``(m, k + 1)`` and ``values`` ``(m, k)``.

    Notes
    -----
    ``c_n = (1/P) sum_j v_j int_{e_j}^{e_j+1} exp(-i 2 pi n x / P) dx``; for
    ``n != 0`` each integral is ``(exp(-i 2 pi n e_j / P) - exp(-i 2 pi n e_j+1 / P)) /
    (i 2 pi n / P)``.
    """
    e = np.atleast_2d(np.asarray(edges_nm, dtype=np.float64))
    v = np.atleast_2d(np.asarray(values, dtype=np.complex128))
    n = np.arange(-n_max, n_max + 1)
    phase = np.exp(-2j * np.pi * n[None, None, :] * e[:, :, None] / period_nm)  # (m, k+1, N)
    with np.errstate(divide="ignore", invalid="ignore"):
        integ = (phase[:, :-1, :] - phase[:, 1:, :]) / (2j * np.pi * n[None, None, :] / period_nm)
    widths = np.diff(e, axis=1)
    integ[:, :, n_max] = widths  # n = 0
    c = np.einsum("mk,mkn->mn", v, integ) / period_nm
    return c if np.ndim(edges_nm) > 1 else c[0]


def grating_spectrum(pitch_nm: float, cd_nm: float, feature, background, n_max: int):
    """One period of a grating, feature of width ``cd_nm`` centred on x = 0."""
    h = cd_nm / 2.0
    edges = np.array([-pitch_nm / 2, -h, h, pitch_nm / 2])
    return segment_spectrum(pitch_nm, edges, np.array([background, feature, background]), n_max)


def abbe_image(
    spectrum: np.ndarray,
    period_nm: float,
    optics: Optics,
    src: tuple[np.ndarray, np.ndarray],
    defocus_nm: float,
    x_nm: np.ndarray,
    angle_deg: float = 0.0,
) -> np.ndarray:
    """Reference image: the incoherent sum of one coherent image per source point.

    ``I(x) = sum_s w_s |sum_n c_n P(f_n + s) exp(i 2 pi f_n x)|^2`` with
    ``f_n = n / period`` and the source point at ``s = sigma NA / lambda``;
    with vector light, the sum also runs over each point's polarisation states
    and field components (:mod:`pitchguard.optics.polarization`; the frame is
    the layout's turned by ``angle_deg``).
    """
    pts, w = src
    n_max = (len(spectrum) - 1) // 2
    fn = np.arange(-n_max, n_max + 1) / period_nm
    fx = fn[None, :] + pts[:, 0:1] * optics.cutoff
    fy = np.broadcast_to(pts[:, 1:2] * optics.cutoff, fx.shape)
    amp = pupil(fx, fy, optics, defocus_nm) * spectrum[None, :]  # (S, N)
    basis = np.exp(2j * np.pi * fn[:, None] * np.asarray(x_nm)[None, :])  # (N, X)
    if not optics.vector:
        field = amp @ basis  # (S, X)
        return (w[:, None] * np.abs(field) ** 2).sum(axis=0)
    rows = optics.field_factors(fx, fy, pts, angle_deg)  # (R, S, N)
    out = np.zeros(len(np.atleast_1d(x_nm)))
    for row in rows:
        field = (amp * row) @ basis
        out += (w[:, None] * np.abs(field) ** 2).sum(axis=0)
    return out


def merge_mirrored(src: tuple[np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Source points ``(sx, sy)`` and ``(sx, -sy)`` as one point of their summed weight.

    In the image of a 1-D mask a source point acts through the pupil at
    ``(f_n + sx, sy)``, which depends on ``sy`` only as ``sy^2``: mirror
    images about the pitch axis give equal rows of the TCC's source-by-order
    matrix, and one row of weight ``w1 + w2`` gives the same ``A^H A``.
    Vector light keeps this when its states mirror onto themselves
    (:func:`polarization.mirror_symmetric`): the mirrored point's field rows
    differ only in the sign of the y component.  Points are matched to 1e-12 sigma (a turned grid
    carries rounding of that order).  Symmetric sources halve.
    """
    pts, w = src
    seen = (pts.tobytes(), np.asarray(w).tobytes())
    merged = _MERGED.get(seen)
    if merged is None:
        key = np.round(np.stack([pts[:, 0], np.abs(pts[:, 1])], axis=1), 12)
        key, first, inverse = np.unique(key, axis=0, return_index=True, return_inverse=True)
        weights = np.bincount(inverse.reshape(-1), weights=w, minlength=len(key))
        if len(_MERGED) >= 16:
            _MERGED.clear()
        merged = (pts[first], weights)
        for a in merged:
            a.flags.writeable = False
        _MERGED[seen] = merged
    return merged


_MERGED: dict = {}
"""Merged sources by their points and weights: every period of a source merges alike."""


class PupilFrame:
    """What the coherent systems of one source, period and order count share
    through focus: the source merged by mirror images (:func:`merge_mirrored`)
    where the light allows, where each order of each source point falls in the
    pupil, and the defocus phase per unit focus there.  :meth:`amplitudes`
    gives the matrix ``A = sqrt(w_s) P(f_n + s)`` at any focus (with vector
    light one row per source point, state and field component), costing one
    complex exponential per passing order."""

    def __init__(
        self,
        optics: Optics,
        src: tuple[np.ndarray, np.ndarray],
        period_nm: float,
        n_max: int,
        angle_deg: float = 0.0,
        fold: bool = True,
    ):
        if mirror_symmetric(optics.polarization, angle_deg):
            src = merge_mirrored(src)
        # A source symmetric about the pitch's normal too keeps half its points
        # (source_folding; the orders n and -n swap).
        pts, w, self.folds = fold_source(*src, optics.polarization, angle_deg, fold)
        self.n_max = n_max
        fn = np.arange(-n_max, n_max + 1) / period_nm
        fx = fn[None, :] + pts[:, 0:1] * optics.cutoff
        fy = np.broadcast_to(pts[:, 1:2] * optics.cutoff, fx.shape)
        f2 = fx * fx + fy * fy
        self.inside = f2 <= optics.cutoff**2 * (1.0 + 1e-12)  # as pupil() decides
        self.root_w = np.broadcast_to(np.sqrt(w)[:, None], fx.shape)[self.inside]
        n_over_l = optics.n_medium / optics.wavelength_nm
        self.kz = np.sqrt(np.maximum(n_over_l**2 - f2[self.inside], 0.0)) - n_over_l
        self.rows = None  # vector light: (R, passing orders) factors
        if optics.vector:
            self.rows = optics.field_factors(fx, fy, pts, angle_deg)[:, self.inside]

    def amplitudes(self, defocus_nm: float) -> np.ndarray:
        """``A[s, n]`` at ``defocus_nm``: the same values as ``pupil`` gives (times the
        field factors of vector light, rows stacked state by state)."""
        passing = self.root_w
        if defocus_nm:
            passing = passing * np.exp(2j * np.pi * defocus_nm * self.kz)
        if self.rows is None:
            a = np.zeros(self.inside.shape, dtype=np.complex128)
            a[self.inside] = passing
            return a
        a = np.zeros((len(self.rows),) + self.inside.shape, dtype=np.complex128)
        a[:, self.inside] = self.rows * passing
        return a.reshape(-1, self.inside.shape[1])


class CoherentSystems:
    """Hopkins imaging for one period and focus, as a sum of coherent systems.

    ``image(spectra)`` returns intensities on the grid ``x = k period / samples``
    (``k = 0..samples-1``) for a batch of spectra sharing the period.
    """

    def __init__(
        self,
        optics: Optics,
        src: tuple[np.ndarray, np.ndarray],
        period_nm: float,
        n_max: int,
        defocus_nm: float = 0.0,
        keep: float = SOCS_KEEP,
        blur_nm: float = 0.0,
        angle_deg: float = 0.0,
    ):
        frame = PupilFrame(optics, src, period_nm, n_max, angle_deg)
        self._decompose(frame, period_nm, n_max, defocus_nm, keep, blur_nm)

    @classmethod
    def from_frame(
        cls,
        frame: PupilFrame,
        period_nm: float,
        n_max: int,
        defocus_nm: float = 0.0,
        keep: float = SOCS_KEEP,
        blur_nm: float = 0.0,
    ) -> CoherentSystems:
        """The systems at one focus from a :class:`PupilFrame` kept for several."""
        out = object.__new__(cls)
        out._decompose(frame, period_nm, n_max, defocus_nm, keep, blur_nm)
        return out

    def _decompose(
        self,
        frame: PupilFrame,
        period_nm: float,
        n_max: int,
        defocus_nm: float,
        keep: float,
        blur_nm: float = 0.0,
    ) -> None:
        self.period_nm = period_nm
        self.n_max = n_max
        a = frame.amplitudes(defocus_nm)  # (S, N)
        # TCC = A^H A (N x N, Hermitian) = V diag(ev) V^H; the kernels are the
        # rows of V^H (an SVD of A gives the same, far slower on these mostly
        # zero matrices).
        tcc = a.conj().T @ a
        if frame.folds:
            n = np.arange(-n_max, n_max + 1)
            tcc = unfold_tcc(tcc, n, np.zeros_like(n), frame.folds)
        if blur_nm > 0:
            fn = np.arange(-n_max, n_max + 1) / period_nm
            tcc = tcc * blur_factors(fn[:, None] - fn[None, :], blur_nm)
        ev, v = np.linalg.eigh(tcc)
        order = np.argsort(ev)[::-1]
        ev, v = ev[order], v[:, order]
        kept = ev >= keep * (ev[0] if len(ev) and ev[0] > 0 else 1.0)
        self.eigenvalues = ev[kept]
        self.kernels = v[:, kept].conj().T  # (K, N): field_k = sum_n kernels[k, n] c_n e_n(x)

    def through_opposite_focus(self) -> CoherentSystems:
        """The systems at minus this focus, without a new TCC.

        The defocus phase is odd in focus and the rest of ``A`` (with the
        field factors of vector light) is real, so
        ``A(-z) = conj(A(z))`` and ``TCC(-z) = conj(TCC(z))``: the same
        eigenvalues, conjugate kernels.
        """
        other = object.__new__(CoherentSystems)
        other.period_nm, other.n_max = self.period_nm, self.n_max
        other.eigenvalues = self.eigenvalues
        other.kernels = self.kernels.conj()  # a blur's factors are real and even: kept
        return other

    def field_coefficients(self, spectra: np.ndarray) -> np.ndarray:
        """``(K, m, N)`` Fourier coefficients of each kernel's field."""
        return self.kernels[:, None, :] * np.atleast_2d(spectra)[None, :, :]

    def image(self, spectra: np.ndarray, samples: int) -> np.ndarray:
        """Intensities ``(m, samples)`` on a uniform grid over one period (starting at x = 0).

        The fields hold frequencies ``|n| <= n_max``, so the intensity holds
        ``|n| <= 2 n_max``: it is computed exactly on a coarse grid of at
        least ``4 n_max + 1`` points and brought to ``samples`` points by
        zero-padding its spectrum (exact band-limited interpolation).
        """
        coef = self.field_coefficients(spectra)
        k, m, n = coef.shape
        if samples < n:
            raise ValueError("samples must be at least the number of orders")
        coarse = min(samples, 1 << (4 * self.n_max + 1).bit_length())
        buf = np.zeros((k, m, coarse), dtype=np.complex128)
        idx = np.arange(-self.n_max, self.n_max + 1) % coarse
        buf[:, :, idx] = coef
        field = np.fft.ifft(buf, axis=2) * coarse
        inten = np.einsum("k,kmx->mx", self.eigenvalues, np.abs(field) ** 2)
        if coarse == samples:
            return inten
        spec = np.fft.fft(inten, axis=1) / coarse
        band = np.arange(-2 * self.n_max, 2 * self.n_max + 1)
        out = np.zeros((m, samples), dtype=np.complex128)
        out[:, band % samples] = spec[:, band % coarse]
        return np.real(np.fft.ifft(out, axis=1) * samples)

    def at(self, spectra: np.ndarray, x_nm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Intensity and its x-derivative ``(m, len(x))`` at arbitrary points."""
        coef = self.field_coefficients(spectra)  # (K, m, N)
        fn = np.arange(-self.n_max, self.n_max + 1) / self.period_nm
        x = np.atleast_2d(x_nm)
        basis = np.exp(2j * np.pi * fn[None, :, None] * x[:, None, :])  # (m|1, N, X)
        shape = (coef.shape[1],) + basis.shape[1:]
        field = np.einsum("kmn,mnx->kmx", coef, np.broadcast_to(basis, shape))
        dbasis = basis * (2j * np.pi * fn[None, :, None])
        dfield = np.einsum("kmn,mnx->kmx", coef, np.broadcast_to(dbasis, shape))
        inten = np.einsum("k,kmx->mx", self.eigenvalues, np.abs(field) ** 2)
        dinten = np.einsum("k,kmx->mx", self.eigenvalues, 2 * np.real(np.conj(field) * dfield))
        return inten, dinten
