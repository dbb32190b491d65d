"""Unit tests for diffraction orders, cutoff pitch and k1 (pitchguard.optics.orders).

Every expected value is computed here from a closed-form result of scalar
grating optics, with its source named beside it:

* order n of pitch p sits at spatial frequency n/p; the lens passes
  |f| <= NA/lambda; a source point at sigma shifts every order by
  sigma NA/lambda (grating equation and pupil cutoff, any Fourier-optics text,
  e.g. Goodman, Introduction to Fourier Optics);
* cutoff pitch lambda / (NA (1 + reach)), reach being how far the source
  extends along the pitch direction (Goodman, Fourier optics; arithmetic from the above);
* k1 = (p/2) NA / lambda (half-pitch form of the process factor: common practice);
* plane geometry and calculus for how far ring sectors (dipole and quadrupole
  poles) reach, and for the area of the intersection of two discs.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from pitchguard.deck import Exposure
from pitchguard.optics.orders import analyse_pitch, cutoff_pitch, pitch_direction

PRECISION = 1e-9  # relative: closed-form quantities the code computes exactly
REACH_PRECISION = 1e-3  # relative: sector reach found from a boundary sampled every 0.25 deg
FRACTION_TOL = 0.005  # absolute: source fractions come from a 0.02-sigma grid
MARGIN = 0.01  # 1 % either side of a cutoff: far beyond any sampling error

# Wavelengths and NAs of real scanner families (common practice).
ARF_NM = 193.0
KRF_NM = 248.0
I_LINE_NM = 365.0
EUV_NM = 13.5
DRY_ARF_NA = 0.93
IMMERSION_NA = 1.35
WATER_INDEX = 1.44  # water at 193 nm (common practice)


def exposure(illumination: dict, wavelength_nm=ARF_NM, na=DRY_ARF_NA, index=1.0) -> Exposure:
    return Exposure.model_validate(
        {
            "wavelength_nm": wavelength_nm,
            "na": na,
            "immersion_index": index,
            "illumination": illumination,
        }
    )


COHERENT = {"shape": "coherent"}
CONVENTIONAL_07 = {"shape": "conventional", "sigma": 0.7}
ANNULAR_05_08 = {"shape": "annular", "sigma_inner": 0.5, "sigma_outer": 0.8}


def dipole(opening_deg: float, axis: str = "x", inner: float = 0.6, outer: float = 0.9) -> dict:
    return {
        "shape": "dipole",
        "sigma_inner": inner,
        "sigma_outer": outer,
        "opening_deg": opening_deg,
        "axis": axis,
    }


def quadrupole(opening_deg: float, inner: float = 0.6, outer: float = 0.9, **extra) -> dict:
    return {
        "shape": "quadrupole",
        "sigma_inner": inner,
        "sigma_outer": outer,
        "opening_deg": opening_deg,
        **extra,
    }


def cutoff_formula(wavelength_nm: float, na: float, reach: float) -> float:
    """lambda / (NA (1 + reach)): Goodman, Fourier optics, from the grating equation."""
    return wavelength_nm / (na * (1.0 + reach))


# --------------------------------------------------------------------------- (a) orders on axis


@pytest.mark.parametrize("orientation_deg", [0.0, 90.0, 45.0])
def test_250nm_pitch_at_193nm_na093_passes_orders_0_and_pm1_on_axis(orientation_deg):
    # Common practice: dry ArF, 250 nm pitch -> p NA / lambda = 1.205, so an
    # on-axis (coherent) beam passes orders 0 and +-1 and no second order.
    res = analyse_pitch(exposure(COHERENT), 250.0, orientation_deg)
    assert res.orders_on_axis == (-1, 0, 1)
    assert res.orders == (-1, 0, 1)  # coherent: the on-axis point is the whole source
    assert res.resolvable


@pytest.mark.parametrize(
    ("pitch_nm", "n_max"),
    [
        (150.0, 0),  # p NA / lambda = 0.72 < 1: only the 0th order
        (250.0, 1),  # 1.20
        (450.0, 2),  # 2.17
        (700.0, 3),  # 3.37
    ],
)
def test_orders_on_axis_are_floor_of_p_na_over_lambda(pitch_nm, n_max):
    # Grating equation: |n| <= p NA / lambda on axis (Goodman, Fourier optics);
    # p NA / lambda per row: arithmetic.
    res = analyse_pitch(exposure(CONVENTIONAL_07), pitch_nm, 90.0)
    assert res.orders_on_axis == tuple(range(-n_max, n_max + 1))


# --------------------------------------------------------------------------- (b) cutoff pitch


@pytest.mark.parametrize(
    ("illumination", "reach"),
    [
        (CONVENTIONAL_07, 0.7),  # disc: reach = sigma in every direction
        ({"shape": "conventional", "sigma": 1.0}, 1.0),  # full disc: lambda / (2 NA)
        (ANNULAR_05_08, 0.8),  # ring: reach = sigma_outer in every direction
        ({"shape": "annular", "sigma_inner": 0.0, "sigma_outer": 0.3}, 0.3),  # ring from centre
    ],
)
@pytest.mark.parametrize("orientation_deg", [0.0, 90.0, 45.0, 30.0, 137.0])
def test_cutoff_pitch_of_round_sources(illumination, reach, orientation_deg):
    # Goodman, Fourier optics (arithmetic): p_min = lambda / (NA (1 + sigma_max)).
    exp = exposure(illumination)
    p_cut = cutoff_formula(ARF_NM, DRY_ARF_NA, reach)
    assert exp.cutoff_pitch_nm == pytest.approx(p_cut, rel=PRECISION)
    assert cutoff_pitch(exp, orientation_deg) == pytest.approx(p_cut, rel=PRECISION)
    below = analyse_pitch(exp, p_cut * (1.0 - MARGIN), orientation_deg)
    above = analyse_pitch(exp, p_cut * (1.0 + MARGIN), orientation_deg)
    assert not below.resolvable
    assert below.two_beam_fraction == 0.0
    assert 0 in below.orders
    assert 1 not in below.orders
    assert -1 not in below.orders
    assert above.resolvable
    assert above.two_beam_fraction > 0.0
    assert above.cutoff_pitch_nm == pytest.approx(p_cut, rel=PRECISION)


# --------------------------------------------------------------------------- (c) k1


@pytest.mark.parametrize(
    ("wavelength_nm", "na", "index", "pitch_nm", "k1"),
    [
        (ARF_NM, IMMERSION_NA, WATER_INDEX, 100.0, 0.3497409326),  # 50 * 1.35 / 193 (arithmetic)
        (ARF_NM, DRY_ARF_NA, 1.0, 250.0, 0.6023316062),  # 125 * 0.93 / 193 (arithmetic)
        (KRF_NM, 0.8, 1.0, 310.0, 0.5),  # 155 * 0.8 / 248 (arithmetic)
        (EUV_NM, 0.33, 1.0, 32.0, 0.3911111111),  # 16 * 0.33 / 13.5 (arithmetic)
    ],
)
def test_k1_is_half_pitch_times_na_over_lambda(wavelength_nm, na, index, pitch_nm, k1):
    # Common practice (half-pitch form of the process factor): k1 = (p / 2) NA / lambda.
    exp = exposure(CONVENTIONAL_07, wavelength_nm, na, index)
    assert analyse_pitch(exp, pitch_nm, 90.0).k1 == pytest.approx(k1, rel=1e-9)


def test_k1_quarter_at_193nm_na135_is_a_35_7nm_half_pitch():
    # Arithmetic from k1 = (p/2) NA / lambda: k1 = 0.25 at 193 nm / NA 1.35 is half pitch 35.7 nm.
    half_pitch_nm = 0.25 * ARF_NM / IMMERSION_NA  # 35.74 nm
    exp = exposure({"shape": "conventional", "sigma": 1.0}, ARF_NM, IMMERSION_NA, WATER_INDEX)
    res = analyse_pitch(exp, 2.0 * half_pitch_nm, 90.0)
    assert res.k1 == pytest.approx(0.25, rel=PRECISION)
    # k1 = 0.25 is the single-exposure floor: it is the cutoff of a sigma = 1 source.
    assert res.cutoff_pitch_nm == pytest.approx(2.0 * half_pitch_nm, rel=PRECISION)
    assert analyse_pitch(exp, 2.0 * half_pitch_nm * (1.0 + MARGIN), 90.0).resolvable
    assert not analyse_pitch(exp, 2.0 * half_pitch_nm * (1.0 - MARGIN), 90.0).resolvable


# --------------------------------------------------------------------------- (d) dipole


def sector_reach_2d(inner: float, outer: float, theta_max_deg: float) -> float:
    """Largest first-order shift q (units of NA/lambda) a ring sector can still image.

    Pitch along y; the sector spans angles up to ``theta_max_deg`` (0..90) from
    the x axis.  From the pupil condition (Goodman, Fourier optics), a source point
    (r cos t, r sin t) passes the 0th order and the order shifted by -q along y
    iff (r sin t - q)^2 + (r cos t)^2 <= 1, i.e. q <= f(r, t) = r sin t +
    sqrt(1 - r^2 cos^2 t).  f grows with t on (0, 90 deg), and is concave in r
    with its peak at r = tan t (calculus), so the maximum over the sector is
    f(clip(tan t_max, inner, outer), t_max).  With the pole on the pitch axis
    (t_max = 90 deg) this is 1 + outer, the familiar lambda / (NA (1 + sigma)).
    """
    t = math.radians(theta_max_deg)
    if abs(math.cos(t)) < 1e-15:
        return 1.0 + outer
    r = min(max(math.tan(t), inner), outer)
    return r * math.sin(t) + math.sqrt(1.0 - (r * math.cos(t)) ** 2)


@pytest.mark.parametrize(
    ("inner", "outer", "theta_max_deg"),
    [
        (0.6, 0.9, 10.0),  # narrow x-dipole pole, maximum at the inner corner
        (0.6, 0.9, 45.0),  # wide pole, maximum on the pole edge between the corners
        (0.6, 0.9, 60.0),  # quadrupole pole at 45 +- 15 deg, maximum at the outer corner
        (0.0, 0.7, 90.0),  # a disc: 1 + sigma
    ],
)
def test_sector_reach_helper_agrees_with_brute_force(inner, outer, theta_max_deg):
    # Check of the test helper itself: a dense scan of the same pupil condition.
    r = np.linspace(inner, outer, 401)[:, None]
    t = np.radians(np.linspace(0.0, theta_max_deg, 401))[None, :]
    f = r * np.sin(t) + np.sqrt(np.clip(1.0 - (r * np.cos(t)) ** 2, 0.0, None))
    assert sector_reach_2d(inner, outer, theta_max_deg) == pytest.approx(f.max(), rel=1e-4)


@pytest.mark.parametrize(
    "opening_deg",
    [
        20.0,  # narrow poles: y-extent 0.9 sin 10 deg = 0.156
        40.0,  # y-extent 0.9 sin 20 deg = 0.308
        90.0,  # y-extent 0.9 sin 45 deg = 0.636
    ],
)
def test_dipole_on_x_images_vertical_lines_not_horizontal(opening_deg):
    # Pupil condition (Goodman, Fourier optics): a dipole on x images vertical
    # lines (pitch along x) and hurts horizontal ones.
    outer = 0.9
    exp = exposure(dipole(opening_deg, "x", outer=outer))
    # Vertical lines: the poles sit on the pitch axis, reach sigma_outer.
    p_vertical = cutoff_formula(ARF_NM, DRY_ARF_NA, outer)
    assert cutoff_pitch(exp, 90.0) == pytest.approx(p_vertical, rel=REACH_PRECISION)
    # Horizontal lines: a pole reaches only sigma_outer sin(opening / 2) along y
    # (geometry), so lambda / (NA (1 + y-extent)) bounds the cutoff from below:
    # no source point can shift the first order further than that.
    # y-extent < outer for any opening below 180 deg, so this bound is the larger.
    y_extent = outer * math.sin(math.radians(opening_deg / 2))
    p_horizontal_bound = cutoff_formula(ARF_NM, DRY_ARF_NA, y_extent)
    between = math.sqrt(p_vertical * p_horizontal_bound)  # between the two
    vertical = analyse_pitch(exp, between, 90.0)
    horizontal = analyse_pitch(exp, between, 0.0)
    assert vertical.resolvable
    assert vertical.two_beam_fraction > 0.0
    assert not horizontal.resolvable
    assert horizontal.two_beam_fraction == 0.0
    assert cutoff_pitch(exp, 0.0) >= p_horizontal_bound * (1.0 - REACH_PRECISION)


# Dipole / quadrupole cases whose farthest pole point along the pitch sits off the
# pitch axis.  Each row: illumination, line orientation, largest pole angle from
# the line direction (deg) used by sector_reach_2d.
OFF_AXIS_POLES = [
    pytest.param(dipole(20.0, "x"), 0.0, 10.0, id="x-dipole-20deg-horizontal-lines"),
    pytest.param(dipole(40.0, "x"), 0.0, 20.0, id="x-dipole-40deg-horizontal-lines"),
    pytest.param(dipole(90.0, "x"), 0.0, 45.0, id="x-dipole-90deg-horizontal-lines"),
    pytest.param(dipole(40.0, "y"), 90.0, 20.0, id="y-dipole-40deg-vertical-lines"),
    pytest.param(quadrupole(30.0), 0.0, 60.0, id="quadrupole-45-30deg-horizontal-lines"),
    pytest.param(quadrupole(30.0), 90.0, 60.0, id="quadrupole-45-30deg-vertical-lines"),
]


@pytest.mark.parametrize(("illumination", "orientation_deg", "theta_max_deg"), OFF_AXIS_POLES)
def test_off_axis_poles_resolve_from_the_2d_pupil_cutoff(
    illumination, orientation_deg, theta_max_deg
):
    # Pupil condition (Goodman, Fourier optics), maximised over the pole (sector_reach_2d).
    exp = exposure(illumination)
    ill = exp.illumination
    q_max = sector_reach_2d(ill.sigma_inner, ill.sigma_outer, theta_max_deg)
    p_cut = ARF_NM / (DRY_ARF_NA * q_max)
    assert not analyse_pitch(exp, p_cut * (1.0 - MARGIN), orientation_deg).resolvable
    assert analyse_pitch(exp, p_cut * (1.0 + MARGIN), orientation_deg).resolvable


@pytest.mark.parametrize(("illumination", "orientation_deg", "theta_max_deg"), OFF_AXIS_POLES)
def test_cutoff_pitch_of_off_axis_poles_is_the_2d_pupil_cutoff(
    illumination, orientation_deg, theta_max_deg
):
    exp = exposure(illumination)
    ill = exp.illumination
    q_max = sector_reach_2d(ill.sigma_inner, ill.sigma_outer, theta_max_deg)
    p_cut = ARF_NM / (DRY_ARF_NA * q_max)
    assert cutoff_pitch(exp, orientation_deg) == pytest.approx(p_cut, rel=REACH_PRECISION)
    res = analyse_pitch(exp, p_cut * (1.0 + MARGIN / 2), orientation_deg)
    assert res.cutoff_pitch_nm <= p_cut * (1.0 + MARGIN / 2)  # consistent with `resolvable`


def test_dipole_on_y_is_the_dipole_on_x_turned_by_90_degrees():
    # Symmetry: turning source and lines together by 90 degrees changes nothing.
    on_x = exposure(dipole(40.0, "x"))
    on_y = exposure(dipole(40.0, "y"))
    for orientation in (0.0, 30.0, 90.0):
        turned = (orientation + 90.0) % 180.0
        assert cutoff_pitch(on_y, orientation) == pytest.approx(
            cutoff_pitch(on_x, turned), rel=PRECISION
        )
        for pitch in (130.0, 170.0, 210.0, 250.0):
            assert (
                analyse_pitch(on_y, pitch, orientation).resolvable
                == analyse_pitch(on_x, pitch, turned).resolvable
            )


# --------------------------------------------------------------------------- (e) quadrupole


@pytest.mark.parametrize(
    "opening_deg",
    [
        20.0,  # poles span 35..55 deg
        30.0,  # poles span 30..60 deg
        60.0,  # poles span 15..75 deg
    ],
)
def test_quadrupole_default_rotation_serves_x_and_y_lines_alike(opening_deg):
    outer = 0.9
    exp = exposure(quadrupole(opening_deg, outer=outer))  # rotation_deg left out: 45
    assert exp.illumination.rotation_deg == 45.0
    # Mirror symmetry of the source about the 45 deg diagonal.
    assert cutoff_pitch(exp, 0.0) == pytest.approx(cutoff_pitch(exp, 90.0), rel=PRECISION)
    for pitch in np.linspace(100.0, 160.0, 13):
        x_lines = analyse_pitch(exp, float(pitch), 0.0)
        y_lines = analyse_pitch(exp, float(pitch), 90.0)
        assert x_lines.resolvable == y_lines.resolvable
        assert x_lines.two_beam_fraction == pytest.approx(y_lines.two_beam_fraction, abs=1e-12)
    # Diagonal lines (pitch along a pole centre) get the full sigma_outer.
    assert cutoff_pitch(exp, 135.0) == pytest.approx(
        cutoff_formula(ARF_NM, DRY_ARF_NA, outer), rel=REACH_PRECISION
    )
    # Rotated to 0 the poles sit on the axes: x and y lines get the full sigma_outer.
    on_axes = exposure(quadrupole(opening_deg, outer=outer, rotation_deg=0.0))
    for orientation in (0.0, 90.0):
        assert cutoff_pitch(on_axes, orientation) == pytest.approx(
            cutoff_formula(ARF_NM, DRY_ARF_NA, outer), rel=REACH_PRECISION
        )


# --------------------------------------------------------------------------- (f) coherent


@pytest.mark.parametrize(
    ("wavelength_nm", "na", "index"),
    [
        (ARF_NM, DRY_ARF_NA, 1.0),  # dry ArF (common practice)
        (ARF_NM, IMMERSION_NA, WATER_INDEX),  # water immersion ArF (common practice)
        (KRF_NM, 0.8, 1.0),  # KrF (common practice)
        (I_LINE_NM, 0.6, 1.0),  # i-line (common practice)
        (EUV_NM, 0.33, 1.0),  # EUV NA 0.33 (common practice)
    ],
)
@pytest.mark.parametrize(
    ("factor", "resolvable"),
    [
        (0.5, False),  # far below lambda/NA
        (0.999, False),  # just below
        (1.0, True),  # exactly lambda/NA: the first order sits on the pupil edge
        (1.001, True),  # just above
        (3.0, True),  # far above
    ],
)
def test_coherent_source_resolves_iff_pitch_at_least_lambda_over_na(
    wavelength_nm, na, index, factor, resolvable
):
    # Grating equation (Goodman, Fourier optics): on axis the first order passes iff
    # 1/p <= NA/lambda.
    exp = exposure(COHERENT, wavelength_nm, na, index)
    lam_na = wavelength_nm / na
    res = analyse_pitch(exp, factor * lam_na, 90.0)
    assert res.resolvable is resolvable
    assert res.cutoff_pitch_nm == pytest.approx(lam_na, rel=PRECISION)
    assert res.two_beam_fraction == (1.0 if resolvable else 0.0)


# --------------------------------------------------------------------------- (g) source fraction

SWEEP_PITCHES_NM = np.linspace(100.0, 500.0, 41)  # 10 nm steps through the cutoff region
ALL_SOURCES = [
    COHERENT,
    CONVENTIONAL_07,
    ANNULAR_05_08,
    dipole(40.0, "x"),
    quadrupole(30.0),
    quadrupole(30.0, rotation_deg=0.0),
]


@pytest.mark.parametrize("illumination", ALL_SOURCES, ids=lambda d: d["shape"])
@pytest.mark.parametrize("orientation_deg", [0.0, 90.0, 45.0])
def test_two_beam_fraction_is_a_fraction(illumination, orientation_deg):
    exp = exposure(illumination)
    for pitch in SWEEP_PITCHES_NM:
        res = analyse_pitch(exp, float(pitch), orientation_deg)
        assert 0.0 <= res.two_beam_fraction <= 1.0
        # A positive fraction means some source point sends the two beams.
        if res.two_beam_fraction > 0.0:
            assert res.resolvable


@pytest.mark.parametrize(
    ("wavelength_nm", "na"),
    [
        (ARF_NM, DRY_ARF_NA),  # lambda/NA = 207.5 nm
        (KRF_NM, 0.8),  # lambda/NA = 310 nm
    ],
)
def test_two_beam_fraction_of_coherent_source_is_one_from_lambda_over_na(wavelength_nm, na):
    exp = exposure(COHERENT, wavelength_nm, na)
    for pitch in SWEEP_PITCHES_NM * 2.0:
        res = analyse_pitch(exp, float(pitch), 90.0)
        expected = 1.0 if pitch * na / wavelength_nm >= 1.0 else 0.0
        assert res.two_beam_fraction == expected


@pytest.mark.parametrize("sigma", [0.3, 0.5, 0.7, 1.0])
def test_two_beam_fraction_grows_with_pitch_for_a_conventional_source(sigma):
    # Geometry: for a source point s, |s -+ q e| <= 1 holds for every q below a
    # threshold, so the set of points sending two beams only grows as the
    # first-order shift q = lambda / (p NA) shrinks.
    exp = exposure({"shape": "conventional", "sigma": sigma})
    fractions = [analyse_pitch(exp, float(p), 90.0).two_beam_fraction for p in SWEEP_PITCHES_NM]
    assert all(b >= a for a, b in zip(fractions[:-1], fractions[1:], strict=True))
    assert fractions[0] == 0.0  # 100 nm is below lambda / (NA (1 + sigma)) for sigma <= 1
    # Every point passes both beams iff the worst point (0, sigma) does: q^2 + sigma^2 <= 1.
    q_last = ARF_NM / (SWEEP_PITCHES_NM[-1] * DRY_ARF_NA)  # 0.415
    if q_last**2 + sigma**2 <= 1.0:
        assert fractions[-1] == 1.0
    else:
        assert 0.5 < fractions[-1] < 1.0
    assert len(set(fractions)) > 3  # it grows through several values, not one step


def _disc_overlap_area(r: float, big_r: float, d: float) -> float:
    """Area shared by discs of radii r and R whose centres are d apart.

    Plane geometry (circle-circle intersection area; e.g. Weisstein, MathWorld,
    "Circle-Circle Intersection").
    """
    if d >= r + big_r:
        return 0.0
    if d <= abs(big_r - r):
        return math.pi * min(r, big_r) ** 2
    a = r * r * math.acos((d * d + r * r - big_r * big_r) / (2 * d * r))
    b = big_r * big_r * math.acos((d * d + big_r * big_r - r * r) / (2 * d * big_r))
    c = 0.5 * math.sqrt((-d + r + big_r) * (d + r - big_r) * (d - r + big_r) * (d + r + big_r))
    return a + b - c


@pytest.mark.parametrize(
    ("sigma", "q"),
    [
        (0.5, 1.0),  # first order on the pupil edge for the on-axis point
        (0.5, 1.2),
        (0.5, 1.3),  # a quarter of the source left: nearing the cutoff q = 1 + sigma
        (0.8, 1.1),
        (0.8, 1.5),
        (1.0, 1.05),
        (1.0, 1.5),
        (1.0, 1.9),
    ],
)
def test_two_beam_fraction_of_a_disc_matches_the_lens_area(sigma, q):
    # With q >= 1 the pupil copies centred at +-q (NA/lambda units) do not overlap,
    # so the two-beam part of a disc source of radius sigma is two disc-disc lenses.
    exp = exposure({"shape": "conventional", "sigma": sigma})
    pitch = ARF_NM / (DRY_ARF_NA * q)
    expected = 2.0 * _disc_overlap_area(sigma, 1.0, q) / (math.pi * sigma**2)
    res = analyse_pitch(exp, pitch, 90.0)
    assert res.two_beam_fraction == pytest.approx(expected, abs=FRACTION_TOL)


# --------------------------------------------------------------------------- conventions


@pytest.mark.parametrize(
    ("orientation_deg", "expected"),
    [
        (0.0, (0.0, 1.0)),  # lines along x: pitch along y
        (90.0, (-1.0, 0.0)),  # lines along y: pitch along x (sign is immaterial)
        (45.0, (-math.sqrt(0.5), math.sqrt(0.5))),
    ],
)
def test_pitch_direction_is_perpendicular_to_the_lines(orientation_deg, expected):
    assert pitch_direction(orientation_deg) == pytest.approx(expected, abs=1e-12)


def test_infinite_pitch_is_an_isolated_edge_and_resolvable():
    res = analyse_pitch(exposure(ANNULAR_05_08), math.inf, 0.0)
    assert res.resolvable
    assert res.orders == (0,)
