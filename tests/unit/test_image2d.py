"""Unit tests for 2-D aerial images of periodic cells (pitchguard.optics.aerial2d) and
the constant-threshold metrics of compact features (pitchguard.optics.resist2d).

Every expected value comes from outside the module under test, its source
named beside it:

* the 1-D engine (``optics.aerial``: ``abbe_image``, ``CoherentSystems``) as
  the consistency reference: a 2-D pattern whose features span the period
  in one direction is a 1-D pattern (domain notes, "2-D patterns");
* Fourier series of a square wave, coherent imaging, the OTF of a circular
  pupil, the transform of a rectangle (Goodman, *Introduction to Fourier
  Optics*);
* the cutoff pitch lambda / (NA (1 + sigma)) (grating equation and pupil
  cutoff, Goodman; arithmetic) and the hexagonal cutoff derived in
  ``optics/lattice_orders.py``;
* the Abbe and Hopkins formulations describe the same image (Hopkins 1953;
  common practice);
* NILS = CD |dI/dx| / I, the +-10 % CD tolerance, the 5 % exposure-latitude
  floor and the Rayleigh depth of focus 0.5 n lambda / NA^2 (common
  practice; definitions in optics/resist.py).

Images are in units of the open frame (an all-clear mask images to 1).
Axis -2 of an image is y, axis -1 is x.
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from pitchguard.deck import Exposure, parse_deck
from pitchguard.geometry.cuts import window_period
from pitchguard.optics.aerial import (
    IMAGE_SOURCE_STEP,
    CoherentSystems,
    Optics,
    abbe_image,
    mask_amplitudes,
    n_orders,
    segment_spectrum,
    source_points,
)
from pitchguard.optics.aerial2d import (
    RASTER_PER_LAMBDA_NA,
    CoherentSystems2D,
    abbe_image_2d,
    cell_orders,
    cell_spectra,
    coherent_systems_2d,
    default_samples,
    exposure_orders,
    image_axes,
    polygon_spectrum,
    rect_spectrum,
    source_angle,
)
from pitchguard.optics.cells2d import Cell, array_cell, clip_cell, lattice_cell
from pitchguard.optics.point_images import KERNEL_TOL, PointImages
from pitchguard.optics.resist import THRESHOLD_SAMPLES, evaluate
from pitchguard.optics.resist2d import anchor_threshold_2d, cell_metrics, evaluate_2d

PRECISION = 1e-9  # absolute, open-frame units: closed-form images and exact identities
ENGINE_AGREEMENT = 1e-6  # SOCS vs Abbe: kernels below SOCS_KEEP (1e-7) of the largest dropped
SLOPE_AGREEMENT = 1e-5  # period * |grad I| difference, SOCS `at` vs central differences of Abbe
LATTICE_TOL = 1e-3  # areas counted on a 0.01-sigma lattice: errors of a few 1e-4 (circle problem)
NO_MODULATION = 1e-9  # max - min of an image below the cutoff
MIN_MODULATION = 1e-5  # 10^4 times NO_MODULATION: a first order is really getting through
MARGIN = 0.01  # 1 % either side of a cutoff
SOURCE_STEP_CLAIM = 5e-3  # optics/aerial2d.py docstring: contact arrays, < 5e-3 of the open frame
RASTER_CLAIM_NM = 0.1  # optics.aerial2d.RASTER_PER_LAMBDA_NA docstring
CD_TOL = 0.10  # +-10 % CD tolerance (common practice)
EL_MIN_PCT = 5.0  # exposure-latitude floor (common practice)

# Scanner families (common practice): wavelengths, NAs, water at 193 nm.
ARF_NM = 193.0
KRF_NM = 248.0
DRY_ARF_NA = 0.93
IMMERSION_NA = 1.35
WATER_INDEX = 1.44
ARF_IMMERSION = (ARF_NM, IMMERSION_NA, WATER_INDEX)

COHERENT = {"shape": "coherent"}
ANNULAR_06_09 = {"shape": "annular", "sigma_inner": 0.6, "sigma_outer": 0.9}
ANNULAR_03_09 = {"shape": "annular", "sigma_inner": 0.3, "sigma_outer": 0.9}
CONVENTIONAL_07 = {"shape": "conventional", "sigma": 0.7}
DIPOLE_X = {
    "shape": "dipole",
    "sigma_inner": 0.6,
    "sigma_outer": 0.9,
    "opening_deg": 35.0,
    "axis": "x",
}
QUADRUPOLE = {"shape": "quadrupole", "sigma_inner": 0.5, "sigma_outer": 0.8, "opening_deg": 30.0}
BINARY = {"kind": "binary"}
ATTENUATED_6 = {"kind": "attenuated", "transmission": 0.06}  # 6 % att. PSM (common practice)


@pytest.fixture(autouse=True, scope="module")
def one_blas_thread():
    """BLAS on one thread, as the scan's workers run it (run.tasks): the TCC builds are
    many small products, which BLAS threads slow down on a busy machine."""
    with threadpool_limits(1):
        yield


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


def fft_grid_centre(orders, nx, ny):
    """The centre that puts the image grid on x = j px / nx, y = k py / ny (the 1-D grid)."""
    return ((nx // 2) * orders.px_nm / nx, (ny // 2) * orders.py_nm / ny)


def grid_points(orders, nx, ny, centre):
    x, y = image_axes(orders, nx, ny, centre)
    return np.meshgrid(x, y)  # (ny, nx) each: rows are y


def seeded(*key):
    return np.random.default_rng(zlib.crc32(repr(key).encode()))  # fixed seed per case


# --------------------------------------------------------------------------- (a) 1-D consistency

CONSISTENCY_CASES = [
    (ANNULAR_06_09, BINARY, "clear"),
    (ANNULAR_06_09, ATTENUATED_6, "dark"),
    (DIPOLE_X, ATTENUATED_6, "clear"),
    (QUADRUPOLE, BINARY, "dark"),
    (COHERENT, ATTENUATED_6, "clear"),
]
LINES_NM = ((-120.0, -60.0), (10.0, 95.0))  # two lines of unequal width in one 300 nm period
PERIOD_NM = 300.0
OTHER_PERIOD_NM = 170.0  # the period along the lines: any value


def lines_1d(e, field, n_max):
    feat, bg = mask_amplitudes(e, field)
    edges = np.array([-PERIOD_NM / 2, *np.ravel(LINES_NM), PERIOD_NM / 2])
    return segment_spectrum(PERIOD_NM, edges, np.array([bg, feat, bg, feat, bg]), n_max)


@pytest.mark.parametrize(("illumination", "mask", "field"), CONSISTENCY_CASES)
@pytest.mark.parametrize("along", ["y", "x"])
def test_features_spanning_the_period_give_the_1d_image(illumination, mask, field, along):
    # Domain notes: a 2-D pattern whose features span the whole period in one
    # direction must give the 1-D image exactly.  Lines along y have their
    # pitch along x (1-D source turn 0); lines along x, pitch along y (turn 90).
    e = exposure(illumination, *ARF_IMMERSION, mask=mask)
    optics = Optics.of(e)
    n_max = n_orders(PERIOD_NM, optics, e.sigma_max)
    spec1 = lines_1d(e, field, n_max)
    src1 = source_points(e, 0.0 if along == "y" else 90.0)
    src2 = source_points(e, 0.0)
    q = OTHER_PERIOD_NM / 2
    if along == "y":
        px, py = PERIOD_NM, OTHER_PERIOD_NM
        rects = [(x0, -q, x1, q) for x0, x1 in LINES_NM]
    else:
        px, py = OTHER_PERIOD_NM, PERIOD_NM
        rects = [(-q, y0, q, y1) for y0, y1 in LINES_NM]
    orders = exposure_orders(e, px, py)
    feat, bg = mask_amplitudes(e, field)
    spec2 = rect_spectrum(orders, np.array(rects), feat, bg)
    samples, other = 64, 12
    u = np.arange(samples) * PERIOD_NM / samples  # the 1-D grid
    for z in (0.0, 80.0):
        ref_abbe = abbe_image(spec1, PERIOD_NM, optics, src1, z, u)
        ref_socs = CoherentSystems(optics, src1, PERIOD_NM, n_max, z, keep=0.0).image(
            spec1, samples
        )[0]
        v = np.linspace(-q, q, 5)  # anywhere along the lines
        a, b = np.meshgrid(u, v)  # (5, samples): a along the pitch, b along the lines
        xs, ys = (a, b) if along == "y" else (b, a)
        abbe2 = abbe_image_2d(spec2, orders, optics, src2, z, xs, ys)  # (5, samples)
        assert np.max(np.abs(abbe2 - ref_abbe[None, :])) < PRECISION
        assert np.max(np.abs(ref_socs - ref_abbe)) < PRECISION  # the two 1-D engines
        nx, ny = (samples, other) if along == "y" else (other, samples)
        cs = CoherentSystems2D(optics, src2, orders, z, keep=0.0)
        img = cs.image(spec2, nx, ny, fft_grid_centre(orders, nx, ny))[0]
        profiles = img if along == "y" else img.T  # (other, samples)
        assert np.max(np.abs(profiles - ref_socs[None, :])) < PRECISION


# --------------------------------------------------------------------------- (b) separable, coherent

# (px, py, wx, wy): an on-axis beam passes exactly the orders |m| <= M, |n| <= N
# (a rectangle of orders; checked in the test), so the coherent field is the
# product of two 1-D fields (Goodman: separable transmission, separable set of
# passed orders).  NA / lambda = 1 / 207.5 nm at dry ArF.
SEPARABLE = [
    (320.0, 320.0, 160.0, 160.0),  # M = N = 1 (sqrt(2)/320 <= NA/lambda < 2/320); equal L/S
    (
        500.0,
        390.0,
        180.0,
        150.0,
    ),  # M = 2, N = 1 ((2/500)^2 + (1/390)^2 <= (NA/lambda)^2 < (3/500)^2)
    (
        330.0,
        580.0,
        120.0,
        300.0,
    ),  # M = 1, N = 2 ((1/330)^2 + (2/580)^2 <= (NA/lambda)^2 < (3/580)^2)
]


@pytest.mark.parametrize(("px", "py", "wx", "wy"), SEPARABLE)
def test_coherent_image_of_a_separable_opening_is_the_product_of_1d_images(px, py, wx, wy):
    e = exposure(COHERENT, mask=BINARY)
    optics = Optics.of(e)
    orders = exposure_orders(e, px, py)
    fx, fy = orders.fx, orders.fy
    passed = fx**2 + fy**2 <= optics.cutoff**2
    m_top, n_top = int(np.abs(orders.m[passed]).max()), int(np.abs(orders.n[passed]).max())
    assert passed.sum() == (2 * m_top + 1) * (2 * n_top + 1)  # a full rectangle of orders
    # Dark field, binary: the opening (amplitude 1) is rect(x / wx) rect(y / wy).
    spec2 = rect_spectrum(orders, np.array([[-wx / 2, -wy / 2, wx / 2, wy / 2]]), 1.0, 0.0)
    src = source_points(e, 0.0)
    nx, ny = 40, 48
    centre = fft_grid_centre(orders, nx, ny)
    img = CoherentSystems2D(optics, src, orders).image(spec2, nx, ny, centre)[0]
    xs, ys = grid_points(orders, nx, ny, centre)
    abbe = abbe_image_2d(spec2, orders, optics, src, 0.0, xs, ys)

    def profile(period, width, samples):
        n_max = n_orders(period, optics, 0.0)
        edges = np.array([-period / 2, -width / 2, width / 2, period / 2])
        spec = segment_spectrum(period, edges, np.array([0.0, 1.0, 0.0]), n_max)
        return CoherentSystems(optics, src, period, n_max, keep=0.0).image(spec, samples)[0]

    product = profile(py, wy, ny)[:, None] * profile(px, wx, nx)[None, :]
    assert np.max(np.abs(img - product)) < PRECISION
    assert np.max(np.abs(abbe - product)) < PRECISION


def test_coherent_equal_square_openings_match_the_square_wave_product():
    # Goodman (square-wave series): a_0 = 1/2, a_+-1 = 1/pi per axis, so the
    # field is (1/2 + (2/pi) cos(2 pi x / p)) (1/2 + (2/pi) cos(2 pi y / p)).
    # At the drawn edge (p/4, 0) the x factor is 1/2: NILS_x = (p/2) 2 F_x'/F_x = 8.
    p = 320.0
    e = exposure(COHERENT)
    optics = Optics.of(e)
    orders = exposure_orders(e, p, p)
    spec = rect_spectrum(orders, np.array([[-p / 4, -p / 4, p / 4, p / 4]]), 1.0, 0.0)
    cs = CoherentSystems2D(optics, source_points(e, 0.0), orders)
    nx = ny = 64
    img = cs.image(spec, nx, ny)[0]
    xs, ys = grid_points(orders, nx, ny, (0.0, 0.0))
    field = (0.5 + (2 / math.pi) * np.cos(2 * math.pi * xs / p)) * (
        0.5 + (2 / math.pi) * np.cos(2 * math.pi * ys / p)
    )
    assert np.max(np.abs(img - field**2)) < PRECISION
    inten, d_x, d_y = cs.at(spec, [p / 4, 0.0], [0.0, p / 4])
    nils = np.array(
        [(p / 2) * abs(d_x[0, 0]) / inten[0, 0], (p / 2) * abs(d_y[0, 1]) / inten[0, 1]]
    )
    assert np.max(np.abs(nils - 8.0)) < PRECISION


# --------------------------------------------------------------------------- (c) incoherent limit

SOURCE_RADIUS = 4.0  # sigma units: covers every shifted pupil below (|shift| <= 1, +1)
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


def circular_pupil_otf(v):
    """Goodman: OTF of a circular pupil, H(v) = (2/pi)[acos v - v sqrt(1 - v^2)], 0 beyond v = 1."""
    v = np.clip(np.abs(v), 0.0, 1.0)
    return (2.0 / math.pi) * (np.arccos(v) - v * np.sqrt(1.0 - v * v))


def test_source_much_larger_than_the_pupil_gives_the_2d_incoherent_otf():
    # Mask amplitude 1 + 0.5 cos(2 pi x/px) + 0.3 cos(2 pi y/py) + 0.2 cos(2 pi (x/px + y/py)):
    # c_00 = 1, c_+-1,0 = 0.25, c_0,+-1 = 0.15, c_+-(1,1) = 0.1, with the first
    # orders at 0.6 and 0.8 NA/lambda (the diagonal at 1.0).  As in the 1-D test
    # (tests/unit/test_image.py), a uniform source of radius R >= 1 + max |u|
    # gives I / I_open = sum_{a,b} c_a c_b* H(|f_a - f_b| / (2 NA/lambda))
    # exp(i 2 pi (f_a - f_b).r) (Goodman: the OTF is the normalised pupil
    # autocorrelation), with I_open = 1 / R^2.
    optics = Optics(ARF_NM, DRY_ARF_NA, 1.0)
    px, py = 1.0 / (0.6 * optics.cutoff), 1.0 / (0.8 * optics.cutoff)
    orders = cell_orders(px, py, optics, 1.0)
    coef = {(0, 0): 1.0, (1, 0): 0.25, (-1, 0): 0.25, (0, 1): 0.15, (0, -1): 0.15}
    coef |= {(1, 1): 0.1, (-1, -1): 0.1}
    index = {(int(m), int(n)): k for k, (m, n) in enumerate(zip(orders.m, orders.n, strict=True))}
    spec = np.zeros(len(orders), dtype=np.complex128)
    opened = np.zeros(len(orders), dtype=np.complex128)
    for key, value in coef.items():
        spec[index[key]] = value
    opened[orders.zero] = 1.0
    rng = seeded("incoherent")
    x, y = rng.uniform(-px, px, 16), rng.uniform(-py, py, 16)
    expected = np.zeros(len(x), dtype=np.complex128)
    for a, ca in coef.items():
        for b, cb in coef.items():
            d = np.array([(a[0] - b[0]) / px, (a[1] - b[1]) / py])
            h = circular_pupil_otf(np.hypot(*d) / (2 * optics.cutoff))
            expected += ca * cb * h * np.exp(2j * np.pi * (d[0] * x + d[1] * y))
    src = lattice_disc(SOURCE_RADIUS, LATTICE_STEP)
    socs, socs_open = CoherentSystems2D(optics, src, orders).at(np.stack([spec, opened]), x, y)[0]
    abbe = abbe_image_2d(spec, orders, optics, src, 0.0, x, y)
    abbe_open = abbe_image_2d(opened, orders, optics, src, 0.0, x, y)
    assert np.max(np.abs(socs_open * SOURCE_RADIUS**2 - 1.0)) < LATTICE_TOL
    assert np.max(np.abs(abbe_open * SOURCE_RADIUS**2 - 1.0)) < LATTICE_TOL
    assert np.max(np.abs(socs / socs_open - expected.real)) < LATTICE_TOL
    assert np.max(np.abs(abbe / abbe_open - expected.real)) < LATTICE_TOL


# --------------------------------------------------------------------------- (d) cutoffs, imaged

CUTOFF_SIGMAS = [0.3, 0.6, 0.9]


def socs_and_abbe(e, cell, field, nx=24, ny=24, z=0.0):
    """Images of a cell on an nx x ny grid by the cached SOCS engine and by the Abbe sum."""
    optics = Optics.of(e)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    feat, bg = mask_amplitudes(e, field)
    spec = cell_spectra([cell], orders, feat, bg)
    nx, ny = max(nx, 2 * orders.m_max + 1), max(ny, 2 * orders.n_max + 1)
    socs = coherent_systems_2d(e, cell.px_nm, cell.py_nm, z).image(spec, nx, ny)[0]
    xs, ys = grid_points(orders, nx, ny, (0.0, 0.0))
    abbe = abbe_image_2d(spec[0], orders, optics, source_points(e, 0.0), z, xs, ys)
    return socs, abbe


@pytest.mark.parametrize("sigma", CUTOFF_SIGMAS)
def test_square_contact_array_images_uniform_below_the_line_cutoff(sigma):
    # Domain notes / Goodman: a square lattice's first orders sit at 1/p, so its
    # cutoff is the line cutoff lambda / (NA (1 + sigma)).
    e = exposure({"shape": "conventional", "sigma": sigma})
    p_cut = ARF_NM / (DRY_ARF_NA * (1.0 + sigma))
    for scale, modulated in ((1.0 - MARGIN, False), (1.0 + MARGIN, True)):
        p = p_cut * scale
        for img in socs_and_abbe(e, array_cell(p, p, p / 2, p / 2), "dark"):
            if modulated:
                assert np.ptp(img) > MIN_MODULATION
                assert np.ptp(img, axis=1).max() > MIN_MODULATION  # along x
                assert np.ptp(img, axis=0).max() > MIN_MODULATION  # along y
            else:
                assert np.ptp(img) < NO_MODULATION


def test_rectangular_array_below_the_cutoff_along_x_images_as_lines():
    # Domain notes: a rectangular lattice resolves each direction on its own; when
    # one does not, holes merge into lines (no modulation along it).
    sigma = 0.6
    e = exposure({"shape": "conventional", "sigma": sigma})
    p_cut = ARF_NM / (DRY_ARF_NA * (1.0 + sigma))
    cell = array_cell(p_cut * (1 - MARGIN), p_cut * 1.3, 0.5 * p_cut, 0.6 * p_cut)
    for img in socs_and_abbe(e, cell, "dark"):
        assert np.ptp(img, axis=1).max() < NO_MODULATION  # every row flat along x
        assert np.ptp(img, axis=0).min() > MIN_MODULATION  # every column modulated along y


@pytest.mark.parametrize("sigma", CUTOFF_SIGMAS)
def test_hexagonal_array_images_from_its_derived_cutoff(sigma):
    # optics/lattice_orders.py notes: first orders at 2 / (sqrt(3) a), so the
    # cutoff is a = 2 lambda / (sqrt(3) NA (1 + sigma)).  Imaged through its
    # a x sqrt(3) a supercell (two features).
    e = exposure({"shape": "conventional", "sigma": sigma})
    a_cut = 2 * ARF_NM / (math.sqrt(3) * DRY_ARF_NA * (1.0 + sigma))
    for scale, modulated in ((1.0 - MARGIN, False), (1.0 + MARGIN, True)):
        a = a_cut * scale
        cell = lattice_cell((a, 0.0), (a / 2, a * math.sqrt(3) / 2), a / 2, a / 2)
        assert len(cell.rects_nm) == 2
        assert cell.px_nm == pytest.approx(a, rel=PRECISION)
        assert cell.py_nm == pytest.approx(math.sqrt(3) * a, rel=PRECISION)
        for img in socs_and_abbe(e, cell, "dark", 24, 40):
            if modulated:
                assert np.ptp(img, axis=1).max() > MIN_MODULATION
                assert np.ptp(img, axis=0).max() > MIN_MODULATION
            else:
                assert np.ptp(img) < NO_MODULATION


def test_lattice_cell_refuses_a_lattice_without_a_rectangular_supercell():
    with pytest.raises(ValueError, match="no rectangular supercell"):
        lattice_cell((100.0, 0.0), (37.0, 91.0), 30.0, 30.0)


# --------------------------------------------------------------------------- (e) SOCS vs Abbe

ENGINE_CASES = [
    (ANNULAR_06_09, BINARY),
    (ANNULAR_06_09, ATTENUATED_6),
    (DIPOLE_X, BINARY),
    (DIPOLE_X, ATTENUATED_6),
    (QUADRUPOLE, ATTENUATED_6),
    (CONVENTIONAL_07, BINARY),
    (COHERENT, ATTENUATED_6),
]


def random_cell(rng, px, py, count):
    """``count`` rectangles in separate horizontal bands (no overlap); the first crosses
    the cell's left/right border (it wraps)."""
    bands = np.linspace(-py / 2, py / 2, count + 1)
    rects = []
    for k in range(count):
        y0, y1 = np.sort(rng.uniform(bands[k], bands[k + 1], 2))
        w = rng.uniform(0.1, 0.6) * px
        x0 = px / 2 - 0.3 * w if k == 0 else rng.uniform(-px / 2, px / 2 - w)
        rects.append((x0, y0, x0 + w, y1))
    return Cell(px, py, tuple(rects))


