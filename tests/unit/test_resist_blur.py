"""Resist blur: a Gaussian of standard deviation sigma applied to the aerial image.

References outside the project:

* The convolution theorem with the Fourier transform of a normalised
  Gaussian: blurring multiplies the image's component at spatial frequency
  f by exp(-2 pi^2 sigma^2 f^2); a cosine image of pitch p keeps its mean and
  loses modulation by exp(-2 pi^2 sigma^2 / p^2) (closed form).
* An independent blur of the sampled unblurred image: scipy.ndimage's
  Gaussian filter on the periodic grid (``mode="wrap"``).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter, gaussian_filter1d

from pitchguard.deck import Exposure, parse_deck
from pitchguard.errors import DeckError
from pitchguard.optics.aerial import CoherentSystems, Optics, grating_spectrum, source_points
from pitchguard.optics.aerial2d import (
    CoherentSystems2D,
    cell_spectra,
    exposure_orders,
    image_axes,
)
from pitchguard.optics.cells2d import array_cell
from pitchguard.optics.cut_images import grating_metrics

# ArF immersion (193 nm, NA 1.35, water n 1.44) with an annular source: common practice.
IMMERSION = {
    "wavelength_nm": 193.0,
    "na": 1.35,
    "immersion_index": 1.44,
    "illumination": {"shape": "annular", "sigma_inner": 0.6, "sigma_outer": 0.9},
}


def _exposure() -> Exposure:
    return Exposure.model_validate(IMMERSION)


def _harmonics(image: np.ndarray) -> np.ndarray:
    return np.fft.fft(image) / len(image)


@pytest.mark.parametrize(("pitch", "blur"), [(100.0, 10.0), (160.0, 20.0), (300.0, 15.0)])
def test_1d_blur_scales_each_harmonic_by_the_gaussian_transform(pitch, blur):
    e = _exposure()
    optics = Optics.of(e)
    n_max = int(math.floor(pitch * optics.cutoff * 1.9))
    spec = grating_spectrum(pitch, pitch / 2, 0.0, 1.0, n_max)
    src = source_points(e, 0.0)
    samples = 256
    sharp = CoherentSystems(optics, src, pitch, n_max).image(spec, samples)[0]
    soft = CoherentSystems(optics, src, pitch, n_max, blur_nm=blur).image(spec, samples)[0]
    hs, hb = _harmonics(sharp), _harmonics(soft)
    f = np.fft.fftfreq(samples, d=pitch / samples)  # 1/nm
    want = hs * np.exp(-2.0 * math.pi**2 * blur**2 * f**2)
    assert np.abs(hs[1]) > 1e-3  # the first harmonic is there to be blurred
    assert np.allclose(hb, want, atol=1e-10)
    assert hb[0].real == pytest.approx(hs[0].real, abs=1e-12)  # the mean is kept
    # The same blur done on the samples by scipy's Gaussian filter.
    dx = pitch / samples
    filtered = gaussian_filter1d(sharp, blur / dx, mode="wrap", truncate=8.0)
    assert np.max(np.abs(filtered - soft)) < 1e-4


def test_2d_blur_scales_each_harmonic_by_the_gaussian_transform():
    e = _exposure()
    px, py, blur = 180.0, 220.0, 12.0
    orders = exposure_orders(e, px, py)
    spec = cell_spectra([array_cell(px, py, 90.0, 110.0)], orders, 0.0, 1.0)
    src = source_points(e, 0.0)
    nx, ny = 64, 64
    centre = ((nx // 2) * px / nx, (ny // 2) * py / ny)  # the grid x = j px / nx
    sharp = CoherentSystems2D(Optics.of(e), src, orders).image(spec, nx, ny, centre)[0]
    soft = CoherentSystems2D(Optics.of(e), src, orders, blur_nm=blur).image(spec, nx, ny, centre)[0]
    x, y = image_axes(orders, nx, ny, centre)
    hs, hb = np.fft.fft2(sharp), np.fft.fft2(soft)
    fy = np.fft.fftfreq(ny, d=py / ny)[:, None]
    fx = np.fft.fftfreq(nx, d=px / nx)[None, :]
    want = hs * np.exp(-2.0 * math.pi**2 * blur**2 * (fx**2 + fy**2))
    assert np.allclose(hb, want, atol=1e-8 * nx * ny)
    assert abs(hs[1, 1]) > 1e-3 * nx * ny  # a diagonal harmonic is there to be blurred
    filtered = gaussian_filter(
        sharp, (blur / (py / ny), blur / (px / nx)), mode="wrap", truncate=8.0
    )
    assert np.max(np.abs(filtered - soft)) < 1e-3
    assert len(x) == nx and len(y) == ny


DECK = """
[exposures.e]
wavelength_nm = 193.0
na = 1.35
immersion_index = 1.44
illumination = {{ shape = "annular", sigma_inner = 0.6, sigma_outer = 0.9 }}

