#!/usr/bin/env python
"""Benchmark of the imaging engine: profiles imaged per second through focus.

A script, not a pytest test.  Run it with the project's interpreter::

    python tests/benchmarks/bench_image.py  # 300 profiles, 9 focus values
    python tests/benchmarks/bench_image.py --profiles 100 --abbe-profiles 10 --quick

What is compared, side by side, on the same source sampling
(``optics.aerial.source_points``), the same orders and the
same x grid (``samples`` points per period):

``socs``
    :class:`pitchguard.optics.aerial.CoherentSystems`: for each focus value the
    transmission cross coefficients are built and decomposed once (the SVD;
    its time is included, amortised over the batch), then ``image`` is called
    on the profiles in batches of ``--batch`` (as the scan does).
``abbe``
    :func:`pitchguard.optics.aerial.abbe_image`, the project's reference: one coherent
    image per source point, summed (called once per profile and focus).
``abbe-fft``
    The same per-source-point sum done the fast way a user would write it:
    the pupil matrix of every source point and order is computed once per
    focus, then per profile one batched inverse FFT of ``(points, samples)``
    and a weighted sum of ``|field|^2``.

Rates are unique profiles per second, each imaged at every focus value.  The
Abbe rows run on the first ``--abbe-profiles`` profiles only (they are slow);
``max diff`` is the largest |I_socs - I_abbe| over those profiles, every focus
and every x, in units of the open frame (target < 1e-3).  ``x abbe`` and
``x fft`` are the speed ratios (target >= 10).

``--step`` changes the source sampling of all rows (the default is the
project's ``IMAGE_SOURCE_STEP``; a finer step costs the Abbe rows in
proportion to the number of source points and the ``socs`` row only in the
SVD, since the number of kernels is bounded by the number of orders).

The case is realistic for ArF immersion metal: 193 nm, NA 1.35, water
(n 1.44), an annular 0.6-0.9 source and an x dipole 0.6-0.9 of 35 degrees,
clear field binary mask, a window period ``2 reach + 2 lambda/NA`` with
``reach = 3 lambda/NA`` (as ``geometry.cuts.window_period``), 1024 samples per period,
random multi-line profiles (lines 40-120 nm, spaces 40-200 nm, background
beyond the interaction range).

``--prototype`` adds a row ``banded*`` for :func:`banded_image`, a faster
way to use the same kernels (a prototype kept in this script, not the engine).

A second table repeats the ``socs`` row for several ``keep`` values (kernels
whose eigenvalue is below ``keep`` times the largest are dropped) to show the
accuracy/speed trade-off.

Timings are wall-clock, best of ``--repeat`` runs for every row; the
machine's load average is printed first because other
processes on the machine change the numbers.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time

import numpy as np

from pitchguard.deck import Exposure
from pitchguard.optics.aerial import (
    IMAGE_SOURCE_STEP,
    SOCS_KEEP,
    CoherentSystems,
    Optics,
    abbe_image,
    mask_amplitudes,
    n_orders,
    pupil,
    segment_spectrum,
    source_points,
)

WAVELENGTH_NM = 193.0
NA = 1.35
WATER_INDEX = 1.44
SOURCES = {
    "annular 0.6-0.9": {"shape": "annular", "sigma_inner": 0.6, "sigma_outer": 0.9},
    "dipole-x 0.6-0.9/35": {
        "shape": "dipole",
        "sigma_inner": 0.6,
        "sigma_outer": 0.9,
        "opening_deg": 35.0,
        "axis": "x",
    },
}
LINE_NM = (40.0, 120.0)
SPACE_NM = (40.0, 200.0)
MAX_DIFF_TARGET = 1e-3
RATIO_TARGET = 10.0


def exposure(illumination: dict) -> Exposure:
    return Exposure.model_validate(
        {
            "wavelength_nm": WAVELENGTH_NM,
            "na": NA,
            "immersion_index": WATER_INDEX,
            "illumination": illumination,
            "mask": {"kind": "binary"},
        }
    )


def random_profiles(rng, count: int, period: float, reach: float, feat, bg):
    """Edges ``(count, k + 1)`` and values ``(count, k)`` of random multi-line cuts.

    Lines (``feat``) and spaces (``bg``) alternate across ``[-reach, reach]``;
    the rest of the period is background.  Rows are padded with zero-width
    segments at ``period / 2`` so they share one width (as measure.py does).
    """
    rows = []
    for _ in range(count):
        x = -reach + rng.uniform(0.0, SPACE_NM[1])
        edges, values = [-period / 2, x], [bg]
        while True:
            w = rng.uniform(*LINE_NM)
            if x + w > reach:
                break
            edges.append(x + w)
            values.append(feat)
            x += w + rng.uniform(*SPACE_NM)
            if x > reach:
                break
            edges.append(x)
            values.append(bg)
        edges.append(period / 2)
        values.append(bg)
        rows.append((edges, values))
    width = max(len(e) for e, _ in rows)
    edges = np.full((count, width), period / 2)
    values = np.full((count, width - 1), bg, dtype=np.complex128)
    for r, (e, v) in enumerate(rows):
        edges[r, : len(e)] = e
        values[r, : len(v)] = v
    return edges, values


def run_socs(optics, src, period, n_max, focus, spectra, samples, batch, keep, keep_first):
    """(seconds, seconds building the TCC, mean kernels, images of the first ``keep_first``)."""
    t_all = time.perf_counter()
    t_build = 0.0
    kernels = []
    first = []
    for z in focus:
        t0 = time.perf_counter()
        cs = CoherentSystems(optics, src, period, n_max, float(z), keep=keep)
        t_build += time.perf_counter() - t0
        kernels.append(len(cs.eigenvalues))
        for c0 in range(0, len(spectra), batch):
            img = cs.image(spectra[c0 : c0 + batch], samples)
            if c0 == 0:
                first.append(img[:keep_first].copy())
    return time.perf_counter() - t_all, t_build, float(np.mean(kernels)), np.stack(first, 1)


def banded_image(cs: CoherentSystems, spectra: np.ndarray, samples: int) -> np.ndarray:
    """PROTOTYPE (not in src): the same kernels, the intensity computed on a short grid.

    The intensity holds only frequencies ``|k| <= 2 n_max``, so it is exactly
    represented by ``m >= 4 n_max + 1`` samples; the kernels' fields are
    transformed on ``m`` points and only the (real) intensity is carried to
    ``samples`` points, by zero-padding its spectrum.
    """
    n_max = cs.n_max
    m = 1 << (4 * n_max + 1).bit_length()
    idx = np.arange(-n_max, n_max + 1) % m
    coef = cs.field_coefficients(spectra)
    buf = np.zeros(coef.shape[:2] + (m,), dtype=np.complex128)
    buf[:, :, idx] = coef
    field = np.fft.ifft(buf, axis=2) * m
    low = np.tensordot(cs.eigenvalues, field.real**2 + field.imag**2, 1)  # (profiles, m)
    return np.fft.irfft(np.fft.rfft(low, axis=1), n=samples, axis=1) * (samples / m)


def run_banded(optics, src, period, n_max, focus, spectra, samples, batch, keep_first):
    t_all = time.perf_counter()
    first = []
    for z in focus:
        cs = CoherentSystems(optics, src, period, n_max, float(z))
        for c0 in range(0, len(spectra), batch):
            img = banded_image(cs, spectra[c0 : c0 + batch], samples)
            if c0 == 0:
                first.append(img[:keep_first].copy())
    return time.perf_counter() - t_all, np.stack(first, 1)


def run_abbe(optics, src, period, focus, spectra, x):
    t0 = time.perf_counter()
    out = np.stack(
        [
            np.stack([abbe_image(s, period, optics, src, float(z), x) for z in focus])
            for s in spectra
        ]
    )
    return time.perf_counter() - t0, out


def run_abbe_fft(optics, src, period, n_max, focus, spectra, samples):
    """Per-source-point sum with one batched inverse FFT per profile and focus."""
    pts, w = src
    t0 = time.perf_counter()
    fn = np.arange(-n_max, n_max + 1) / period
    fx = fn[None, :] + pts[:, 0:1] * optics.cutoff
    fy = np.broadcast_to(pts[:, 1:2] * optics.cutoff, fx.shape)
    idx = np.arange(-n_max, n_max + 1) % samples
    out = np.empty((len(spectra), len(focus), samples))
    buf = np.zeros((len(w), samples), dtype=np.complex128)
    for j, z in enumerate(focus):
        pup = pupil(fx, fy, optics, float(z))  # (S, N): once per focus, shared by all profiles
        for i, s in enumerate(spectra):
            buf[:, idx] = pup * s[None, :]
            field = np.fft.ifft(buf, axis=1) * samples
            out[i, j] = w @ (field.real**2 + field.imag**2)
    return time.perf_counter() - t0, out


def best_of(repeat, fn, *args):
    """The run with the smallest time (first element of the result) of ``repeat`` runs."""
    best = None
    for _ in range(repeat):
        res = fn(*args)
        if best is None or res[0] < best[0]:
            best = res
    return best


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--profiles", type=int, default=300)
    ap.add_argument("--abbe-profiles", type=int, default=10)
    ap.add_argument("--focus", type=int, default=9, help="focus values over +-120 nm")
    ap.add_argument("--samples", type=int, default=1024)
    ap.add_argument(
        "--batch", type=int, default=256, help="profiles per CoherentSystems.image call"
    )
    ap.add_argument("--repeat", type=int, default=3, help="runs per row; the fastest is kept")
    ap.add_argument("--keeps", default="1e-7,1e-6,1e-5,1e-4,3e-4,1e-3")
    ap.add_argument(
        "--step",
        type=float,
        default=IMAGE_SOURCE_STEP,
        help="source sampling step in sigma units (default: IMAGE_SOURCE_STEP)",
    )
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--quick", action="store_true", help="skip the abbe_image row (slowest)")
    ap.add_argument(
        "--prototype",
        action="store_true",
        help="add a row for banded_image, a faster use of the same kernels",
    )
    args = ap.parse_args(argv)

    lam_na = WAVELENGTH_NM / NA
    reach = 3.0 * lam_na
    period = 2.0 * reach + 2.0 * lam_na
    focus = np.linspace(-120.0, 120.0, args.focus)
    x = np.arange(args.samples) * period / args.samples
    keeps = sorted({float(k) for k in args.keeps.split(",")} | {SOCS_KEEP})
    n_abbe = min(args.abbe_profiles, args.profiles, args.batch)
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else math.nan
    print(
        f"ArF immersion {WAVELENGTH_NM:g} nm NA {NA} n {WATER_INDEX}; period {period:.1f} nm "
        f"(reach {reach:.1f}); {args.samples} samples; {args.focus} focus values "
        f"{focus[0]:+g}..{focus[-1]:+g} nm; {args.profiles} profiles "
        f"(Abbe rows: first {n_abbe}); source step {args.step:g}; SOCS_KEEP {SOCS_KEEP:g}; "
        f"best of {args.repeat}; cpus {os.cpu_count()}, load {load:.2f}"
    )
    rng = np.random.default_rng(args.seed)
    failed = False
    sweep_rows = []
    header = (
        f"{'source':<22}{'engine':<10}{'points':>7}{'orders':>7}{'kern':>6}"
        f"{'prof/s':>10}{'tcc s':>8}{'max diff':>10}{'x abbe':>8}{'x fft':>8}"
    )
    print()
    print(header)
    print("-" * len(header))
    for name, ill in SOURCES.items():
        e = exposure(ill)
        optics = Optics.of(e)
        src = source_points(e, 0.0, args.step)
        n_max = n_orders(period, optics, e.sigma_max)
        feat, bg = mask_amplitudes(e, "clear")
        edges, values = random_profiles(rng, args.profiles, period, reach, feat, bg)
        spectra = segment_spectrum(period, edges, values, n_max)
        sub = spectra[:n_abbe]

        # Warm-up (first FFT plans, BLAS threads), not timed.
        CoherentSystems(optics, src, period, n_max, 0.0).image(spectra[:4], args.samples)
        run_abbe_fft(optics, src, period, n_max, focus[:1], sub[:1], args.samples)

        t_fft, ref_fft = best_of(
            args.repeat, run_abbe_fft, optics, src, period, n_max, focus, sub, args.samples
        )
        rate_fft = n_abbe / t_fft
        if args.quick:
            rate_abbe, ref = math.nan, ref_fft
        else:
            t_abbe, ref = best_of(args.repeat, run_abbe, optics, src, period, focus, sub, x)
            rate_abbe = n_abbe / t_abbe
        agree = float(np.max(np.abs(ref - ref_fft)))

        rows = []
        for keep in keeps:
            t, t_tcc, kern, first = best_of(
                args.repeat,
                run_socs,
                optics,
                src,
                period,
                n_max,
                focus,
                spectra,
                args.samples,
                args.batch,
                keep,
                n_abbe,
            )
            rows.append((keep, args.profiles / t, t_tcc, kern, float(np.max(np.abs(first - ref)))))
        npts, nord = len(src[1]), 2 * n_max + 1

        def line(
            engine,
            kern,
            rate,
            tcc,
            diff,
            name=name,
            npts=npts,
            nord=nord,
            rate_abbe=rate_abbe,
            rate_fft=rate_fft,
        ):
            ra = rate / rate_abbe if math.isfinite(rate_abbe) else math.nan
            print(
                f"{name:<22}{engine:<10}{npts:>7}{nord:>7}{kern:>6}{rate:>10.1f}{tcc:>8}"
                f"{diff:>10}{ra:>8.1f}{rate / rate_fft:>8.1f}"
            )

        default = next(r for r in rows if r[0] == SOCS_KEEP)
        line("socs", f"{default[3]:.1f}", default[1], f"{default[2]:.3f}", f"{default[4]:.1e}")
        line("abbe", "-", rate_abbe, "-", "-" if args.quick else "ref")
        line("abbe-fft", "-", rate_fft, "-", f"{agree:.1e}")
        if args.prototype:
            t_b, first_b = best_of(
                args.repeat,
                run_banded,
                optics,
                src,
                period,
                n_max,
                focus,
                spectra,
                args.samples,
                args.batch,
                n_abbe,
            )
            diff_b = float(np.max(np.abs(first_b - ref)))
            line("banded*", f"{default[3]:.1f}", args.profiles / t_b, "-", f"{diff_b:.1e}")
        failed |= not (default[4] < MAX_DIFF_TARGET and default[1] / rate_fft >= RATIO_TARGET)
        sweep_rows.append((name, rows, rate_abbe, rate_fft))
    if args.prototype:
        print("* banded_image: a prototype in this script (same kernels), not the engine in src")

    print()
    print("keep sweep (socs only; ratios against the Abbe rows above)")
    head2 = (
        f"{'source':<22}{'keep':>8}{'kern':>6}{'prof/s':>10}{'max diff':>10}{'x abbe':>8}"
        f"{'x fft':>8}  targets met"
    )
    print(head2)
    print("-" * len(head2))
    for name, rows, rate_abbe, rate_fft in sweep_rows:
        for keep, rate, _t, kern, diff in rows:
            ra = rate / rate_abbe if math.isfinite(rate_abbe) else math.nan
            rf = rate / rate_fft
            acc, fast = diff < MAX_DIFF_TARGET, rf >= RATIO_TARGET
            met = {(True, True): "both", (True, False): "accuracy", (False, True): "speed"}.get(
                (acc, fast), "none"
            )
            print(
                f"{name:<22}{keep:>8.0e}{kern:>6.1f}{rate:>10.1f}{diff:>10.1e}{ra:>8.1f}"
                f"{rf:>8.1f}  {met}"
            )
    print()
    print(
        f"targets: max diff < {MAX_DIFF_TARGET:g} of the open frame and >= {RATIO_TARGET:g}x "
        f"the faster Abbe sum (abbe-fft), at SOCS_KEEP = {SOCS_KEEP:g}: "
        f"{'met' if not failed else 'NOT met'}"
    )
    return 0 if not failed else 1


if __name__ == "__main__":
    sys.exit(main())