@pytest.mark.parametrize(("illumination", "mask"), ENGINE_CASES)
def test_sum_of_coherent_systems_equals_the_abbe_sum(illumination, mask):
    # Hopkins and Abbe are the same image (Hopkins 1953; common practice): the
    # cached engine (systems at -z made from +z, the source turned with the
    # cell frame) against the reference sum over source points.
    rng = seeded(illumination, mask)
    e = exposure(illumination, *ARF_IMMERSION, mask=mask)
    optics = Optics.of(e)
    for angle, z in ((0.0, 0.0), (30.0, -80.0), (90.0, 137.0)):
        px, py = rng.uniform(90.0, 260.0, 2)
        cell = random_cell(rng, px, py, int(rng.integers(1, 4)))
        orders = exposure_orders(e, px, py)
        feat, bg = mask_amplitudes(e, "clear" if rng.random() < 0.5 else "dark")
        spec = cell_spectra([cell], orders, feat, bg)
        cs = coherent_systems_2d(e, px, py, z, angle)
        src = source_points(e, source_angle(e, angle))
        centre = tuple(rng.uniform(-100.0, 100.0, 2))
        nx, ny = default_samples(orders, optics)  # a fine grid: the band-limited resampling
        img = cs.image(spec, nx, ny, centre)[0]
        xs, ys = grid_points(orders, nx, ny, centre)
        pick = rng.choice(nx * ny, 60, replace=False)
        abbe = abbe_image_2d(spec[0], orders, optics, src, z, xs.ravel()[pick], ys.ravel()[pick])
        assert np.max(np.abs(img.ravel()[pick] - abbe)) < ENGINE_AGREEMENT
        # `at`: intensity and gradient anywhere (against central differences of Abbe).
        xr, yr = rng.uniform(-px, px, 5), rng.uniform(-py, py, 5)
        inten, d_x, d_y = cs.at(spec, xr, yr)
        h = 1e-3  # nm: truncation (h^2) and rounding (1e-16 / h) errors both << tolerance

        def ab(x, y, spec=spec, orders=orders, src=src, z=z):
            return abbe_image_2d(spec[0], orders, optics, src, z, x, y)

        assert np.max(np.abs(inten[0] - ab(xr, yr))) < ENGINE_AGREEMENT
        gx = (ab(xr + h, yr) - ab(xr - h, yr)) / (2 * h)
        gy = (ab(xr, yr + h) - ab(xr, yr - h)) / (2 * h)
        assert np.max(np.abs(d_x[0] - gx)) * px < SLOPE_AGREEMENT
        assert np.max(np.abs(d_y[0] - gy)) * py < SLOPE_AGREEMENT
        # Open frame: 1 (the source inside the pupil, weights summing to 1).
        opened = np.zeros(len(orders), dtype=np.complex128)
        opened[orders.zero] = 1.0
        assert np.max(np.abs(cs.image(opened, 16, 16) - 1.0)) < ENGINE_AGREEMENT
        every = CoherentSystems2D(optics, src, orders, z, keep=0.0)
        assert np.max(np.abs(every.image(opened, 16, 16) - 1.0)) < PRECISION


