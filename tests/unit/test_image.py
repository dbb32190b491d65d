"""Unit tests for 1-D partially coherent imaging (pitchguard.optics.aerial) and
the constant-threshold metrics on its images (pitchguard.optics.resist).

Every expected value comes from outside the project, its source named beside it:

* Fourier series of a square wave, coherent imaging and the OTF of a circular
  pupil (Goodman, *Introduction to Fourier Optics*);
* the cutoff pitch lambda / (NA (1 + sigma)) (grating equation and pupil
  cutoff, Goodman; arithmetic);
* two-beam interference: two plane waves of amplitudes a, b give fringes of
  contrast 2|a b| / (|a|^2 + |b|^2) (any optics text, e.g. Goodman);
* Rayleigh depth of focus DOF = k2 lambda / NA^2 (paraxial; common practice),
  written n lambda / NA^2 in a medium of index n;
* the Abbe and Hopkins formulations describe the same image (Hopkins 1953;
  common practice), so the two engines must agree to rounding;
* NILS = CD |dI/dx| / I and the exposure-latitude definition (common practice,
  see optics/resist.py).

Images are in units of the open frame (an all-clear mask images to 1).
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest

from pitchguard.deck import Exposure
from pitchguard.optics.aerial import (
    IMAGE_SOURCE_STEP,
    CoherentSystems,
    Optics,
    abbe_image,
    grating_spectrum,
    mask_amplitudes,
    n_orders,
    segment_spectrum,
    source_points,
)
from pitchguard.optics.orders import cell_step
from pitchguard.optics.resist import THRESHOLD_SAMPLES, cd_of_thresholds, evaluate
from pitchguard.optics.source_rims import line_source, refine_at_rims

PRECISION = 1e-9  # absolute, open-frame units: closed-form images, rounding only
ENGINE_AGREEMENT = 1e-6  # SOCS vs Abbe: kernels below SOCS_KEEP (1e-7) of the largest dropped
SLOPE_AGREEMENT = 1e-5  # period * |dI/dx| difference, SOCS `at` vs central differences of Abbe
LATTICE_TOL = 1e-3  # areas counted on a 0.01-sigma lattice: errors of a few 1e-4 (circle problem)
NO_MODULATION = 1e-9  # max - min of an image below the cutoff
MIN_MODULATION = 1e-5  # 10^4 times NO_MODULATION: a first order is really getting through
MARGIN = 0.01  # 1 % either side of a cutoff
SOURCE_STEP_CLAIM = 2e-3  # optics.aerial.IMAGE_SOURCE_STEP docstring: < 2e-3 of the open frame
NILS_SAMPLED = 1e-4  # relative: NILS from np.gradient on 1024 samples per period

# Scanner families (common practice): wavelengths, NAs, water at 193 nm.
ARF_NM = 193.0
KRF_NM = 248.0
I_LINE_NM = 365.0
DRY_ARF_NA = 0.93
IMMERSION_NA = 1.35
WATER_INDEX = 1.44

COHERENT = {"shape": "coherent"}
ANNULAR_06_09 = {"shape": "annular", "sigma_inner": 0.6, "sigma_outer": 0.9}
ANNULAR_03_09 = {"shape": "annular", "sigma_inner": 0.3, "sigma_outer": 0.9}
DIPOLE_X = {
    "shape": "dipole",
    "sigma_inner": 0.6,
    "sigma_outer": 0.9,
    "opening_deg": 35.0,
    "axis": "x",
}
QUADRUPOLE = {"shape": "quadrupole", "sigma_inner": 0.5, "sigma_outer": 0.8, "opening_deg": 30.0}
FULL_DISC = {"shape": "conventional", "sigma": 1.0}
BINARY = {"kind": "binary"}
ATTENUATED_6 = {"kind": "attenuated", "transmission": 0.06}  # 6 % att. PSM (common practice)


def exposure(
    illumination, wavelength_nm=ARF_NM, na=DRY_ARF_NA, index=1.0, mask=BINARY, light="scalar"
):
    """The check values here are the scalar model's (vector light: test_polarization.py)."""
    return Exposure.model_validate(
        {
            "wavelength_nm": wavelength_nm,
            "na": na,
            "immersion_index": index,
            "illumination": illumination,
            "mask": mask,
            "polarization": light,
        }
    )


def grid(period_nm: float, samples: int) -> np.ndarray:
    """The x grid of CoherentSystems.image: k period / samples."""
    return np.arange(samples) * period_nm / samples


