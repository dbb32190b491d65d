"""Unit tests for the diffraction orders of 2-D lattices (pitchguard.optics.lattice_orders).

Expected values come from outside the module, each source named beside it:

* reciprocal vectors ``a_i . g_j = delta_ij`` (definition; any solid-state
  or Fourier-optics text);
* the grating equation and the pupil cutoff: an order at ``|f|`` passes
  with the 0th for some point of a disc or ring source down to
  ``|f| = NA (1 + sigma) / lambda`` (Goodman, *Introduction to Fourier
  Optics*; arithmetic), so a square lattice's cutoff is the line cutoff
  ``lambda / (NA (1 + sigma))``;
* the hexagonal lattice's first orders at ``2 / (sqrt(3) a)`` (derived in
  the module's notes, checked here with numbers);
* the 1-D engine's order analysis (``optics.orders.analyse_pitch``) as the
  consistency reference for a lattice direction.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from pitchguard.deck import Exposure
from pitchguard.optics.lattice_orders import lattice_orders, reciprocal, reduce_basis
from pitchguard.optics.orders import analyse_pitch

PRECISION = 1e-9  # relative: closed-form lengths, rounding only
MARGIN = 0.01  # 1 % either side of a cutoff

ARF_NM = 193.0  # common practice
DRY_ARF_NA = 0.93  # common practice: dry ArF tops out near 0.93
SIGMAS = [0.3, 0.5, 0.7, 0.9, 1.0]
DIPOLE_X = {
    "shape": "dipole",
    "sigma_inner": 0.6,
    "sigma_outer": 0.9,
    "opening_deg": 35.0,
    "axis": "x",
}


def exposure(illumination, wavelength_nm=ARF_NM, na=DRY_ARF_NA):
    return Exposure.model_validate(
        {"wavelength_nm": wavelength_nm, "na": na, "illumination": illumination}
    )


def conventional(sigma):
    return exposure({"shape": "conventional", "sigma": sigma})


def line_cutoff(sigma):
    return ARF_NM / (DRY_ARF_NA * (1.0 + sigma))  # Goodman (grating equation): cutoff pitch


def hexagonal(a, turn_deg=0.0):
    """Nearest-neighbour distance ``a``: a1 = a (1, 0), a2 = a (1/2, sqrt 3 / 2), turned."""
    t = math.radians(turn_deg)
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    a1 = rot @ np.array([a, 0.0])
    a2 = rot @ np.array([a / 2, a * math.sqrt(3) / 2])
    return tuple(a1), tuple(a2)


# --------------------------------------------------------------------------- reciprocal vectors


@pytest.mark.parametrize(
    ("a1", "a2"),
    [
        ((100.0, 0.0), (0.0, 140.0)),  # rectangular
        ((90.0, 0.0), (45.0, 77.9)),  # near-hexagonal
        ((120.0, 30.0), (-20.0, 95.0)),  # oblique, turned
    ],
)
def test_reciprocal_vectors_satisfy_the_definition(a1, a2):
    # Definition: a_i . g_j = delta_ij.
    g1, g2 = reciprocal(a1, a2)
    a = np.array([a1, a2])
    g = np.array([g1, g2])
    assert np.max(np.abs(a @ g.T - np.eye(2))) < PRECISION


def test_parallel_lattice_vectors_are_refused():
    with pytest.raises(ValueError, match="parallel"):
        reciprocal((100.0, 0.0), (200.0, 0.0))


def test_reduced_basis_is_the_shortest_and_spans_the_same_lattice():
    # Lagrange-Gauss reduction: r1 a shortest vector, |r1 . r2| <= |r1|^2 / 2, same
    # lattice (u integer with det +-1).  Input: the hexagonal basis made long
    # on purpose (b2 + 5 b1).
    b1 = np.array([1.0, -1.0 / math.sqrt(3)])
    b2 = np.array([0.0, 2.0 / math.sqrt(3)]) + 5 * b1
    r1, r2, u = reduce_basis(b1, b2)
    assert abs(round(np.linalg.det(u))) == 1
    assert np.allclose(u @ np.array([b1, b2]), np.array([r1, r2]), atol=PRECISION)
    assert abs(r1 @ r2) <= 0.5 * (r1 @ r1) + PRECISION
    assert np.linalg.norm(r1) == pytest.approx(2 / math.sqrt(3), rel=PRECISION)
    assert np.linalg.norm(r2) == pytest.approx(2 / math.sqrt(3), rel=PRECISION)


# --------------------------------------------------------------------------- square and rectangular


@pytest.mark.parametrize("sigma", SIGMAS)
def test_square_lattice_cutoff_is_the_line_cutoff(sigma):
    e = conventional(sigma)
    p_cut = line_cutoff(sigma)
    for scale, rank in ((1.0 - MARGIN, 0), (1.0 + MARGIN, 2)):
        p = p_cut * scale
        lo = lattice_orders(e, (p, 0.0), (0.0, p))
        axes = [d for d in lo.first if d.order in ((1, 0), (0, 1))]
        diagonals = [d for d in lo.first if d.order in ((1, 1), (1, -1))]
        assert len(axes) == 2
        assert len(diagonals) == 2
        for d in axes:
            assert d.pitch_nm == pytest.approx(p, rel=PRECISION)
            assert d.cutoff_pitch_nm == pytest.approx(p_cut, rel=PRECISION)
            assert d.resolved is (rank == 2)
            assert d.k1 == pytest.approx(0.5 * p * DRY_ARF_NA / ARF_NM, rel=PRECISION)
        for d in diagonals:
            # Goodman: the diagonal orders sit at sqrt(2) / p, beyond the cutoff here.
            assert d.pitch_nm == pytest.approx(p / math.sqrt(2), rel=PRECISION)
            assert not d.resolved
        assert lo.rank == rank
        assert lo.pitch_min_nm == pytest.approx(p, rel=PRECISION)
        assert lo.k1 == pytest.approx(0.5 * p * DRY_ARF_NA / ARF_NM, rel=PRECISION)
        expected = {(0, 0)} | ({(1, 0), (-1, 0), (0, 1), (0, -1)} if rank else set())
        assert set(lo.orders) == expected


def test_square_lattice_diagonal_orders_pass_from_sqrt2_times_the_cutoff():
    # Goodman: the (1, 1) orders sit at sqrt(2) / p, so they pass for p >= sqrt(2) p_cut.
    sigma = 0.6
    e = conventional(sigma)
    p_diag = math.sqrt(2) * line_cutoff(sigma)
    below = lattice_orders(e, (p_diag * (1 - MARGIN), 0.0), (0.0, p_diag * (1 - MARGIN)))
    above = lattice_orders(e, (p_diag * (1 + MARGIN), 0.0), (0.0, p_diag * (1 + MARGIN)))
    assert (1, 1) not in below.orders
    assert {(1, 1), (-1, -1), (1, -1), (-1, 1)} <= set(above.orders)


def test_rectangular_lattice_resolves_each_direction_on_its_own():
    # Domain notes: a rectangular lattice resolves each direction on its own; with
    # one direction below the cutoff only that direction's orders are missing:
    # the array images as lines (rank 1).
    sigma = 0.5
    e = conventional(sigma)
    p_cut = line_cutoff(sigma)
    px, py = p_cut * (1 - MARGIN), p_cut * 1.3
    lo = lattice_orders(e, (px, 0.0), (0.0, py))
    by_order = {d.order: d for d in lo.first}
    assert not by_order[(1, 0)].resolved
    assert by_order[(0, 1)].resolved
    assert lo.rank == 1
    assert all(m == 0 for m, _ in lo.orders)
    assert (0, 1) in lo.orders


def test_lattice_direction_agrees_with_the_line_analysis():
    # The 1-D engine as reference: an order of a lattice meets the pupil as the
    # first order of lines normal to it (pitch 1/|f|, lines at 90 degrees to f).
    for ill in ({"shape": "annular", "sigma_inner": 0.5, "sigma_outer": 0.8}, DIPOLE_X):
        e = exposure(ill)
        for a1, a2 in (((150.0, 0.0), (0.0, 210.0)), hexagonal(160.0, 20.0)):
            for d in lattice_orders(e, a1, a2).first:
                line = analyse_pitch(e, d.pitch_nm, d.angle_deg - 90.0)
                assert d.resolved == line.resolvable
                assert d.cutoff_pitch_nm == pytest.approx(line.cutoff_pitch_nm, rel=PRECISION)
                assert d.two_beam_fraction == pytest.approx(line.two_beam_fraction, abs=1e-12)
                assert d.k1 == pytest.approx(line.k1, rel=PRECISION)


def test_dipole_on_x_resolves_only_the_x_direction_of_a_square_lattice():
    # Domain notes: a dipole on x images pitch along x and hurts pitch along y.
    # Along x the poles reach 1 + sigma_outer (pole centred on the axis; the
    # textbook cutoff).  Along y the farthest pole point is its inner corner at
    # r = 0.6, phi = 17.5 degrees: reach r sin(phi) + sqrt(1 - r^2 cos^2(phi))
    # (the reach decreases with r there and increases with phi: arithmetic).
    e = exposure(DIPOLE_X)
    phi = math.radians(17.5)
    reach_y = 0.6 * math.sin(phi) + math.sqrt(1 - (0.6 * math.cos(phi)) ** 2)
    cut_x = ARF_NM / (DRY_ARF_NA * 1.9)
    cut_y = ARF_NM / (DRY_ARF_NA * reach_y)
    p = 0.5 * (cut_x + cut_y)
    lo = lattice_orders(e, (p, 0.0), (0.0, p))
    by_order = {d.order: d for d in lo.first}
    assert by_order[(1, 0)].cutoff_pitch_nm == pytest.approx(cut_x, rel=PRECISION)
    assert by_order[(0, 1)].cutoff_pitch_nm == pytest.approx(cut_y, rel=PRECISION)
    assert by_order[(1, 0)].resolved
    assert not by_order[(0, 1)].resolved
    assert lo.rank == 1


def test_coherent_source_two_beam_fraction_is_all_or_nothing():
    # One on-axis point: the first order passes (fraction 1) when |f| <= NA / lambda.
    e = exposure({"shape": "coherent"})
    p_cut = ARF_NM / DRY_ARF_NA
    for scale, expected in ((1 + MARGIN, 1.0), (1 - MARGIN, 0.0)):
        p = p_cut * scale
        d = next(d for d in lattice_orders(e, (p, 0.0), (0.0, p)).first if d.order == (1, 0))
        assert d.two_beam_fraction == expected


# --------------------------------------------------------------------------- hexagonal


@pytest.mark.parametrize("turn_deg", [0.0, 30.0, 90.0, 13.0])
def test_hexagonal_first_orders_sit_at_2_over_sqrt3_a(turn_deg):
    # Module notes (derivation): six first orders at |g| = 2 / (sqrt(3) a), i.e.
    # lattice lines sqrt(3) a / 2 apart, in three directions 60 degrees apart;
    # the next shell (g1 - g2 for this basis) at 2 / a.
    a = 150.0
    lo = lattice_orders(conventional(0.5), *hexagonal(a, turn_deg))
    pitches = sorted(d.pitch_nm for d in lo.first)
    short = math.sqrt(3) * a / 2
    assert pitches[1:] == pytest.approx([short] * 3, rel=PRECISION)
    assert pitches[0] == pytest.approx(a / 2, rel=PRECISION)  # 1 / (2 / a)
    angles = sorted(d.angle_deg for d in lo.first if abs(d.pitch_nm - short) < 1e-6)
    gaps = np.diff(angles + [angles[0] + 180.0])
    assert gaps == pytest.approx([60.0] * 3, abs=1e-9)
    assert lo.pitch_min_nm == pytest.approx(short, rel=PRECISION)


def test_hexagonal_lattice_given_by_a_long_basis_gives_the_same_orders():
    # Any basis of the same lattice (here a2 + 3 a1, and a2 - a1 at 120 degrees).
    a = 170.0
    e = conventional(0.7)
    a1, a2 = hexagonal(a)
    ref = sorted(round(d.pitch_nm, 9) for d in lattice_orders(e, a1, a2).first)
    for b2 in (tuple(np.add(a2, np.multiply(3, a1))), tuple(np.subtract(a2, a1))):
        got = sorted(round(d.pitch_nm, 9) for d in lattice_orders(e, a1, b2).first)
        assert got == ref


@pytest.mark.parametrize("sigma", SIGMAS)
def test_hexagonal_lattice_cutoff(sigma):
    # Module notes: first orders at 2 / (sqrt(3) a) pass up to NA (1 + sigma) / lambda,
    # so the lattice images down to a = 2 lambda / (sqrt(3) NA (1 + sigma)); below it
    # no order passes (the next shell is farther out), and above it all six pass.
    e = conventional(sigma)
    a_cut = 2 * line_cutoff(sigma) / math.sqrt(3)
    below = lattice_orders(e, *hexagonal(a_cut * (1 - MARGIN)))
    above = lattice_orders(e, *hexagonal(a_cut * (1 + MARGIN)))
    assert below.rank == 0
    assert below.orders == ((0, 0),)
    assert above.rank == 2
    assert len(above.orders) == 7  # the 0th and the six first orders
    short = [d for d in above.first if d.resolved]
    assert len(short) == 3
    for d in short:
        assert d.cutoff_pitch_nm == pytest.approx(line_cutoff(sigma), rel=PRECISION)
        assert d.k1 == pytest.approx(
            0.5 * (math.sqrt(3) * a_cut * (1 + MARGIN) / 2) * DRY_ARF_NA / ARF_NM, rel=PRECISION
        )