POINT_CASES = [
    # illumination, mask, field, rectangles (nm, clip frame), focus (nm)
    (ANNULAR_06_09, BINARY, "dark", [(-20, -20, 20, 20), (90, -20, 130, 20)], 0.0),
    (ANNULAR_06_09, ATTENUATED_6, "clear", [(-35, -35, 35, 35), (-35, 120, 35, 190)], 76.0),
    (DIPOLE_X, ATTENUATED_6, "dark", [(-30, -30, 30, 30), (-150, -60, -100, 60)], -50.0),
    (QUADRUPOLE, BINARY, "clear", [(-300, -45, 0, 45), (60, -45, 300, 45)], 100.0),
]


@pytest.mark.parametrize(("illumination", "mask", "field", "rects", "z"), POINT_CASES)
def test_point_images_stay_within_their_stated_bound(illumination, mask, field, rects, z):
    # PointImages drops coherent systems by the bound proved in its docstring:
    # intensity within KERNEL_TOL of the full Hopkins sum (Abbe here, Hopkins
    # 1953), slopes within 4 pi KERNEL_TOL f_max (Cauchy-Schwarz on the dropped
    # systems' derivative, f_max the highest order frequency).
    e = exposure(illumination, *ARF_IMMERSION, mask=mask)
    optics = Optics.of(e)
    lam_na = ARF_NM / IMMERSION_NA
    cell = clip_cell(np.array(rects, dtype=np.float64), lam_na)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    spec = cell_spectra([cell], orders, *mask_amplitudes(e, field))[0]
    rng = seeded(illumination, mask, field, z)
    x, y = rng.uniform(-200.0, 200.0, (2, 80))
    img = PointImages(e, cell, spec, orders, x, y, 0.0)
    src = source_points(e, 0.0)
    abbe = abbe_image_2d(spec, orders, optics, src, z, x, y)
    assert np.max(np.abs(img(z) - abbe)) <= KERNEL_TOL
    assert np.max(np.abs(img(z, slice(10, 20)) - abbe[10:20])) <= KERNEL_TOL
    inten, d_x, d_y = img.at(z, x[:6], y[:6])
    exact, ex_x, ex_y = coherent_systems_2d(e, cell.px_nm, cell.py_nm, z).at(spec, x[:6], y[:6])
    f_max = float(np.max(np.hypot(orders.fx, orders.fy)))
    assert np.max(np.abs(inten - exact[0])) <= KERNEL_TOL
    assert np.max(np.abs(d_x - ex_x[0])) <= 4 * math.pi * KERNEL_TOL * f_max
    assert np.max(np.abs(d_y - ex_y[0])) <= 4 * math.pi * KERNEL_TOL * f_max