[[layers]]
name = "m1"
source = "1/0"
exposure = "e"
field = "dark"
{extra}
"""


def test_a_layer_blur_lowers_nils_as_the_transform_says():
    """Trenches 50 nm at 100 nm pitch: only the 0th and first orders reach the
    image, so it is a cosine of pitch 100 nm plus its second harmonic; the blur
    lowers NILS, and by the first harmonic's factor at most."""
    sharp = parse_deck(DECK.format(extra="")).layers[0]
    soft = parse_deck(DECK.format(extra="resist_blur_nm = 10.0")).layers[0]
    assert sharp.resist_blur_nm == 0.0 and soft.resist_blur_nm == 10.0
    m0 = grating_metrics(sharp, 100.0, 50.0)[0]
    m1 = grating_metrics(soft, 100.0, 50.0)[0]
    factor = math.exp(-2.0 * math.pi**2 * 10.0**2 / 100.0**2)  # 0.821
    assert m1.nils < m0.nils
    assert m1.contrast == pytest.approx(m0.contrast * factor, rel=0.05)


def test_blur_beyond_what_any_resist_has_is_refused():
    with pytest.raises(DeckError, match="resist_blur_nm"):
        parse_deck(DECK.format(extra="resist_blur_nm = 150.0"))
    with pytest.raises(DeckError, match="resist_blur_nm"):
        parse_deck(DECK.format(extra="resist_blur_nm = -1.0"))


def _blurred(rule, blur_nm: float):
    import copy

    out = copy.copy(rule)
    out.resist_blur_nm = blur_nm
    return out


def test_clips_fast_plain_and_periodic_agree_with_a_blur():
    """A lone via judged three ways with a 10 nm blur (the clip's fast path, its
    plain twin with every imaging system, the periodic cell of the clip's
    period): the same metrics, and a lower NILS than without the blur."""
    from decks import DEMO_DECK
    from pitchguard.deck import load_deck
    from pitchguard.optics.compact_clips import alone_metrics, alone_metrics_batch, feature_cell
    from pitchguard.optics.resist2d import cell_metrics

    sharp = next(r for r in load_deck(DEMO_DECK).layers if r.name == "via1")
    rule = _blurred(sharp, 10.0)
    w = 90.0
    rects = np.array([[-w / 2, -w / 2, w / 2, w / 2]])
    clip = alone_metrics(rule, rects, (w, w), 0.0)
    plain = alone_metrics(rule, rects, (w, w), 0.0, plain=True)
    batch = alone_metrics_batch(rule, [(rects, (w, w))], 0.0)[0]
    cell = feature_cell(rule, rects)
    ref = cell_metrics(rule, array_cell(cell.px_nm, cell.py_nm, w, w))[0]
    assert not ref.missing
    for m in (clip, plain, batch):
        assert m.threshold == pytest.approx(ref.threshold, abs=1e-3)
        assert m.nils_x == pytest.approx(ref.nils_x, rel=0.01)
        assert m.size_x_nm == pytest.approx(ref.size_x_nm, abs=0.5)
    assert clip.nils_x < alone_metrics(sharp, rects, (w, w), 0.0).nils_x