def centred(period_nm: float, images: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Images on the FFT grid re-ordered onto x in [-P/2, P/2) (the feature at x = 0)."""
    samples = images.shape[-1]
    half = samples // 2
    x = (np.arange(samples) - half) * period_nm / samples
    return x, np.roll(images, half, axis=-1)


def open_spectrum(n_max: int) -> np.ndarray:
    c = np.zeros(2 * n_max + 1, dtype=np.complex128)
    c[n_max] = 1.0
    return c


# --------------------------------------------------------------------------- (a) coherent L/S

# (wavelength, NA, pitch): p NA / lambda in [1, 2), so an on-axis beam passes
# orders 0 and +-1 only (grating equation, Goodman).
THREE_BEAM = [
    (ARF_NM, DRY_ARF_NA, 300.0),  # p NA / lambda = 1.45
    (KRF_NM, 0.8, 400.0),  # 1.29
    (I_LINE_NM, 0.5, 1000.0),  # 1.37
]
# (feature, background, sign of the cosine): the feature (the drawn line, of
# width p/2) is centred on x = 0.  Square-wave series (Goodman): a_0 = 1/2,
# a_+-1 = 1/pi, so the field is 1/2 + (2/pi) cos(2 pi x / p) when the feature
# is clear and 1/2 - (2/pi) cos(2 pi x / p) when it is opaque.
TONES = [(1.0, 0.0, +1.0), (0.0, 1.0, -1.0)]


def three_beam_field(x, period_nm, sign):
    return 0.5 + sign * (2.0 / math.pi) * np.cos(2.0 * math.pi * x / period_nm)


@pytest.mark.parametrize(("wavelength_nm", "na", "pitch_nm"), THREE_BEAM)
@pytest.mark.parametrize(("feature", "background", "sign"), TONES)
def test_coherent_equal_lines_and_spaces_match_the_square_wave_series(
    wavelength_nm, na, pitch_nm, feature, background, sign
):
    e = exposure(COHERENT, wavelength_nm, na)
    optics = Optics.of(e)
    n_max = 5  # orders up to 5 in the spectrum: the pupil, not the truncation, keeps 0 and +-1
    spec = grating_spectrum(pitch_nm, pitch_nm / 2, feature, background, n_max)
    src = source_points(e, 0.0)
    samples = 256
    x = grid(pitch_nm, samples)
    expected = three_beam_field(x, pitch_nm, sign) ** 2  # Goodman: intensity = |field|^2
    socs = CoherentSystems(optics, src, pitch_nm, n_max).image(spec, samples)[0]
    xa = np.linspace(-pitch_nm, pitch_nm, 301)  # any x, not only the FFT grid
    abbe = abbe_image(spec, pitch_nm, optics, src, 0.0, xa)
    assert np.max(np.abs(socs - expected)) < PRECISION
    assert np.max(np.abs(abbe - three_beam_field(xa, pitch_nm, sign) ** 2)) < PRECISION


@pytest.mark.parametrize(("wavelength_nm", "na", "pitch_nm"), THREE_BEAM)
@pytest.mark.parametrize(("feature", "background", "sign"), TONES)
def test_coherent_equal_lines_and_spaces_edge_intensity_quarter_and_nils_8(
    wavelength_nm, na, pitch_nm, feature, background, sign
):
    # Goodman (square-wave series): at the drawn edges x = +-p/4 the field is
    # 1/2, so I = 1/4, |dI/dx| = 2 (1/2) (2/pi) (2 pi / p) = 4/p, and
    # NILS = (p/2) (4/p) / (1/4) = 8.
    e = exposure(COHERENT, wavelength_nm, na)
    cs = CoherentSystems(Optics.of(e), source_points(e, 0.0), pitch_nm, 5)
    spec = grating_spectrum(pitch_nm, pitch_nm / 2, feature, background, 5)
    edges = np.array([-pitch_nm / 4, pitch_nm / 4])
    inten, slope = cs.at(spec, edges)
    assert np.max(np.abs(inten[0] - 0.25)) < PRECISION
    assert np.max(np.abs(np.abs(slope[0]) * pitch_nm - 4.0)) < PRECISION
    nils = (pitch_nm / 2) * np.abs(slope[0]) / inten[0]
    assert np.max(np.abs(nils - 8.0)) < PRECISION
    # The sign of the slope: a clear feature is brightest at its centre.
    assert np.all(np.sign(slope[0]) == np.array([sign, -sign]))


@pytest.mark.parametrize(
    ("wavelength_nm", "na", "index", "pitch_nm"),
    [
        (ARF_NM, IMMERSION_NA, WATER_INDEX, 160.0),  # p NA / lambda = 1.12; f/(n/lambda) = 0.84
        (ARF_NM, DRY_ARF_NA, 1.0, 300.0),  # 1.45; 0.64
    ],
)
def test_coherent_three_beam_image_through_focus(wavelength_nm, na, index, pitch_nm):
    # Goodman (propagation of the angular spectrum): in a medium of index n a
    # plane wave of spatial frequency f gains the phase
    # 2 pi z sqrt(n^2/lambda^2 - f^2) over a distance z; relative to the 0th
    # order the +-1st orders (|f| = 1/p) carry phi = 2 pi z (sqrt(n^2/lambda^2
    # - 1/p^2) - n/lambda), so the field of (a) becomes
    # 1/2 - (2/pi) cos(2 pi x / p) e^{i phi} (clear field, opaque line at x = 0).
    e = exposure(COHERENT, wavelength_nm, na, index)
    optics = Optics.of(e)
    spec = grating_spectrum(pitch_nm, pitch_nm / 2, 0.0, 1.0, 5)
    src = source_points(e, 0.0)
    samples = 128
    x = grid(pitch_nm, samples)
    for z in (-150.0, -40.0, 25.0, 90.0):
        phi = (
            2
            * math.pi
            * z
            * (math.sqrt((index / wavelength_nm) ** 2 - pitch_nm**-2) - index / wavelength_nm)
        )
        field = 0.5 - (2 / math.pi) * np.cos(2 * math.pi * x / pitch_nm) * np.exp(1j * phi)
        expected = np.abs(field) ** 2
        socs = CoherentSystems(optics, src, pitch_nm, 5, z).image(spec, samples)[0]
        abbe = abbe_image(spec, pitch_nm, optics, src, z, x)
        assert np.max(np.abs(socs - expected)) < PRECISION
        assert np.max(np.abs(abbe - expected)) < PRECISION


# --------------------------------------------------------------------------- (b) incoherent limit

SOURCE_RADIUS = 4.0  # sigma units: covers every shifted pupil below (|shift| <= 1.2, +1)
LATTICE_STEP = 0.01  # sigma units


def lattice_disc(radius: float, step: float) -> tuple[np.ndarray, np.ndarray]:
    """A uniform disc source of ``radius`` (sigma units) on a square lattice, equal weights."""
    n = int(math.ceil(radius / step))
    axis = np.arange(-n, n + 1) * step
    sx, sy = np.meshgrid(axis, axis)
    sx, sy = sx.ravel(), sy.ravel()
    keep = sx * sx + sy * sy <= radius * radius
    pts = np.stack([sx[keep], sy[keep]], axis=1)
    return pts, np.full(len(pts), 1.0 / len(pts))


def abbe_in_chunks(spec, period_nm, optics, src, defocus_nm, x, chunk=50_000):
    """abbe_image over a large source, a chunk of points at a time (the sum is linear in w)."""
    pts, w = src
    out = np.zeros(len(x))
    for k in range(0, len(w), chunk):
        out += abbe_image(
            spec, period_nm, optics, (pts[k : k + chunk], w[k : k + chunk]), defocus_nm, x
        )
    return out


def circular_pupil_otf(v):
    """Goodman: OTF of a circular pupil, H(v) = (2/pi)[acos v - v sqrt(1 - v^2)], 0 beyond v = 1."""
    v = np.clip(np.abs(v), 0.0, 1.0)
    return (2.0 / math.pi) * (np.arccos(v) - v * np.sqrt(1.0 - v * v))


@pytest.fixture(scope="module")
def big_disc():
    return lattice_disc(SOURCE_RADIUS, LATTICE_STEP)


@pytest.mark.parametrize("shift", [0.3, 0.6, 0.9, 1.2])  # first order at shift * NA / lambda
def test_source_much_larger_than_pupil_gives_the_incoherent_otf(big_disc, shift):
    # Mask amplitude 1 + 0.5 cos(2 pi x / p): c_0 = 1, c_+-1 = 1/4, nothing else.
    #
    # Normalisation.  With a uniform source of radius R (sigma units) sampled
    # with equal weights, the cross coefficient of orders m, n is the fraction
    # of source points s with |s + u_m| <= 1 and |s + u_n| <= 1
    # (u = f lambda / NA): the area where two unit discs u_m - u_n apart
    # overlap, divided by pi R^2, as long as the source covers both discs
    # (R >= 1 + max |u|).  That overlap is pi H(|u_m - u_n| / 2) (Goodman: the
    # OTF of a circular pupil is the normalised pupil autocorrelation, with
    # v = f / (2 NA / lambda)).  So
    #     I(x) = (1 / R^2) sum_{m,n} c_m c_n* H(|f_m - f_n| / (2 NA/lambda)) e^{i 2 pi (f_m - f_n) x}:
    # the open frame is 1/R^2 (the fraction of the source inside the pupil),
    # and the image divided by it is the incoherent image of |t|^2.
    optics = Optics(ARF_NM, DRY_ARF_NA, 1.0)
    period = 1.0 / (shift * optics.cutoff)
    spec = np.array([0.25, 1.0, 0.25], dtype=np.complex128)
    samples = 32
    x = grid(period, samples)
    v1 = shift / 2.0  # |f_1 - f_0| / (2 NA / lambda)
    # |t|^2 = 1.125 + cos(2 pi x/p) + 0.125 cos(4 pi x/p), each term filtered by H:
    expected = (
        1.125
        + circular_pupil_otf(v1) * np.cos(2 * math.pi * x / period)
        + 0.125 * circular_pupil_otf(2 * v1) * np.cos(4 * math.pi * x / period)
    )
    cs = CoherentSystems(optics, big_disc, period, 1)
    socs, socs_open = cs.image(np.stack([spec, open_spectrum(1)]), samples)
    abbe = abbe_in_chunks(spec, period, optics, big_disc, 0.0, x)
    abbe_open = abbe_in_chunks(open_spectrum(1), period, optics, big_disc, 0.0, x)
    assert np.max(np.abs(socs_open * SOURCE_RADIUS**2 - 1.0)) < LATTICE_TOL
    assert np.max(np.abs(abbe_open * SOURCE_RADIUS**2 - 1.0)) < LATTICE_TOL
    assert np.max(np.abs(socs / socs_open - expected)) < LATTICE_TOL
    assert np.max(np.abs(abbe / abbe_open - expected)) < LATTICE_TOL


# --------------------------------------------------------------------------- (c) cutoff pitch

# Disc radii on and off multiples of the sampling step: the sampling refines
# the cells cut by the rim (optics.orders.sample_source), so the extreme source
# points lie within step / (2 SUB) of the rim whatever sigma, far inside the
# 1 % margin (a sliver of ~0.01 (1 + sigma) in sigma units).
SIGMAS = [0.3, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0]


def binary_ls_modulation(e: Exposure, pitch_nm: float) -> tuple[float, float]:
    """max - min of a binary equal L/S image, by the SOCS engine and by Abbe."""
    optics = Optics.of(e)
    n_max = max(n_orders(pitch_nm, optics, e.sigma_max), 1)
    spec = grating_spectrum(pitch_nm, pitch_nm / 2, 0.0, 1.0, n_max)
    src = source_points(e, 0.0)
    samples = 128
    socs = CoherentSystems(optics, src, pitch_nm, n_max).image(spec, samples)[0]
    abbe = abbe_image(spec, pitch_nm, optics, src, 0.0, grid(pitch_nm, samples))
    return float(np.ptp(socs)), float(np.ptp(abbe))


@pytest.mark.parametrize("sigma", SIGMAS)
def test_binary_ls_just_below_the_cutoff_images_uniform(sigma):
    e = exposure({"shape": "conventional", "sigma": sigma})
    p_cut = ARF_NM / (DRY_ARF_NA * (1.0 + sigma))  # Goodman (grating equation): cutoff pitch
    socs, abbe = binary_ls_modulation(e, p_cut * (1.0 - MARGIN))
    assert socs < NO_MODULATION
    assert abbe < NO_MODULATION


@pytest.mark.parametrize("sigma", SIGMAS)
def test_binary_ls_just_above_the_cutoff_is_modulated(sigma):
    e = exposure({"shape": "conventional", "sigma": sigma})
    p_cut = ARF_NM / (DRY_ARF_NA * (1.0 + sigma))  # Goodman (grating equation): cutoff pitch
    socs, abbe = binary_ls_modulation(e, p_cut * (1.0 + MARGIN))
    assert socs > MIN_MODULATION
    assert abbe > MIN_MODULATION


# --------------------------------------------------------------------------- (d) two-beam imaging

FOCUS_SWEEP_NM = np.linspace(-300.0, 300.0, 13)


def point_pair(sx: float) -> tuple[np.ndarray, np.ndarray]:
    return np.array([[-sx, 0.0], [sx, 0.0]]), np.array([0.5, 0.5])


def contrast_through_focus(optics, src, pitch_nm, spec, n_max):
    samples = 256  # the two-beam image is a pure cosine of period p: x = 0 and p/2 are sampled
    out = []
    for z in FOCUS_SWEEP_NM:
        socs = CoherentSystems(optics, src, pitch_nm, n_max, z).image(spec, samples)[0]
        abbe = abbe_image(spec, pitch_nm, optics, src, z, grid(pitch_nm, samples))
        out.append([(i.max() - i.min()) / (i.max() + i.min()) for i in (socs, abbe)])
    return np.array(out)  # (focus, engine)


# q = lambda / (p NA): the pole at -q/2 sends order 0 to -q/2 and order +1 to
# +q/2, while orders -1 (at -3q/2) and +2 (at 3q/2) miss the pupil when
# q > 2/3 (and order +1 passes when q <= 2).
@pytest.mark.parametrize("q", [0.8, 1.2, 1.8])
@pytest.mark.parametrize("mask", [BINARY, ATTENUATED_6])
def test_symmetric_two_beam_contrast_does_not_change_with_focus(q, mask):
    e = exposure(FULL_DISC, ARF_NM, IMMERSION_NA, WATER_INDEX, mask)
    optics = Optics.of(e)
    pitch = ARF_NM / (q * IMMERSION_NA)
    n_max = n_orders(pitch, optics, 1.0)
    feat, bg = mask_amplitudes(e, "clear")
    spec = grating_spectrum(pitch, pitch / 2, feat, bg, n_max)
    contrast = contrast_through_focus(optics, point_pair(q / 2), pitch, spec, n_max)
    # Two-beam interference (Goodman): contrast 2 |c0 c1| / (|c0|^2 + |c1|^2), at every focus
    # (both beams at the same |f|, so the same defocus phase).
    c0, c1 = spec[n_max], spec[n_max + 1]
    expected = 2 * abs(c0 * c1) / (abs(c0) ** 2 + abs(c1) ** 2)
    assert np.max(np.abs(contrast - expected)) < PRECISION


def test_asymmetric_two_beam_contrast_changes_with_focus():
    # Control for the test above: the same pitch with the poles at +-0.3
    # (orders 0 and +1 at -0.3 and +0.9: two beams, not symmetric) has a
    # focus-dependent phase between the beams, and the contrast changes.
    q = 1.2
    e = exposure(FULL_DISC, ARF_NM, IMMERSION_NA, WATER_INDEX)
    optics = Optics.of(e)
    pitch = ARF_NM / (q * IMMERSION_NA)
    n_max = n_orders(pitch, optics, 1.0)
    spec = grating_spectrum(pitch, pitch / 2, 0.0, 1.0, n_max)
    contrast = contrast_through_focus(optics, point_pair(0.3), pitch, spec, n_max)
    assert np.ptp(contrast[:, 0]) > 0.1
    assert np.ptp(contrast[:, 1]) > 0.1


# --------------------------------------------------------------------------- (e) source sampling

ARF_IMMERSION = (ARF_NM, IMMERSION_NA, WATER_INDEX)
CONVERGENCE_K1 = (0.3, 0.4, 0.5, 0.6, 0.8)
CONVERGENCE_FOCUS_NM = (0.0, 50.0)
STEPS = (0.08, 0.04, 0.02, 0.01)


def images_by_step(illumination, steps, k1s=CONVERGENCE_K1, focus=CONVERGENCE_FOCUS_NM):
    """{step: (cases, samples)} binary equal L/S images, ArF immersion, pitch 2 k1 lambda / NA."""
    e = exposure(illumination, *ARF_IMMERSION)
    optics = Optics.of(e)
    out = {s: [] for s in steps}
    for k1 in k1s:
        p = 2 * k1 * ARF_NM / IMMERSION_NA
        n_max = n_orders(p, optics, e.sigma_max)
        spec = grating_spectrum(p, p / 2, 0.0, 1.0, n_max)
        for z in focus:
            for s in steps:
                cs = CoherentSystems(optics, source_points(e, 0.0, s), p, n_max, z)
                out[s].append(cs.image(spec, 256)[0])
    return {s: np.array(v) for s, v in out.items()}


def test_image_converges_as_the_source_sampling_is_refined():
    # Ring 0.3-0.9: its width/8 (0.075) caps the step only a little, so the
    # four steps give four different samplings.  (For a 0.6-0.9 ring the cap
    # is 0.0375 and steps 0.08 and 0.04 sample it identically.)
    ims = images_by_step(ANNULAR_03_09, STEPS)
    # Worst case over pitches and focus values, between successive steps.
    diffs = [np.max(np.abs(ims[a] - ims[b])) for a, b in zip(STEPS, STEPS[1:], strict=False)]
    assert diffs[0] > diffs[1] > diffs[2]


def refined_images(illumination, step, angle, k1s):
    """Equal L/S images through pitch (ArF immersion) on the source the 1-D cuts use:
    sampled at ``step``, cells cut by an order's pupil rim split (source_rims)."""
    e = exposure(illumination, *ARF_IMMERSION)
    optics = Optics.of(e)
    out = []
    for k1 in k1s:
        p = 2 * k1 * ARF_NM / IMMERSION_NA
        n_max = n_orders(p, optics, e.sigma_max)
        spec = grating_spectrum(p, p / 2, 0.0, 1.0, n_max)
        shift = np.arange(-n_max, n_max + 1) * ARF_NM / (p * IMMERSION_NA)
        src = refine_at_rims(
            source_points(e, angle, step),
            cell_step(e.illumination, step),
            angle,
            np.stack([shift, np.zeros_like(shift)], axis=1),
        )
        for z in (0.0, 60.0):
            cs = CoherentSystems(optics, src, p, n_max, z, angle_deg=angle)
            out.append(cs.image(spec, 256)[0])
    return np.array(out)


@pytest.mark.parametrize("angle", [0.0, 30.0, 90.0])
@pytest.mark.parametrize(
    "illumination",
    [
        pytest.param(ANNULAR_06_09, id="annular"),
        pytest.param({"shape": "conventional", "sigma": 0.7}, id="conventional"),
        pytest.param(DIPOLE_X, id="dipole"),
        pytest.param(QUADRUPOLE, id="quadrupole"),
    ],
)
def test_documented_source_step_holds_through_pitch_in_every_direction(illumination, angle):
    # The claim of optics.aerial.IMAGE_SOURCE_STEP, k1 0.3 to 1.2, against a 0.005
    # step refined alike; at 90 degrees a dipole images across its axis, where the
    # unrefined 0.02 grid erred by 8e-3.
    k1s = tuple(np.linspace(0.3, 1.2, 10))
    coarse = refined_images(illumination, IMAGE_SOURCE_STEP, angle, k1s)
    fine = refined_images(illumination, 0.005, angle, k1s)
    assert np.max(np.abs(coarse - fine)) < SOURCE_STEP_CLAIM


def test_the_cuts_image_on_the_refined_source():
    # cut_images' frames use source_rims.line_source: more points than the plain grid.
    e = exposure(DIPOLE_X, *ARF_IMMERSION)
    plain = source_points(e, 90.0)
    n_max = n_orders(180.0, Optics.of(e), e.sigma_max)
    refined = line_source(e, 90.0, 180.0, n_max)  # the +-1st orders' rims cross the poles
    assert len(refined[1]) > len(plain[1])
    assert refined[1].sum() == pytest.approx(1.0)


# --------------------------------------------------------------------------- (f) Rayleigh DOF

RAYLEIGH_UNITS = np.linspace(-2.0, 2.0, 41)  # focus in units of n lambda / NA^2
RAYLEIGH_STEP = float(RAYLEIGH_UNITS[1] - RAYLEIGH_UNITS[0])
CD_TOL = 0.10  # +-10 % CD tolerance (common practice)
EL_MIN_PCT = 5.0  # DOF at 5 % exposure latitude (common practice)


def grating_through_focus(e: Exposure, pitch_nm: float, focus_nm, samples=512):
    """Centred x and (focus, samples) images of a binary equal L/S clear-field grating."""
    optics = Optics.of(e)
    n_max = n_orders(pitch_nm, optics, e.sigma_max)
    spec = grating_spectrum(pitch_nm, pitch_nm / 2, 0.0, 1.0, n_max)
    src = source_points(e, 0.0)
    ims = np.stack(
        [
            CoherentSystems(optics, src, pitch_nm, n_max, float(z)).image(spec, samples)[0]
            for z in focus_nm
        ]
    )
    return centred(pitch_nm, ims)


def dof_in_rayleigh_units(e: Exposure, k1: float) -> float:
    unit = e.immersion_index * e.wavelength_nm / e.na**2
    pitch = 2 * k1 * e.wavelength_nm / e.na
    focus = RAYLEIGH_UNITS * unit
    x, ims = grating_through_focus(e, pitch, focus)
    m = evaluate(
        x,
        ims,
        focus,
        (-pitch / 4, pitch / 4),
        (-pitch / 2, pitch / 2),
        False,
        pitch / 2,
        None,
        CD_TOL,
        EL_MIN_PCT,
    )
    dof = m.dof_nm / unit
    # Measured, not clipped by the focus range.
    assert 0.0 < dof < RAYLEIGH_UNITS[-1] - RAYLEIGH_UNITS[0]
    return dof


CONVENTIONAL_06 = {"shape": "conventional", "sigma": 0.6}


@pytest.mark.parametrize("k1", [0.5, 0.8])
def test_dof_scales_as_n_lambda_over_na_squared_at_equal_na_over_n(k1):
    # Rayleigh: DOF = k2 n lambda / NA^2 (common practice).  With the same NA/n
    # the non-paraxial defocus phase 2 pi z (n/lambda)(sqrt(1 - (u NA/n)^2) - 1)
    # (u = f lambda / NA) depends on z only through z NA^2 / (n lambda)
    # (arithmetic): scaled to lambda/NA and n lambda/NA^2 the two image stacks
    # are the same, so the DOFs agree within one focus step (in fact exactly).
    dry_krf = exposure(CONVENTIONAL_06, KRF_NM, 0.75, 1.0)
    wet_arf = exposure(CONVENTIONAL_06, ARF_NM, 0.75 * WATER_INDEX, WATER_INDEX)  # NA 1.08
    a = dof_in_rayleigh_units(dry_krf, k1)
    b = dof_in_rayleigh_units(wet_arf, k1)
    assert abs(a - b) <= RAYLEIGH_STEP + PRECISION


@pytest.mark.parametrize("k1", [0.5, 0.8])
def test_dof_scales_as_lambda_over_na_squared_at_low_na(k1):
    # Rayleigh (paraxial) scaling with different NA: the defocus phase differs
    # from its paraxial form by a relative (u NA / n)^2 / 4 at most (u <= 1 in
    # the pupil; Taylor series of the square root).  Each DOF is read on its
    # own focus grid (ends on grid points: up to two steps short of the true
    # span), so the two agree within two focus steps plus that fraction.
    i_line = exposure(CONVENTIONAL_06, I_LINE_NM, 0.3)
    krf = exposure(CONVENTIONAL_06, KRF_NM, 0.45)
    a = dof_in_rayleigh_units(i_line, k1)
    b = dof_in_rayleigh_units(krf, k1)
    paraxial = max(a, b) * max(0.3, 0.45) ** 2 / 4
    assert abs(a - b) <= 2 * RAYLEIGH_STEP + paraxial


# --------------------------------------------------------------------------- (g) SOCS vs Abbe

ENGINE_CASES = [
    (ANNULAR_06_09, BINARY),
    (ANNULAR_06_09, ATTENUATED_6),
    (DIPOLE_X, BINARY),
    (DIPOLE_X, ATTENUATED_6),
    (QUADRUPOLE, BINARY),
    (QUADRUPOLE, ATTENUATED_6),
    (FULL_DISC, BINARY),
    (COHERENT, ATTENUATED_6),
]


def random_profiles(rng, period_nm, feat, bg, n_max, count=4, segments=7):
    """Spectra of ``count`` random profiles: ``segments`` pieces alternating background/feature."""
    cuts = np.sort(rng.uniform(-period_nm / 2, period_nm / 2, (count, segments - 1)), axis=1)
    edges = np.concatenate(
        [np.full((count, 1), -period_nm / 2), cuts, np.full((count, 1), period_nm / 2)], axis=1
    )
    values = np.where(np.arange(segments) % 2 == 0, bg, feat).astype(np.complex128)
    return segment_spectrum(period_nm, edges, np.tile(values, (count, 1)), n_max)


@pytest.mark.parametrize(("illumination", "mask"), ENGINE_CASES)
def test_sum_of_coherent_systems_equals_the_abbe_sum(illumination, mask):
    # Hopkins and Abbe are the same image (Hopkins 1953; common practice).
    rng = np.random.default_rng(zlib.crc32(repr((illumination, mask)).encode()))  # fixed seed
    e = exposure(illumination, *ARF_IMMERSION, mask=mask)
    optics = Optics.of(e)
    for angle in (0.0, 30.0, 90.0):
        src = source_points(e, angle)
        for z in (0.0, -80.0, 137.0):
            period = float(rng.uniform(150.0, 900.0))
            n_max = n_orders(period, optics, e.sigma_max)
            feat, bg = mask_amplitudes(e, "clear" if rng.random() < 0.5 else "dark")
            specs = random_profiles(rng, period, feat, bg, n_max)
            cs = CoherentSystems(optics, src, period, n_max, z)
            samples = max(64, 4 * n_max + 1)
            x = grid(period, samples)
            socs = cs.image(specs, samples)
            abbe = np.stack([abbe_image(s, period, optics, src, z, x) for s in specs])
            assert np.max(np.abs(socs - abbe)) < ENGINE_AGREEMENT
            # `at`: intensity and slope anywhere (slope against central differences).
            xr = rng.uniform(-period, period, 7)
            inten, slope = cs.at(specs, xr)
            h = 1e-3  # nm: truncation (h^2) and rounding (1e-16 / h) errors both << tolerance
            abbe_r = np.stack([abbe_image(s, period, optics, src, z, xr) for s in specs])
            dabbe = np.stack(
                [
                    (
                        abbe_image(s, period, optics, src, z, xr + h)
                        - abbe_image(s, period, optics, src, z, xr - h)
                    )
                    / (2 * h)
                    for s in specs
                ]
            )
            assert np.max(np.abs(inten - abbe_r)) < ENGINE_AGREEMENT
            assert np.max(np.abs(slope - dabbe)) * period < SLOPE_AGREEMENT
            # Open frame: 1 (source inside the pupil, weights summing to 1); exactly so
            # with every kernel kept, within the truncation with the default SOCS_KEEP.
            opened = open_spectrum(n_max)
            every = CoherentSystems(optics, src, period, n_max, z, keep=0.0)
            assert np.max(np.abs(every.image(opened, samples) - 1.0)) < PRECISION
            assert np.max(np.abs(cs.image(opened, samples) - 1.0)) < ENGINE_AGREEMENT
            assert np.max(np.abs(abbe_image(opened, period, optics, src, z, x) - 1.0)) < PRECISION


def test_all_dark_attenuated_mask_images_to_its_transmission():
    # Attenuated PSM: the dark areas pass intensity T (definition; common practice).
    e = exposure(ANNULAR_06_09, *ARF_IMMERSION, mask=ATTENUATED_6)
    optics = Optics.of(e)
    period, n_max = 500.0, n_orders(500.0, optics, e.sigma_max)
    feat, _ = mask_amplitudes(e, "clear")
    spec = grating_spectrum(period, period, feat, 1.0, n_max)  # the feature fills the period
    src = source_points(e, 0.0)
    inten = CoherentSystems(optics, src, period, n_max, 40.0, keep=0.0).image(spec, 64)
    assert np.max(np.abs(inten - 0.06)) < PRECISION
    assert (
        np.max(np.abs(abbe_image(spec, period, optics, src, 40.0, grid(period, 64)) - 0.06))
        < PRECISION
    )


# --------------------------------------------------------------------------- (h) printing metrics

P_ANALYTIC = 300.0  # three-beam case of (a): ArF dry, NA 0.93
H_FOCUS_NM = np.linspace(-200.0, 200.0, 9)
H_SAMPLES = 1024


@pytest.fixture(scope="module")
def coherent_through_focus():
    e = exposure(COHERENT)
    optics = Optics.of(e)
    spec = grating_spectrum(P_ANALYTIC, P_ANALYTIC / 2, 0.0, 1.0, 5)  # clear field, dark line
    systems = [
        CoherentSystems(optics, source_points(e, 0.0), P_ANALYTIC, 5, float(z)) for z in H_FOCUS_NM
    ]
    x, ims = centred(P_ANALYTIC, np.stack([cs.image(spec, H_SAMPLES)[0] for cs in systems]))
    best = int(np.argmin(np.abs(H_FOCUS_NM)))
    edges = systems[best].at(spec, np.array([-P_ANALYTIC / 4, P_ANALYTIC / 4]))
    engine = (edges[0][0], edges[1][0], lambda where: systems[best].at(spec, where))
    return x, ims, engine


def evaluate_analytic(x, ims, threshold, engine=None):
    """The resist stand-in on the images; with ``engine`` the exact edge values
    (at the drawn edges, and wherever the feature prints) rather than the samples'."""
    p = P_ANALYTIC
    edge_values, values_at = (engine[:2], engine[2]) if engine else (None, None)
    return evaluate(
        x,
        ims,
        H_FOCUS_NM,
        (-p / 4, p / 4),
        (-p / 2, p / 2),
        False,
        p / 2,
        threshold,
        CD_TOL,
        EL_MIN_PCT,
        edge_values,
        values_at=values_at,
    )


def test_printed_cd_at_threshold_quarter_is_half_the_pitch(coherent_through_focus):
    # Goodman (square-wave series, case (a)): I = 1/4 exactly at x = +-p/4.
    x, ims, edges = coherent_through_focus
    best = int(np.argmin(np.abs(H_FOCUS_NM)))
    assert np.max(np.abs(ims[best] - three_beam_field(x, P_ANALYTIC, -1.0) ** 2)) < PRECISION
    cd = cd_of_thresholds(
        x, ims[best], 0.0, -P_ANALYTIC / 2, P_ANALYTIC / 2, False, np.array([0.25])
    )
    # x = +-p/4 are grid points (1024 samples), so interpolation is exact there.
    assert abs(cd[0] - P_ANALYTIC / 2) < PRECISION * P_ANALYTIC
    m = evaluate_analytic(x, ims, 0.25, edges)
    assert abs(m.cd_nm - P_ANALYTIC / 2) < PRECISION * P_ANALYTIC
    assert abs(m.cd_error_pct) < PRECISION
    assert not m.lost
    assert not m.bridged
    assert abs(m.nils - 8.0) < PRECISION  # engine edge values: exact
    sampled = evaluate_analytic(x, ims, 0.25)
    assert abs(sampled.nils - 8.0) < NILS_SAMPLED * 8.0  # np.gradient on the samples


def test_exposure_latitude_of_the_coherent_image(coherent_through_focus):
    # From the field 1/2 - (2/pi) cos(theta), theta = 2 pi x / p, the dark line
    # (|field| < sqrt t) has CD(t) = (p/pi) acos((pi/2)(1/2 - sqrt t)).  CD =
    # (1 -+ 10 %) p/2 at theta = (pi/2)(1 -+ 0.1): sqrt t = 1/2 - (2/pi) cos theta.
    # A dose D prints like threshold 1/(4 D) (sized at t = 1/4), so
    # EL = 100 (1/4) (1/t_a - 1/t_b) % (definition in optics/resist.py; common practice).
    x, ims, edges = coherent_through_focus
    t_a = (0.5 - (2 / math.pi) * math.cos(math.pi / 2 * (1 - CD_TOL))) ** 2
    t_b = (0.5 - (2 / math.pi) * math.cos(math.pi / 2 * (1 + CD_TOL))) ** 2
    expected = 100.0 * 0.25 * (1 / t_a - 1 / t_b)  # 86.4 %
    # The code samples THRESHOLD_SAMPLES thresholds over the image range and
    # keeps those inside tolerance: each window end moves inward by < one step.
    dt = (ims.max() - ims.min()) / (THRESHOLD_SAMPLES - 1)
    resolution = 100.0 * 0.25 * dt * (1 / t_a**2 + 1 / t_b**2)
    m = evaluate_analytic(x, ims, 0.25, edges)
    assert abs(m.el_pct - expected) <= resolution
    assert math.isfinite(m.dof_nm)
    assert 0.0 <= m.dof_nm <= H_FOCUS_NM[-1] - H_FOCUS_NM[0]
    assert m.dose_to_size == pytest.approx(1.0, abs=dt / 0.25)


def test_uniform_image_below_the_cutoff_is_lost_with_zero_latitude():
    # Below the cutoff only the 0th order passes: a uniform image (here the
    # 1/4 of binary equal L/S, c_0 = 1/2; Goodman).  No edge: the feature does
    # not print, whatever the dose.
    e = exposure({"shape": "conventional", "sigma": 0.6})
    pitch = ARF_NM / (DRY_ARF_NA * 1.6) * (1.0 - MARGIN)
    x, ims = grating_through_focus(e, pitch, H_FOCUS_NM, samples=256)
    assert np.ptp(ims) < NO_MODULATION
    assert abs(ims.mean() - 0.25) < PRECISION
    box = ((-pitch / 4, pitch / 4), (-pitch / 2, pitch / 2))
    for threshold in (None, 0.2):  # self-sized, or a threshold below the image
        m = evaluate(x, ims, H_FOCUS_NM, *box, False, pitch / 2, threshold, CD_TOL, EL_MIN_PCT)
        assert m.lost
        assert not m.bridged
        assert m.cd_nm == 0.0
        assert m.el_pct == 0.0
        assert m.dof_nm == 0.0


@pytest.mark.parametrize("case", ["uniform", "three-beam"])
def test_image_everywhere_below_the_threshold_bridges_a_dark_line(case):
    # Constant-threshold model (optics/resist.py): a dark feature prints where I < t.
    # Where I < t everywhere the whole period is resist: the line runs into its
    # neighbours.  x includes both ends +-p/2 (where the three-beam image peaks).
    p = P_ANALYTIC
    x = np.linspace(-p / 2, p / 2, 1025)
    if case == "uniform":
        img, threshold = np.full(len(x), 0.25), 0.3
    else:
        img, threshold = three_beam_field(x, p, -1.0) ** 2, 1.5  # max (1/2 + 2/pi)^2 = 1.29
    assert cd_of_thresholds(x, img, 0.0, -p / 2, p / 2, False, np.array([threshold]))[0] == np.inf
    m = evaluate(
        x,
        img[None, :],
        np.array([0.0]),
        (-p / 4, p / 4),
        (-p / 2, p / 2),
        False,
        p / 2,
        threshold,
        CD_TOL,
        EL_MIN_PCT,
    )
    assert m.bridged
    assert not m.lost


# --------------------------------------------------------------------------- shortcuts, checked


def test_mirror_merged_source_gives_the_reference_images():
    """A 1-D mask's image depends on a source point's sy only as sy^2 (the scalar
    pupil is round: Goodman), so mirror pairs merge: half the points for the
    symmetric sources, the Abbe sum over every point (unmerged) as reference,
    at focus and defocused, for pitch directions 0, 30 and 90 degrees."""
    from pitchguard.optics.aerial import merge_mirrored

    samples = 128
    for illum, pitch_nm in ((ANNULAR_06_09, 100.0), (DIPOLE_X, 95.0), (QUADRUPOLE, 130.0)):
        e = exposure(illum, ARF_NM, 1.35, 1.44)
        optics = Optics.of(e)
        for angle in (0.0, 30.0, 90.0):
            src = source_points(e, angle)
            merged, weights = merge_mirrored(src)
            assert abs(weights.sum() - src[1].sum()) < 1e-12
            if angle in (0.0, 90.0):  # these sources are mirror-symmetric about both axes
                assert len(merged) <= len(src[0]) // 2 + 50
            n_max = n_orders(pitch_nm, optics, e.sigma_max)
            spec = grating_spectrum(pitch_nm, pitch_nm * 0.45, 1.0, 0.0, n_max)
            x = grid(pitch_nm, samples)
            for z in (0.0, 60.0):
                socs = CoherentSystems(optics, src, pitch_nm, n_max, z).image(spec, samples)[0]
                abbe = abbe_image(spec, pitch_nm, optics, src, z, x)
                assert np.max(np.abs(socs - abbe)) < ENGINE_AGREEMENT


def test_systems_at_minus_focus_are_the_conjugates_and_image_as_the_reference():
    """A(-z) = conj(A(z)) (the defocus phase is odd in z, the rest is real), so the
    scan's cache makes -z from +z; its images must equal the Abbe sum at -z.
    One line is phase-shifted by 90 degrees: with a real mask and a symmetric
    source the image is the same at +z and -z (common practice), which would
    not tell the two apart."""
    from pitchguard.optics.cut_images import coherent_systems

    e = exposure(ANNULAR_06_09, ARF_NM, 1.35, 1.44)
    optics = Optics.of(e)
    pitch_nm = 180.0
    n_max = n_orders(pitch_nm, optics, e.sigma_max)
    edges = np.array([-90.0, -60.0, -20.0, 35.0, 90.0])  # two lines of unequal width
    spec = segment_spectrum(pitch_nm, edges, np.array([0.0, 1.0, 0.0, 1.0j]), n_max)
    src = line_source(e, 0.0, pitch_nm, n_max)  # the source the cuts' systems use
    samples = 128
    x = grid(pitch_nm, samples)
    plus = coherent_systems(e, 0.0, pitch_nm, n_max, 80.0).image(spec, samples)[0]
    minus = coherent_systems(e, 0.0, pitch_nm, n_max, -80.0).image(spec, samples)[0]
    assert np.max(np.abs(plus - minus)) > 100 * ENGINE_AGREEMENT  # a real difference
    assert (
        np.max(np.abs(minus - abbe_image(spec, pitch_nm, optics, src, -80.0, x))) < ENGINE_AGREEMENT
    )
    assert (
        np.max(np.abs(plus - abbe_image(spec, pitch_nm, optics, src, 80.0, x))) < ENGINE_AGREEMENT
    )