def test_point_images_of_a_small_hole_need_few_systems():
    # The bound keeps systems with eigenvalue >= KERNEL_TOL / variance: a 40 nm
    # hole alone in its window has a variance of at most its area fraction
    # (Parseval, with the orders beyond the pupil's reach left out), so fewer
    # systems than the plain cut at KERNEL_TOL keep (9 against 61 here).
    e = exposure(ANNULAR_06_09, *ARF_IMMERSION)
    cell = clip_cell(np.array([(-20.0, -20.0, 20.0, 20.0)]), ARF_NM / IMMERSION_NA)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    spec = cell_spectra([cell], orders, *mask_amplitudes(e, "dark"))[0]
    img = PointImages(e, cell, spec, orders, np.zeros(1), np.zeros(1), 0.0)
    area = 40.0 * 40.0 / (cell.px_nm * cell.py_nm)
    assert 0.0 < img.variance <= area * (1 - area)
    ev, _, _, _ = img._split(0.0)
    every = coherent_systems_2d(e, cell.px_nm, cell.py_nm, 0.0).eigenvalues
    assert len(ev) == int(np.sum(every >= KERNEL_TOL / img.variance))
    assert len(ev) < 0.2 * int(np.sum(every >= KERNEL_TOL))


def test_all_dark_attenuated_mask_images_to_its_transmission():
    # Attenuated PSM: the dark areas pass intensity T (definition; common practice).
    e = exposure(ANNULAR_06_09, *ARF_IMMERSION, mask=ATTENUATED_6)
    orders = exposure_orders(e, 200.0, 160.0)
    feat, _ = mask_amplitudes(e, "clear")
    spec = rect_spectrum(orders, np.array([[-100.0, -80.0, 100.0, 80.0]]), feat, 1.0)
    src = source_points(e, 0.0)
    img = CoherentSystems2D(Optics.of(e), src, orders, 40.0, keep=0.0).image(spec, 16, 16)
    assert np.max(np.abs(img - 0.06)) < PRECISION
    xs, ys = grid_points(orders, 8, 8, (0.0, 0.0))
    abbe = abbe_image_2d(spec, orders, Optics.of(e), src, 40.0, xs, ys)
    assert np.max(np.abs(abbe - 0.06)) < PRECISION


