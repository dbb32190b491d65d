"""Vector imaging: the electric field of each plane wave in the medium the image forms in.

Thin mask, as everywhere here: the mask keeps the illumination's polarisation,
so every diffraction order of a source point leaves the mask with that point's
Jones vector ``e = (e_x, e_y)`` (pupil coordinates, in the image frame).  The
lens maps an order reaching the pupil at frequency ``f = (f_x, f_y)`` onto a
plane wave at angle ``theta`` in the image medium of index ``n_r`` (spatial
frequency is kept across interfaces: ``sin theta = |f| lambda / n_r``) and
azimuth ``phi``.  Split ``e`` into its part along ``s = (-sin phi, cos phi,
0)`` (TE, perpendicular to the plane of incidence; kept as it is) and along
``p_in = (cos phi, sin phi, 0)`` (TM), which the lens turns into ``p =
(cos theta cos phi, cos theta sin phi, -sin theta)``:

``E(f) = (e . s) s + (e . p_in) p``.

The image is ``sum_states sum_{x, y, z} |sum_n c_n P(f_n + s) E_j(f_n + s)
exp(i 2 pi f_n . r)|^2``: each source point, state and field component is one
row of the Hopkins amplitude matrix, so the TCC and its coherent systems are
built as for scalar light.  Left out (the docs say so): reflections and
refraction losses in the film stack (Fresnel coefficients), the lens's
radiometric factor, and the mask's own polarisation effects (thick mask).
With these out, ``|E| = |e|``: an open frame still images to 1.

Two symmetric beams at ``+-theta`` interfere with full contrast when ``e`` is
TE and with contrast times ``cos 2 theta`` when it is TM; unpolarised light is
the mean of the two (standard two-beam interference, e.g. Born & Wolf).
"""

from __future__ import annotations

import math

import numpy as np

POLARIZATIONS = ("unpolarized", "x", "y", "tangential", "radial", "scalar")
"""``polarization`` values of an exposure.  ``x``/``y``: the electric field's
direction in the pupil, in layout axes; ``tangential``: TE for every source point
(the field across the source point's radius); ``radial``: along it;
``unpolarized``: the mean of two orthogonal states; ``scalar``: the scalar
model (no field components), for comparison with textbook values."""

CENTRE = 1e-9
"""Source points nearer the pupil centre than this (sigma) have no radius: tangential
and radial light there is taken as unpolarised."""


def is_scalar(polarization: str) -> bool:
    return polarization == "scalar"


def turns_with_frame(polarization: str) -> bool:
    """True when the light looks different in a turned frame: a fixed linear direction."""
    return polarization in ("x", "y")


def mirror_symmetric(polarization: str, angle_deg: float) -> bool:
    """True when mirroring the frame about its x axis (the pitch axis) maps the set of
    states onto itself, so source points ``(sx, sy)`` and ``(sx, -sy)`` image alike
    (:func:`pitchguard.optics.aerial.merge_mirrored`)."""
    if not turns_with_frame(polarization):
        return True
    # A linear direction at psi in the frame mirrors to -psi: the same state when
    # psi is a multiple of 90 degrees (a sign is a global phase).
    psi = (-angle_deg if polarization == "x" else 90.0 - angle_deg) % 90.0
    return min(psi, 90.0 - psi) < 1e-9


def jones_states(
    polarization: str, pts: np.ndarray, angle_deg: float
) -> tuple[np.ndarray, np.ndarray]:
    """``(jones, weights)``: unit Jones vectors ``(R, S, 2)`` in the frame turned by
    ``angle_deg`` (the frame's x axis is the layout's direction at ``angle_deg``)
    and the weight of each state ``(R, S)`` (summing to 1 per source point)."""
    s = len(pts)
    if polarization in ("x", "y"):
        psi = math.radians((0.0 if polarization == "x" else 90.0) - angle_deg)
        jones = np.broadcast_to(np.array([math.cos(psi), math.sin(psi)]), (1, s, 2)).copy()
        return jones, np.ones((1, s))
    both = np.zeros((2, s, 2))
    both[0, :, 0] = 1.0
    both[1, :, 1] = 1.0
    if polarization == "unpolarized":
        return both, np.full((2, s), 0.5)
    r = np.hypot(pts[:, 0], pts[:, 1])
    centre = r < CENTRE
    safe = np.where(centre, 1.0, r)
    radial = np.stack([pts[:, 0] / safe, pts[:, 1] / safe], axis=1)
    own = radial if polarization == "radial" else np.stack([-radial[:, 1], radial[:, 0]], axis=1)
    if not centre.any():
        return own[None], np.ones((1, s))
    jones = both.copy()
    jones[0, ~centre] = own[~centre]
    weights = np.where(centre, 0.5, np.stack([np.ones(s), np.zeros(s)]))
    return jones, weights


def field_factors(
    fx: np.ndarray,
    fy: np.ndarray,
    jones: np.ndarray,
    weights: np.ndarray,
    wavelength_nm: float,
    index: float,
) -> np.ndarray:
    """``(R * 3, ...)`` real factors: the x, y and z field of each state's plane wave
    at pupil frequencies ``(fx, fy)`` (1/nm, shape ``(S, ...)``, first axis the
    source points), times the square root of the state's weight.

    ``jones`` ``(R, S, 2)`` and ``weights`` ``(R, S)`` from :func:`jones_states`;
    ``index`` is the image medium's.  Summed over rows, the squares of one
    source point's factors at one frequency are 1 (``|E| = |e|``).
    """
    extra = (None,) * (np.ndim(fx) - 1)
    f = np.hypot(fx, fy)
    on_axis = f == 0.0
    safe = np.where(on_axis, 1.0, f)
    cos_phi = np.where(on_axis, 1.0, fx / safe)
    sin_phi = np.where(on_axis, 0.0, fy / safe)
    sin_t = np.minimum(f * (wavelength_nm / index), 1.0)
    cos_t = np.sqrt(1.0 - sin_t * sin_t)
    ex = jones[:, :, 0][(...,) + extra]
    ey = jones[:, :, 1][(...,) + extra]
    root = np.sqrt(weights)[(...,) + extra]
    te = (-ex * sin_phi + ey * cos_phi) * root
    tm = (ex * cos_phi + ey * sin_phi) * root
    out = np.stack(
        [
            -te * sin_phi + tm * cos_t * cos_phi,
            te * cos_phi + tm * cos_t * sin_phi,
            -tm * sin_t,
        ],
        axis=1,
    )  # (R, 3, S, ...)
    return out.reshape((-1,) + out.shape[2:])


def image_index(optics) -> float:
    """The index of the medium the image forms in: the resist's when given, else the
    immersion medium's."""
    return optics.image_index or optics.n_medium
