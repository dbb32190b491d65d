"""`pitchguard probe --pitch-y/--cd-y`: an array of compact features, checked
against an independent 2-D imaging written here from its definition.

The reference rasterises one unit cell (0.5 nm pixels, the rectangle's edges
on pixel boundaries), takes its Fourier coefficients with an FFT, samples
the source on its own fine grid (0.01 sigma, centre-in-shape) and sums, per
source point, the coherent image of the orders the circular pupil passes
(Abbe's method: any Fourier-optics text).  Scalar, thin mask, best focus,
open frame = 1, the same conventions as the tool.  The tool's values must
agree within: contrast 0.01, NILS 5 %, intensity 0.02 of the open frame.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from pitchguard.cli import main

CASES = {
    # name: (exposure TOML, field, pitch x, pitch y, cd x, cd y) -- nm
    "holes, annular, att. PSM": (
        'wavelength_nm = 193.0\nna = 0.93\nillumination = { shape = "annular", '
        'sigma_inner = 0.5, sigma_outer = 0.8 }\nmask = { kind = "attenuated", transmission = 0.06 }',
        "dark",
        160.0,
        200.0,
        80.0,
        80.0,
    ),
    "posts, conventional, binary": (
        'wavelength_nm = 248.0\nna = 0.8\nillumination = { shape = "conventional", sigma = 0.5 }',
        "clear",
        300.0,
        300.0,
        150.0,
        120.0,
    ),
    "holes, quadrupole, binary": (
        'wavelength_nm = 193.0\nna = 0.85\nillumination = { shape = "quadrupole", '
        "sigma_inner = 0.6, sigma_outer = 0.9, opening_deg = 30.0 }",
        "dark",
        180.0,
        180.0,
        90.0,
        90.0,
    ),
}


def _in_source(shape: str, sx, sy, params: dict) -> np.ndarray:
    r = np.hypot(sx, sy)
    if shape == "conventional":
        return r <= params["sigma"]
    ring = (r >= params["sigma_inner"]) & (r <= params["sigma_outer"])
    if shape == "annular":
        return ring
    # Quadrupole, poles on the diagonals: within opening/2 of 45 + k 90 degrees.
    ang = np.degrees(np.arctan2(sy, sx)) % 90.0
    return ring & (np.abs(ang - 45.0) <= params["opening_deg"] / 2)


def _reference(wl, na, shape, params, mask_t, field, px, py, wx, wy, x, y):
    """Abbe image at points (x, y) of a px x py cell holding a wx x wy rectangle."""
    step = 0.5
    nx, ny = int(round(px / step)), int(round(py / step))
    xs = (np.arange(nx) + 0.5) * step - px / 2
    ys = (np.arange(ny) + 0.5) * step - py / 2
    inside = (np.abs(ys)[:, None] < wy / 2) & (np.abs(xs)[None, :] < wx / 2)
    bg = -math.sqrt(mask_t) if mask_t else 0.0
    feat, back = (1.0, bg) if field == "dark" else (bg, 1.0)
    amp = np.where(inside, feat, back)
    # Coefficients c_mn with the cell origin at its centre: shift the pixel grid.
    coef = np.fft.fft2(np.fft.ifftshift(amp)) / (nx * ny)
    m = np.fft.fftfreq(nx, d=1.0 / nx)
    n = np.fft.fftfreq(ny, d=1.0 / ny)
    keep_m = np.abs(m) <= 2 * na / wl * px + 1
    keep_n = np.abs(n) <= 2 * na / wl * py + 1
    mm, nn = np.meshgrid(m[keep_m], n[keep_n])
    c = coef[np.ix_(keep_n, keep_m)].ravel()
    fx, fy = (mm / px).ravel(), (nn / py).ravel()
    g = np.arange(-1.0, 1.0 + 1e-9, 0.01)
    sx, sy = (v.ravel() for v in np.meshgrid(g, g))
    on = _in_source(shape, sx, sy, params)
    sx, sy = sx[on] * na / wl, sy[on] * na / wl
    phase = np.exp(2j * np.pi * (fx[:, None] * x[None, :] + fy[:, None] * y[None, :]))
    out = np.zeros(len(x))
    for a, b in zip(sx, sy, strict=True):
        passed = (fx + a) ** 2 + (fy + b) ** 2 <= (na / wl) ** 2
        f = c[passed] @ phase[passed]
        out += np.abs(f) ** 2
    return out / len(sx)


@pytest.mark.slow
@pytest.mark.parametrize("name", sorted(CASES))
def test_array_probe_agrees_with_an_independent_abbe_sum(name, tmp_path, capsys):
    expo, field, px, py, wx, wy = CASES[name]
    deck = tmp_path / "deck.toml"
    deck.write_text(
        # The reference below is a scalar Abbe sum.
        f'[exposures.e]\n{expo}\npolarization = "scalar"\n[[layers]]\nname = "a"\n'
        f'source = "1/0"\nexposure = "e"\nfield = "{field}"\n'
    )
    args = ["probe", "-r", str(deck), "--layer", "a", "--pitch", str(px), "--cd", str(wx)]
    code = main([*args, "--pitch-y", str(py), "--cd-y", str(wy), "--json"])
    assert code == 0
    obj = json.loads(capsys.readouterr().out)
    img = obj["image_2d"]
    xg, yg = np.meshgrid(np.array(img["x_nm"]), np.array(img["y_nm"]))
    got = np.array(img["intensity"])
    ill = {}
    for part in expo.split("illumination = {")[1].split("}")[0].split(","):
        k, v = (s.strip() for s in part.split("="))
        ill[k] = v.strip('"') if k == "shape" else float(v)
    wl = float(expo.split("wavelength_nm = ")[1].split("\n")[0])
    na = float(expo.split("na = ")[1].split("\n")[0])
    t = float(expo.split("transmission = ")[1].split(" ")[0]) if "transmission" in expo else 0.0
    ref = _reference(wl, na, ill["shape"], ill, t, field, px, py, wx, wy, xg.ravel(), yg.ravel())
    ref = ref.reshape(got.shape)
    assert np.max(np.abs(got - ref)) < 0.02  # acceptance: intensity within 0.02
    assert np.max(np.abs(got - ref)) < 0.02 * np.max(ref)  # and within 2 % of the peak
    contrast = (ref.max() - ref.min()) / (ref.max() + ref.min())
    assert obj["contrast"] == pytest.approx(contrast, abs=0.01)
    # NILS along x at the drawn edge through the feature centre: w |dI/dx| / I.
    e, d = wx / 2, 0.05
    i_e, i_p, i_m = _reference(
        wl,
        na,
        ill["shape"],
        ill,
        t,
        field,
        px,
        py,
        wx,
        wy,
        np.array([e, e + d, e - d]),
        np.zeros(3),
    )
    nils = wx * abs(i_p - i_m) / (2 * d) / i_e
    assert obj["nils"] == pytest.approx(nils, rel=0.05)


def test_rules_check_shows_the_square_array_cutoff(tmp_path, capsys):
    """A square lattice of pitch p has its first orders at 1/p, as lines of
    pitch p: its cutoff is the line cutoff lambda / (NA (1 + sigma)) for a disc
    source (see domain notes; arithmetic: 248 / (0.8 x 1.5) = 206.7 nm)."""
    from pitchguard.deck import parse_deck
    from pitchguard.judge.gratings import square_array_cutoff

    text = (
        "[exposures.e]\nwavelength_nm = 248.0\nna = 0.8\nillumination = { shape = "
        '"conventional", sigma = 0.5 }\n[[layers]]\nname = "a"\nsource = "1/0"\n'
        'exposure = "e"\nfield = "dark"\n'
    )
    want = 248.0 / (0.8 * 1.5)
    e = parse_deck(text).layers[0].exposure
    assert square_array_cutoff(e) == pytest.approx(want, abs=0.5)
    deck = tmp_path / "deck.toml"
    deck.write_text(text)
    assert main(["rules", "check", str(deck)]) == 0
    assert f"{square_array_cutoff(e):.1f}" in capsys.readouterr().out