def test_systems_at_minus_focus_differ_from_plus_focus_for_a_phase_shifted_feature():
    # Control for the -z shortcut: with a 90-degree feature the image at -z is not
    # the image at +z (a real mask and a symmetric source would not tell them apart;
    # common practice), and each equals the Abbe sum at its own focus.
    e = exposure(ANNULAR_06_09, *ARF_IMMERSION)
    optics = Optics.of(e)
    orders = exposure_orders(e, 180.0, 150.0)
    spec = rect_spectrum(
        orders, np.array([[[-60.0, -40.0, -10.0, 30.0], [20.0, -70.0, 70.0, 0.0]]]), 1.0j, 0.0
    )
    spec += rect_spectrum(orders, np.array([[[20.0, 10.0, 60.0, 60.0]]]), 1.0, 0.0)
    nx, ny = 20, 18
    xs, ys = grid_points(orders, nx, ny, (0.0, 0.0))
    src = source_points(e, 0.0)
    plus = coherent_systems_2d(e, 180.0, 150.0, 80.0).image(spec, nx, ny)[0]
    minus = coherent_systems_2d(e, 180.0, 150.0, -80.0).image(spec, nx, ny)[0]
    assert np.max(np.abs(plus - minus)) > 100 * ENGINE_AGREEMENT
    for z, img in ((80.0, plus), (-80.0, minus)):
        abbe = abbe_image_2d(spec[0], orders, optics, src, z, xs, ys)
        assert np.max(np.abs(img - abbe)) < ENGINE_AGREEMENT


# --------------------------------------------------------------------------- (f) spectra


def test_polygon_spectrum_of_rectangles_equals_the_separable_form():
    # Goodman: the transform of a rectangle is separable; the edge-sum form of a
    # polygon must give the same numbers, for either orientation, and an L-shape
    # is the sum of its two rectangles.
    optics = Optics(ARF_NM, IMMERSION_NA, WATER_INDEX)
    orders = cell_orders(400.0, 350.0, optics, 1.0)
    rect = np.array([[-70.0, -40.0, 50.0, 90.0]])
    ccw = np.array([[-70.0, -40.0], [50.0, -40.0], [50.0, 90.0], [-70.0, 90.0]])
    feat, bg = -0.245, 1.0
    ref = rect_spectrum(orders, rect, feat, bg)
    assert np.max(np.abs(polygon_spectrum(orders, [ccw], feat, bg) - ref)) < PRECISION
    assert np.max(np.abs(polygon_spectrum(orders, [ccw[::-1]], feat, bg) - ref)) < PRECISION
    ell = np.array([[0, 0], [100, 0], [100, 30], [30, 30], [30, 120], [0, 120]], float)
    two = np.array([[0.0, 0.0, 100.0, 30.0], [0.0, 30.0, 30.0, 120.0]])
    assert (
        np.max(
            np.abs(polygon_spectrum(orders, [ell], feat, bg) - rect_spectrum(orders, two, feat, bg))
        )
        < PRECISION
    )


def test_polygon_spectrum_of_a_turned_square_is_the_turned_transform():
    # Goodman (similarity and rotation theorems): a w x w square turned by theta
    # about its centre r0 has F(f) = w^2 sinc(w f'_x) sinc(w f'_y) exp(-i 2 pi f.r0),
    # f' = R(-theta) f.
    optics = Optics(ARF_NM, IMMERSION_NA, WATER_INDEX)
    orders = cell_orders(300.0, 260.0, optics, 1.0)
    w, theta, r0 = 80.0, math.radians(30.0), np.array([12.0, -7.0])
    corners = np.array([[-1, -1], [1, -1], [1, 1], [-1, 1]], float) * w / 2
    rot = np.array([[math.cos(theta), -math.sin(theta)], [math.sin(theta), math.cos(theta)]])
    poly = corners @ rot.T + r0
    f = np.stack([orders.fx, orders.fy], axis=1)
    fp = f @ rot  # rows: R(-theta) f
    expected = (
        w * w * np.sinc(w * fp[:, 0]) * np.sinc(w * fp[:, 1]) * np.exp(-2j * np.pi * f @ r0)
    ) / (300.0 * 260.0)
    assert np.max(np.abs(polygon_spectrum(orders, [poly], 1.0, 0.0) - expected)) < PRECISION


def test_rectangle_across_the_cell_border_equals_its_two_wrapped_pieces():
    # Fourier series of a periodic function: any one period may be integrated.
    optics = Optics(ARF_NM, IMMERSION_NA, WATER_INDEX)
    orders = cell_orders(200.0, 180.0, optics, 1.0)
    across = np.array([[80.0, -20.0, 130.0, 40.0]])  # runs 30 nm past x = +100
    pieces = np.array([[80.0, -20.0, 100.0, 40.0], [-100.0, -20.0, -70.0, 40.0]])
    assert (
        np.max(
            np.abs(
                rect_spectrum(orders, across, 1.0, 0.0) - rect_spectrum(orders, pieces, 1.0, 0.0)
            )
        )
        < PRECISION
    )


