"""Benchmark: 2-D images of many distinct cells, sum of coherent systems against the Abbe sum.

Usage::

    .venv/bin/python tests/benchmarks/bench_image2d.py               # 100 and 1000 cells
    .venv/bin/python tests/benchmarks/bench_image2d.py --cells 300 --focus 9 --clip

Cells are contact arrays (random hole sizes and offsets, one to three holes
per cell) imaged at the default raster (``aerial2d.default_samples``),
ArF immersion, 6 % attenuated PSM, dark field.  Rows:

* ``socs``: ``coherent_systems_2d`` (one TCC per period and focus, cached)
  then ``CoherentSystems2D.image``; ``tcc s`` is the part spent building.
* ``abbe``: ``abbe_image_2d`` summed on the coarse grid that holds the
  intensity's band exactly, then brought to the raster by the same
  ``resample`` as the SOCS engine (the fair Abbe: same output, no TCC).
* ``abbe/px``: ``abbe_image_2d`` at every raster point (the plain reference),
  timed on ``--abbe-pixel-cells`` cells and scaled to the row's count.

"Same period": the cells share one period (one TCC per focus for all).
"Distinct periods": every cell has its own period (one TCC per cell and focus).
``max diff`` compares each engine's images with ``socs`` (open-frame units).
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time

import numpy as np

from pitchguard.deck import Exposure
from pitchguard.optics.aerial import Optics, mask_amplitudes, source_points
from pitchguard.optics.aerial2d import (
    abbe_image_2d,
    cell_spectra,
    clear_systems_cache,
    coarse_size,
    coherent_systems_2d,
    default_samples,
    exposure_orders,
    image_axes,
    resample,
)
from pitchguard.optics.cells2d import Cell, clip_cell

WAVELENGTH_NM = 193.0
NA = 1.35
WATER_INDEX = 1.44
SOURCES = {
    "annular 0.6-0.9": {"shape": "annular", "sigma_inner": 0.6, "sigma_outer": 0.9},
    "quadrupole 0.5-0.8/30": {
        "shape": "quadrupole",
        "sigma_inner": 0.5,
        "sigma_outer": 0.8,
        "opening_deg": 30.0,
    },
}
PITCH_NM = (100.0, 180.0)  # cell sides drawn from this range


def exposure(illumination: dict) -> Exposure:
    return Exposure.model_validate(
        {
            "wavelength_nm": WAVELENGTH_NM,
            "na": NA,
            "immersion_index": WATER_INDEX,
            "illumination": illumination,
            "mask": {"kind": "attenuated", "transmission": 0.06},
        }
    )


def random_cells(rng, count: int, period: tuple[float, float] | None) -> list[Cell]:
    """Cells of one to three holes in separate bands; a shared period, or one each."""
    cells = []
    for _ in range(count):
        px, py = period if period is not None else rng.uniform(*PITCH_NM, 2)
        k = int(rng.integers(1, 4))
        bands = np.linspace(-py / 2, py / 2, k + 1)
        rects = []
        for j in range(k):
            y0, y1 = np.sort(rng.uniform(bands[j], bands[j + 1], 2))
            w = rng.uniform(0.25, 0.6) * px
            x0 = rng.uniform(-px / 2, px / 2 - w)
            rects.append((x0, y0, x0 + w, y1))
        cells.append(Cell(float(px), float(py), tuple(rects)))
    return cells


def by_period(cells: list[Cell]) -> dict[tuple[float, float], list[int]]:
    groups: dict[tuple[float, float], list[int]] = {}
    for k, c in enumerate(cells):
        groups.setdefault((c.px_nm, c.py_nm), []).append(k)
    return groups


def run_socs(e, cells, focus, feat, bg):
    """(seconds, seconds building TCCs, mean kernels, images)."""
    clear_systems_cache()
    optics = Optics.of(e)
    t0 = time.perf_counter()
    t_build, kernels, out = 0.0, [], [None] * len(cells)
    for (px, py), idx in by_period(cells).items():
        orders = exposure_orders(e, px, py)
        nx, ny = default_samples(orders, optics)
        spec = cell_spectra([cells[k] for k in idx], orders, feat, bg)
        stack = []
        for z in focus:
            tb = time.perf_counter()
            cs = coherent_systems_2d(e, px, py, float(z))
            t_build += time.perf_counter() - tb
            kernels.append(len(cs.eigenvalues))
            stack.append(cs.image(spec, nx, ny))
        for r, k in enumerate(idx):
            out[k] = np.stack([s[r] for s in stack])
    return time.perf_counter() - t0, t_build, float(np.mean(kernels)), out


def run_abbe(e, cells, focus, feat, bg):
    """Abbe on the coarse grid holding the band, resampled to the raster: (seconds, images)."""
    optics = Optics.of(e)
    src = source_points(e, 0.0)
    t0 = time.perf_counter()
    out = [None] * len(cells)
    for (px, py), idx in by_period(cells).items():
        orders = exposure_orders(e, px, py)
        nx, ny = default_samples(orders, optics)
        cx, cy = coarse_size(nx, orders.m_max), coarse_size(ny, orders.n_max)
        # The coarse grid with the same centre as the raster (sample (cy//2, cx//2) at 0).
        x, y = image_axes(orders, cx, cy)
        x = x + (cx // 2) * orders.px_nm / cx - (nx // 2) * orders.px_nm / nx
        y = y + (cy // 2) * orders.py_nm / cy - (ny // 2) * orders.py_nm / ny
        xs, ys = np.meshgrid(x, y)
        spec = cell_spectra([cells[k] for k in idx], orders, feat, bg)
        for r, k in enumerate(idx):
            coarse = np.stack(
                [abbe_image_2d(spec[r], orders, optics, src, float(z), xs, ys) for z in focus]
            )
            out[k] = resample(coarse, orders, nx, ny)
    return time.perf_counter() - t0, out


def run_abbe_pixels(e, cells, focus, feat, bg):
    """Abbe at every raster point: (seconds, images)."""
    optics = Optics.of(e)
    src = source_points(e, 0.0)
    t0 = time.perf_counter()
    out = []
    for c in cells:
        orders = exposure_orders(e, c.px_nm, c.py_nm)
        nx, ny = default_samples(orders, optics)
        xs, ys = np.meshgrid(*image_axes(orders, nx, ny))
        spec = cell_spectra([c], orders, feat, bg)[0]
        out.append(
            np.stack([abbe_image_2d(spec, orders, optics, src, float(z), xs, ys) for z in focus])
        )
    return time.perf_counter() - t0, out


def max_diff(a, b) -> float:
    return max(float(np.max(np.abs(x - y))) for x, y in zip(a, b, strict=True))


def clip_row(e, feat, bg, focus):
    """One clip: a 5 x 5 array of 80 nm holes at 160 nm, padded by lambda/NA."""
    optics = Optics.of(e)
    centres = (np.arange(5) - 2) * 160.0
    cx, cy = (v.ravel() for v in np.meshgrid(centres, centres))
    rects = np.stack([cx - 40, cy - 40, cx + 40, cy + 40], axis=1)
    cell = clip_cell(rects, e.lambda_over_na_nm)
    orders = exposure_orders(e, cell.px_nm, cell.py_nm)
    nx, ny = default_samples(orders, optics)
    spec = cell_spectra([cell], orders, feat, bg)
    clear_systems_cache()
    t0 = time.perf_counter()
    systems = [coherent_systems_2d(e, cell.px_nm, cell.py_nm, float(z)) for z in focus]
    t_build = time.perf_counter() - t0
    t0 = time.perf_counter()
    socs = np.stack([cs.image(spec, nx, ny)[0] for cs in systems])
    t_img = time.perf_counter() - t0
    t_abbe, abbe = run_abbe(e, [cell], focus, feat, bg)
    kern = np.mean([len(cs.eigenvalues) for cs in systems])
    return cell, len(orders), (nx, ny), t_build, t_img, kern, t_abbe, max_diff([socs], abbe)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cells", default="100,1000", help="comma-separated cell counts")
    ap.add_argument("--focus", type=int, default=1, help="focus values over +-60 nm (1: 0 only)")
    ap.add_argument("--abbe-pixel-cells", type=int, default=5)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--clip", action="store_true", help="add one 5 x 5-array clip per source")
    args = ap.parse_args(argv)
    counts = [int(c) for c in args.cells.split(",")]
    focus = np.linspace(-60.0, 60.0, args.focus) if args.focus > 1 else np.array([0.0])
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else math.nan
    print(
        f"ArF immersion {WAVELENGTH_NM:g} nm NA {NA} n {WATER_INDEX}, 6 % att. PSM, dark field; "
        f"cells {PITCH_NM[0]:g}-{PITCH_NM[1]:g} nm, 1-3 holes; {len(focus)} focus value(s); "
        f"cpus {os.cpu_count()}, load {load:.2f}"
    )
    head = (
        f"{'source':<23}{'periods':<10}{'cells':>6}{'engine':>9}{'seconds':>9}"
        f"{'ms/cell':>9}{'tcc s':>7}{'kern':>6}{'x abbe':>8}{'max diff':>10}"
    )
    print()
    print(head)
    print("-" * len(head))
    for name, ill in SOURCES.items():
        e = exposure(ill)
        feat, bg = mask_amplitudes(e, "dark")
        source_points(e, 0.0)  # sampled once, outside the timings
        warm = random_cells(np.random.default_rng(0), 4, None)
        run_socs(e, warm, focus, feat, bg)
        run_abbe(e, warm[:1], focus, feat, bg)
        for count in counts:
            for label, period in (("same", (140.0, 140.0)), ("distinct", None)):
                rng = np.random.default_rng(args.seed)
                cells = random_cells(rng, count, period)
                t_s, t_b, kern, socs = run_socs(e, cells, focus, feat, bg)
                t_a, abbe = run_abbe(e, cells, focus, feat, bg)
                few = cells[: args.abbe_pixel_cells]
                t_p, pix = run_abbe_pixels(e, few, focus, feat, bg)
                t_p_scaled = t_p * count / len(few)

                def row(
                    engine, t, tcc, kern_text, diff, name=name, label=label, count=count, t_a=t_a
                ):
                    print(
                        f"{name:<23}{label:<10}{count:>6}{engine:>9}{t:>9.2f}"
                        f"{1e3 * t / count:>9.2f}{tcc:>7}{kern_text:>6}"
                        f"{t_a / t:>8.1f}{diff:>10}"
                    )

                row("socs", t_s, f"{t_b:.2f}", f"{kern:.1f}", "ref")
                row("abbe", t_a, "-", "-", f"{max_diff(socs, abbe):.1e}")
                row("abbe/px", t_p_scaled, "-", "-", f"{max_diff(socs[: len(few)], pix):.1e}")
        if args.clip:
            cell, n_ord, (nx, ny), t_b, t_i, kern, t_a, diff = clip_row(e, feat, bg, focus)
            print(
                f"{name:<23}clip {cell.px_nm:.0f} x {cell.py_nm:.0f} nm: {n_ord} orders, "
                f"raster {nx} x {ny}; socs tcc {t_b:.2f} s ({kern:.0f} kernels) + image "
                f"{t_i:.2f} s; abbe {t_a:.2f} s; max diff {diff:.1e}"
            )
    print()
    print("abbe/px rows: timed on the first cells and scaled to the row's count")
    return 0


if __name__ == "__main__":
    sys.exit(main())