# --------------------------------------------------------------------------- (g) convergence

STEPS = (0.08, 0.04, 0.02, 0.01)
CONTACT_K1 = (0.35, 0.5, 0.8)  # square arrays, pitch 2 k1 lambda / NA, holes of half the pitch


def contact_images(illumination, steps, k1s=CONTACT_K1, focus=(0.0, 50.0)):
    """{step: (cases, ny, nx)} dark-field binary contact-array images, ArF immersion."""
    e = exposure(illumination, *ARF_IMMERSION)
    optics = Optics.of(e)
    out = {s: [] for s in steps}
    for k1 in k1s:
        p = 2 * k1 * ARF_NM / IMMERSION_NA
        orders = exposure_orders(e, p, p)
        spec = cell_spectra([array_cell(p, p, p / 2, p / 2)], orders, 1.0, 0.0)
        for z in focus:
            for s in steps:
                cs = CoherentSystems2D(optics, source_points(e, 0.0, s), orders, z)
                out[s].append(cs.image(spec, 32, 32)[0])
    return {s: np.array(v) for s, v in out.items()}


def test_image_converges_as_the_source_sampling_is_refined():
    # Halving the source step shrinks the change each time (ring 0.3-0.9, as in
    # the 1-D test: its width/8 caps the step only a little).
    ims = contact_images(ANNULAR_03_09, STEPS)
    diffs = [np.max(np.abs(ims[a] - ims[b])) for a, b in zip(STEPS, STEPS[1:], strict=False)]
    assert diffs[0] > diffs[1] > diffs[2]


@pytest.mark.parametrize(
    "illumination",
    [
        pytest.param(ANNULAR_06_09, id="annular"),
        pytest.param(CONVENTIONAL_07, id="conventional"),
        pytest.param(DIPOLE_X, id="dipole"),
        pytest.param(QUADRUPOLE, id="quadrupole"),
    ],
)
def test_documented_source_step_holds_for_contact_arrays(illumination):
    # The claim of optics/aerial2d.py for IMAGE_SOURCE_STEP (< 5e-3 of the open
    # frame against a 0.01 step) over contact arrays from k1 0.3 to 1.2 in steps of 0.05.
    k1s = tuple(np.linspace(0.3, 1.2, 19))
    ims = contact_images(illumination, (IMAGE_SOURCE_STEP, 0.01), k1s=k1s, focus=(0.0, 60.0))
    assert np.max(np.abs(ims[IMAGE_SOURCE_STEP] - ims[0.01])) < SOURCE_STEP_CLAIM


def test_finer_raster_samples_the_same_band_limited_image():
    # Sampling theorem (Goodman): the intensity holds |k| <= 2 m_max, so the
    # zero-padded resampling is exact: doubling nx, ny changes no shared sample.
    e = exposure(QUADRUPOLE, *ARF_IMMERSION, mask=ATTENUATED_6)
    cell = random_cell(seeded("raster"), 230.0, 190.0, 3)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    feat, bg = mask_amplitudes(e, "dark")
    spec = cell_spectra([cell], orders, feat, bg)
    cs = coherent_systems_2d(e, cell.px_nm, cell.py_nm, 40.0)
    nx, ny = default_samples(orders, Optics.of(e))
    coarse = cs.image(spec, nx, ny, (5.0, -3.0))[0]
    fine = cs.image(spec, 2 * nx, 2 * ny, (5.0, -3.0))[0]
    assert np.max(np.abs(fine[::2, ::2] - coarse)) < PRECISION


RASTER_RULES = {
    "krf-conventional": {},
    "arfi-annular-att": {
        "illumination": '{ shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }',
        "mask": '{ kind = "attenuated", transmission = 0.06 }',
        "wavelength": ARF_NM,
        "na": IMMERSION_NA,
        "index": WATER_INDEX,
    },
    "arfi-quadrupole-clear": {
        "illumination": (
            '{ shape = "quadrupole", sigma_inner = 0.5, sigma_outer = 0.8, opening_deg = 30.0 }'
        ),
        "field": "clear",
        "wavelength": ARF_NM,
        "na": IMMERSION_NA,
        "index": WATER_INDEX,
    },
}


@pytest.mark.parametrize("deck", list(RASTER_RULES))
def test_printed_size_converges_as_the_raster_is_refined(deck):
    # Edges are read off the samples by linear interpolation (optics/resist.py),
    # so the printed size depends on the raster step; halving the default step
    # moves it by less than the claim of RASTER_PER_LAMBDA_NA.  Square and
    # rectangular arrays, k1 0.35 to 0.8.
    rule = layer_rule(**RASTER_RULES[deck])
    lam_na = rule.exposure.lambda_over_na_nm
    moved = []
    for k1 in (0.35, 0.5, 0.8):
        p = 2 * k1 * lam_na
        for cell in (array_cell(p, p, p / 2, p / 2), array_cell(p, 1.3 * p, 0.45 * p, 0.7 * p)):
            orders = exposure_orders(rule.exposure, cell.px_nm, cell.py_nm)
            nx, ny = default_samples(orders, Optics.of(rule.exposure))
            assert nx * (lam_na / RASTER_PER_LAMBDA_NA) >= cell.px_nm
            a, *_ = cell_metrics(rule, cell, samples=(nx, ny), focus_nm=(0.0,))
            b, *_ = cell_metrics(rule, cell, samples=(2 * nx, 2 * ny), focus_nm=(0.0,))
            assert 0.0 < a.size_y_nm < math.inf
            moved += [abs(a.size_x_nm - b.size_x_nm), abs(a.size_y_nm - b.size_y_nm)]
    assert max(moved) < RASTER_CLAIM_NM


# --------------------------------------------------------------------------- (h) clips


def test_clip_cell_pads_the_group_like_a_1d_window():
    # geometry.cuts.window_period: the group's extent plus lambda/NA each side.
    rects = np.array([[1000.0, 2000.0, 1080.0, 2100.0], [1200.0, 2050.0, 1300.0, 2300.0]])
    cell = clip_cell(rects, 143.0)
    assert cell.origin_nm == (1150.0, 2150.0)
    assert cell.px_nm == window_period(150.0, 143.0)
    assert cell.py_nm == window_period(150.0, 143.0)
    assert cell.rects_nm == ((-150.0, -150.0, -70.0, -50.0), (50.0, -100.0, 150.0, 150.0))
    # With a window: rectangles clipped to it (the second loses 100 nm at the top).
    win = clip_cell(rects, 143.0, centre_nm=(1150.0, 2150.0), half_extent_nm=(150.0, 50.0))
    assert win.rects_nm == ((50.0, -50.0, 150.0, 50.0),)  # the first is cut to nothing
    assert win.py_nm == window_period(50.0, 143.0)


def test_clip_of_an_array_padded_by_half_a_space_is_the_array():
    # A k x k group of an array, padded by half a space each side, has the window
    # k p: periodic, it is the array itself (identity), wherever it lies in the
    # layout.  Every point images as in the unit cell.
    e = exposure(QUADRUPOLE, *ARF_IMMERSION, mask=ATTENUATED_6)
    p, w, k = 150.0, 70.0, 3
    centres = (np.arange(k) - k // 2) * p
    cx, cy = (v.ravel() for v in np.meshgrid(centres + 1000.0, centres - 500.0))
    rects = np.stack([cx - w / 2, cy - w / 2, cx + w / 2, cy + w / 2], axis=1)
    clip = clip_cell(rects, (p - w) / 2)
    assert clip.origin_nm == (1000.0, -500.0)
    assert clip.px_nm == pytest.approx(k * p, rel=PRECISION)
    assert clip.py_nm == pytest.approx(k * p, rel=PRECISION)
    feat, bg = mask_amplitudes(e, "dark")
    rng = seeded("clip")
    x, y = rng.uniform(-k * p / 2, k * p / 2, (2, 40))
    for z in (0.0, 70.0):
        unit = array_cell(p, p, w, w)
        images = []
        for cell in (unit, clip):
            orders = exposure_orders(e, cell.px_nm, cell.py_nm)
            spec = cell_spectra([cell], orders, feat, bg)
            images.append(coherent_systems_2d(e, cell.px_nm, cell.py_nm, z).at(spec, x, y)[0])
        assert np.max(np.abs(images[0] - images[1])) < ENGINE_AGREEMENT


def isolated_contact_centre(e, w, pad):
    """Intensity at the centre of one w x w opening in a clip padded by ``pad`` lambda/NA."""
    cell = clip_cell(np.array([[-w / 2, -w / 2, w / 2, w / 2]]), pad * e.lambda_over_na_nm)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    feat, bg = mask_amplitudes(e, "dark")
    spec = cell_spectra([cell], orders, feat, bg)
    cs = coherent_systems_2d(e, cell.px_nm, cell.py_nm, 0.0)
    return float(cs.at(spec, [0.0], [0.0])[0][0, 0])


def test_isolated_contact_barely_sees_the_copies_of_its_clip():
    # A finite group imaged as periodic: with the copies 2 lambda/NA away or more
    # the centre of an isolated hole moves by less than 0.5 % as the padding grows
    # from 1 to 3 lambda/NA (measured: 0.4353, 0.4357, 0.4365, a spread of 0.3 %,
    # for KrF NA 0.8, ring 0.6-0.9, 6 % att. PSM, 250 nm hole; not monotone).
    # The image of a clip is that of an isolated group only to this order.
    e = exposure(ANNULAR_06_09, KRF_NM, 0.8, mask=ATTENUATED_6)
    values = np.array([isolated_contact_centre(e, 250.0, pad) for pad in (1.0, 2.0, 3.0)])
    assert np.ptp(values) < 5e-3 * values.mean()
    assert values.min() > 0.3  # a bright hole (not a trivial image)


# --------------------------------------------------------------------------- (i) printing metrics

DECK_TEMPLATE = """
[exposures.e]
wavelength_nm = {wavelength}
na = {na}
immersion_index = {index}
illumination = {illumination}
mask = {mask}
polarization = "{light}"

[[layers]]
name = "holes"
source = "1/0"
exposure = "e"
field = "{field}"
{extra}
"""


def layer_rule(
    illumination='{ shape = "conventional", sigma = 0.5 }',
    mask='{ kind = "binary" }',
    field="dark",
    wavelength=KRF_NM,
    na=0.8,
    index=1.0,
    extra="",
    light="scalar",
):
    text = DECK_TEMPLATE.format(
        light=light,
        wavelength=wavelength,
        na=na,
        index=index,
        illumination=illumination,
        mask=mask,
        field=field,
        extra=extra,
    )
    return parse_deck(text).layers[0]


def test_relaxed_contact_array_prints_on_size_with_high_contrast():
    # KrF NA 0.8 conventional 0.5, binary dark field, 400 x 600 nm holes at
    # 800 x 1000 nm (k1 1.3 and 1.6): a relaxed array (common practice: k1 > 0.5 is
    # comfortable).  Sized on x at its own dose, it prints with contrast near 1,
    # both sizes within the +-10 % tolerance, latitude above the 5 % floor and a
    # depth of focus of at least the Rayleigh floor 0.5 lambda / NA^2 (common practice).
    rule = layer_rule()
    m, x, y, img = cell_metrics(rule, array_cell(800.0, 1000.0, 400.0, 600.0))
    assert img.shape == (len(y), len(x))
    assert m.contrast > 0.99
    assert abs(m.size_x_nm - 400.0) < 0.1  # sized on x: the threshold table's resolution
    assert abs(m.size_y_nm - 600.0) < CD_TOL * 600.0
    assert not m.missing
    assert not m.merged
    assert m.el_pct > EL_MIN_PCT
    assert m.dof_nm >= 0.5 * KRF_NM / 0.8**2
    assert m.nils_x > 2.0  # comfortable (common practice)
    assert m.nils_y > 2.0
    assert m.dose_to_size == pytest.approx(1.0)


def test_lines_spanning_the_cell_give_the_1d_metrics_along_x():
    # The 1-D resist stand-in (optics.resist.evaluate) as reference: a line that
    # spans the cell along y has the 1-D line's printed width and NILS along x,
    # and it is merged (it runs into its copy along y).
    rule = layer_rule(field="clear", mask='{ kind = "attenuated", transmission = 0.06 }')
    e = rule.exposure
    p, w, py = 360.0, 150.0, 200.0
    t_nom = 0.3
    cell = Cell(p, py, ((-w / 2, -py / 2, w / 2, py / 2),))
    focus = (0.0,)
    orders = exposure_orders(e, p, py)
    nx, ny = default_samples(orders, Optics.of(e))
    feat, bg = mask_amplitudes(e, "clear")
    spec = cell_spectra([cell], orders, feat, bg)
    img = coherent_systems_2d(e, p, py, 0.0).image(spec, nx, ny)
    x, y = image_axes(orders, nx, ny)
    inner = (-w / 2, -py / 4, w / 2, py / 4)  # the judged stretch of the line
    m2 = evaluate_2d(x, y, img, np.array(focus), inner, False, t_nom, CD_TOL, EL_MIN_PCT)
    m1 = evaluate(
        x,
        img[:, ny // 2, :],
        np.array(focus),
        (-w / 2, w / 2),
        (x[0], x[-1]),
        False,
        w,
        t_nom,
        CD_TOL,
        EL_MIN_PCT,
    )
    assert m2.size_x_nm == pytest.approx(m1.cd_nm, abs=PRECISION)
    # 2-D patterns take NILS at the drawn edges (1-D cuts at the printed ones):
    # the definition, w |dI/dx| / I, on the row's samples.
    row = img[0, ny // 2, :]
    i_e = np.interp([-w / 2, w / 2], x, row)
    d_e = np.interp([-w / 2, w / 2], x, np.gradient(row, x))
    assert m2.nils_x == pytest.approx(float(np.min(w * np.abs(d_e) / i_e)), rel=PRECISION)
    assert m2.size_y_nm == math.inf
    assert m2.merged
    assert not m2.missing


def test_latitude_is_judged_per_axis_around_its_own_size():
    # Domain notes: line ends pull back at low k1 (2-D effects a 1-D cut cannot
    # see).  A 160 x 300 nm hole at 400 x 600 nm (KrF NA 0.8, conventional 0.5),
    # sized on x, prints short along y, beyond the +-10 % tolerance: a bias OPC
    # corrects (common practice).  Each axis keeps its latitude around its own
    # dose-to-size; the reported one is the smaller, as the 1-D resist
    # stand-in (optics.resist.evaluate) finds on the row and the column
    # through the centre (the consistency reference).
    rule = layer_rule()
    cell = array_cell(400.0, 600.0, 160.0, 300.0)
    m, x, y, img = cell_metrics(rule, cell, focus_nm=(0.0,))
    assert m.size_x_nm == pytest.approx(160.0, abs=0.1)
    assert m.size_y_nm < (1 - CD_TOL) * 300.0
    row = img[np.argmin(np.abs(y))][None, :]
    col = img[:, np.argmin(np.abs(x))][None, :]
    along_x = evaluate(
        x, row, np.array([0.0]), (-80.0, 80.0), (x[0], x[-1]), True, 160.0, None, CD_TOL, EL_MIN_PCT
    )
    along_y = evaluate(
        y,
        col,
        np.array([0.0]),
        (-150.0, 150.0),
        (y[0], y[-1]),
        True,
        300.0,
        None,
        CD_TOL,
        EL_MIN_PCT,
    )
    assert min(along_x.el_pct, along_y.el_pct) > EL_MIN_PCT
    # Threshold samples differ between the two (512 over each image's range).
    assert m.el_pct == pytest.approx(min(along_x.el_pct, along_y.el_pct), abs=0.3)


def test_contact_array_below_the_cutoff_along_x_merges_into_lines():
    # Domain notes: when one direction of a rectangular lattice does not resolve,
    # holes merge into lines.
    # Dose from an anchor (a relaxed 300 nm hole array): the array itself cannot be
    # sized along x, its image being flat along x.
    rule = layer_rule(extra="anchor = { pitch_nm = 600.0, cd_nm = 300.0 }")
    e = rule.exposure
    p_cut = e.wavelength_nm / (e.na * 1.5)
    px = p_cut * (1 - MARGIN)
    m, *_ = cell_metrics(rule, array_cell(px, 2.5 * p_cut, 0.8 * px, p_cut))
    assert m.merged
    assert m.size_x_nm == math.inf
    assert not m.missing


def test_small_hole_at_the_anchored_dose_is_missing():
    # Anchored at 300 nm holes on a 600 nm pitch, a 90 nm hole (k1 0.29 of its
    # own size) gets far too little light to clear the resist: missing.
    rule = layer_rule(extra="anchor = { pitch_nm = 600.0, cd_nm = 300.0 }")
    m, *_ = cell_metrics(rule, array_cell(600.0, 600.0, 90.0, 90.0))
    assert m.missing
    assert not m.merged
    assert m.size_x_nm == 0.0


def test_anchor_array_prints_on_size_at_its_own_threshold():
    # Dose-to-size definition (domain notes): the anchor prints at its drawn CD.
    rule = layer_rule(extra="anchor = { pitch_nm = 500.0, cd_nm = 250.0 }")
    t_anchor = anchor_threshold_2d(rule.exposure, rule.field, rule.anchor)
    m, *_ = cell_metrics(rule, array_cell(500.0, 500.0, 250.0, 250.0))
    assert m.threshold == t_anchor
    assert abs(m.size_error_x_pct) < 0.05
    assert abs(m.size_error_y_pct) < 0.05
    assert m.dose_to_size == pytest.approx(1.0, abs=2e-3)


def test_exposure_latitude_of_coherent_square_openings():
    # Case of test_coherent_equal_square_openings_match_the_square_wave_product:
    # through the centre along x, I = F_y(0)^2 (1/2 + (2/pi) cos theta)^2,
    # theta = 2 pi x / p; CD = (1 -+ 10 %) p/2 at theta = (pi/2)(1 -+ 0.1), and
    # by symmetry y is the same.  The factor F_y(0)^2 cancels in
    # EL = 100 t_size (1/t_a - 1/t_b) (definition in optics/resist.py), which is
    # the 1-D value 86.4 % (tests/unit/test_image.py).
    p = 320.0
    e = exposure(COHERENT)
    orders = exposure_orders(e, p, p)
    spec = rect_spectrum(orders, np.array([[-p / 4, -p / 4, p / 4, p / 4]]), 1.0, 0.0)
    nx = ny = 256
    img = CoherentSystems2D(Optics.of(e), source_points(e, 0.0), orders).image(spec, nx, ny)
    x, y = image_axes(orders, nx, ny)
    m = evaluate_2d(
        x, y, img, np.array([0.0]), (-p / 4, -p / 4, p / 4, p / 4), True, None, CD_TOL, EL_MIN_PCT
    )
    big = (0.5 + 2 / math.pi) ** 2  # F_y(0)^2
    t_a = big * (0.5 + (2 / math.pi) * math.cos(math.pi / 2 * (1 + CD_TOL))) ** 2  # wider
    t_b = big * (0.5 + (2 / math.pi) * math.cos(math.pi / 2 * (1 - CD_TOL))) ** 2
    t_size = big / 4
    expected = 100.0 * t_size * (1 / t_a - 1 / t_b)
    dt = (img.max() - img.min()) / (THRESHOLD_SAMPLES - 1)  # thresholds over the image range
    resolution = 100.0 * t_size * dt * (1 / t_a**2 + 1 / t_b**2)
    assert abs(m.el_pct - expected) <= resolution
    assert abs(expected - 86.4) < 0.05
    assert m.threshold == pytest.approx(t_size, abs=dt)
    assert not m.merged
    assert not m.missing


def test_merging_through_a_diagonal_neck_is_seen():
    # A printed region joined to its neighbours only across the cell's corners:
    # the centre lines show an isolated feature, the 2-D connectivity does not.
    # Synthetic image (a bright square, plus bright necks along the diagonals).
    p = 200.0
    n = 100
    x = (np.arange(n) - n // 2) * p / n
    xs, ys = np.meshgrid(x, x)
    square = (np.abs(xs) < 50) & (np.abs(ys) < 50)
    neck = np.abs(np.abs(xs) - np.abs(ys)) < 6
    for joined in (False, True):
        img = np.where(square | (neck & joined), 1.0, 0.1)[None, :, :]
        m = evaluate_2d(
            x, x, img, np.array([0.0]), (-50.0, -50.0, 50.0, 50.0), True, 0.5, CD_TOL, EL_MIN_PCT
        )
        assert m.merged is joined
        assert m.size_x_nm == pytest.approx(100.0, abs=p / n)
        assert not m.missing
