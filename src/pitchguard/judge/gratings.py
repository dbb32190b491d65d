"""Ideal gratings: probe one pitch, sweep through pitch (the same limits as a scan)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from pitchguard.deck import SEVERITIES, LayerRule
from pitchguard.errors import PitchguardError
from pitchguard.judge.checks import OK, Violation, violations
from pitchguard.optics.cut_images import grating_metrics
from pitchguard.optics.orders import OrderResult, analyse_pitch, sample_source
from pitchguard.optics.resist import Metrics


@dataclass(frozen=True)
class GratingResult:
    """Everything known about one grating: orders, metrics, verdict."""

    pitch_nm: float
    cd_nm: float
    orientation_deg: float
    orders: OrderResult
    metrics: Metrics | None
    violations: tuple[Violation, ...]
    x_nm: np.ndarray
    intensity: np.ndarray
    focus_nm: float
    # Metrics of the image shown (at focus_nm); the verdict, EL and DOF are
    # through the deck's focus range (``metrics``).
    shown: Metrics | None = None

    @property
    def severity(self) -> str:
        return self.violations[0].severity if self.violations else "ok"

    @property
    def severity_code(self) -> int:
        return SEVERITIES.index(self.severity) if self.violations else OK


def _check(rule: LayerRule, pitch_nm: float, cd_nm: float) -> None:
    if not (math.isfinite(pitch_nm) and pitch_nm > 0):
        raise PitchguardError(f"pitch must be a positive number of nm, got {pitch_nm}")
    if not (math.isfinite(cd_nm) and 0 < cd_nm < pitch_nm):
        raise PitchguardError(f"CD must be between 0 and the pitch ({pitch_nm} nm), got {cd_nm}")
    if pitch_nm > 50 * rule.exposure.lambda_over_na_nm:
        raise PitchguardError(
            f"pitch {pitch_nm} nm is over 50 lambda/NA: not a pitch this tool can judge"
        )


def grating(
    rule: LayerRule,
    pitch_nm: float,
    cd_nm: float,
    orientation_deg: float = 90.0,
    focus_nm: float = 0.0,
) -> GratingResult:
    """Judge an ideal grating (wafer nm); lines run at ``orientation_deg`` (90: along y).

    Metrics through the deck's focus range; the returned image, and the
    metrics of it (``shown``), are at ``focus_nm``.
    """
    _check(rule, pitch_nm, cd_nm)
    pitch_angle = (orientation_deg + 90.0) % 180.0
    res = analyse_pitch(rule.exposure, pitch_nm, orientation_deg % 180.0)
    m, x, inten = grating_metrics(rule, pitch_nm, cd_nm, pitch_angle)
    shown = m
    if focus_nm:
        shown, x, inten = grating_metrics(rule, pitch_nm, cd_nm, pitch_angle, (focus_nm,))
    vs = violations(rule, res, m if rule.image_checks else None, pitch_nm)
    return GratingResult(
        pitch_nm, cd_nm, orientation_deg, res, m, tuple(vs), x, inten, focus_nm, shown
    )


def round_step(raw: float) -> float:
    """The largest of 1, 2, 2.5 and 5 times a power of ten not above ``raw``."""
    decade = 10.0 ** math.floor(math.log10(raw))
    return max(m * decade for m in (1.0, 2.0, 2.5, 5.0) if m * decade <= raw * (1 + 1e-12))


def default_pitches(rule: LayerRule, cd_nm: float) -> np.ndarray:
    """From just below the cutoff (or 1.2 CD) to 4 lambda/NA, in round steps of about
    lambda/NA / 20 (:func:`round_step`), on multiples of the step."""
    lo = max(cd_nm * 1.2, 0.9 * rule.exposure.cutoff_pitch_nm)
    hi = max(4.0 * rule.exposure.lambda_over_na_nm, lo * 1.5)
    step = round_step(rule.exposure.lambda_over_na_nm / 20.0)
    k0, k1 = math.floor(lo / step), math.ceil(hi / step)
    return np.round(np.arange(k0, k1 + 1) * step, 9)


def through_pitch(
    rule: LayerRule, cd_nm: float, pitches: np.ndarray, orientation_deg: float = 90.0
) -> list[GratingResult]:
    """One grating result per pitch (pitches at or below the CD are skipped)."""
    return [grating(rule, float(p), cd_nm, orientation_deg) for p in pitches if p > cd_nm]


def bands(results: list[GratingResult]) -> list[tuple[float, float, str]]:
    """Contiguous pitch ranges sharing a severity other than ok: ``(from, to, severity)``."""
    out: list[tuple[float, float, str]] = []
    for r in results:
        if r.severity == "ok":
            continue
        if out and out[-1][2] == r.severity and _adjacent(results, out[-1][1], r.pitch_nm):
            out[-1] = (out[-1][0], r.pitch_nm, r.severity)
        else:
            out.append((r.pitch_nm, r.pitch_nm, r.severity))
    return out


def _adjacent(results: list[GratingResult], a: float, b: float) -> bool:
    pitches = [r.pitch_nm for r in results]
    return pitches.index(b) - pitches.index(a) == 1


def pupil_picture(rule: LayerRule, result: GratingResult, width: int = 45) -> list[str]:
    """A small text picture of the pupil with the source and the orders it sends through.

    The pupil is the circle of radius NA/lambda (``*``); ``0`` marks the source
    (the 0th order, where it lies); ``+``/``-`` the source shifted by the +1st /
    -1st order where that copy falls inside the pupil (those points image the
    grating); ``2`` higher orders inside the pupil.  Pitch runs left-right.
    """
    height = width // 2 + 1
    q = rule.exposure.wavelength_nm / (result.pitch_nm * rule.exposure.na)
    pts = sample_source(rule.exposure.illumination).grid
    t = math.radians(-((result.orientation_deg + 90.0) % 180.0))
    rot = np.array([[math.cos(t), -math.sin(t)], [math.sin(t), math.cos(t)]])
    pts = pts @ rot.T
    grid = [[" "] * width for _ in range(height)]

    def put(x: float, y: float, ch: str, only_inside: bool = True) -> None:
        if only_inside and x * x + y * y > 1.0:
            return
        col = int(round((x + 1.1) / 2.2 * (width - 1)))
        row = int(round((1.1 - y) / 2.2 * (height - 1)))
        if 0 <= row < height and 0 <= col < width:
            grid[row][col] = ch

    for k in range(180):
        a = 2 * math.pi * k / 180
        put(math.cos(a), math.sin(a), "*", only_inside=False)
    n_max = int((1.0 + rule.exposure.sigma_max) / q) if q > 0 else 0
    for n in range(-n_max, n_max + 1):
        if n == 0:
            continue
        ch = "+" if n == 1 else "-" if n == -1 else "2" if abs(n) >= 2 else "?"
        for sx, sy in pts[:: max(1, len(pts) // 600)]:
            put(sx + n * q, sy, ch)
    for sx, sy in pts[:: max(1, len(pts) // 600)]:
        put(sx, sy, "0")
    return ["".join(r).rstrip() for r in grid]


@dataclass(frozen=True)
class ArrayResult:
    """An ideal rectangular array of compact features: orders, metrics, verdict."""

    pitch_nm: tuple[float, float]  # x, y
    cd_nm: tuple[float, float]
    orders: object  # optics.lattice_orders.LatticeOrders
    metrics: object  # optics.resist2d.Metrics2D through the deck's focus range
    shown: object  # Metrics2D of the image shown (at focus_nm)
    violations: tuple[Violation, ...]
    x_nm: np.ndarray
    y_nm: np.ndarray
    intensity: np.ndarray  # (y, x) at focus_nm, one unit cell, feature at the centre
    focus_nm: float

    @property
    def severity(self) -> str:
        return self.violations[0].severity if self.violations else "ok"


def array_probe(
    rule: LayerRule,
    pitch_nm: float,
    cd_nm: float,
    pitch_y_nm: float,
    cd_y_nm: float,
    focus_nm: float = 0.0,
) -> ArrayResult:
    """Judge a rectangular lattice (wafer nm) of ``cd x cd_y`` rectangles at
    ``pitch x pitch_y``, one centred on the origin: holes on a dark field,
    posts on a clear one.  Metrics through the deck's focus range; the image
    returned, and ``shown``, at ``focus_nm``."""
    from pitchguard.judge.array_checks import array_violations
    from pitchguard.optics.cells2d import array_cell
    from pitchguard.optics.lattice_orders import lattice_orders
    from pitchguard.optics.resist2d import cell_metrics

    _check(rule, pitch_nm, cd_nm)
    _check(rule, pitch_y_nm, cd_y_nm)
    lo = lattice_orders(rule.exposure, (pitch_nm, 0.0), (0.0, pitch_y_nm))
    cell = array_cell(pitch_nm, pitch_y_nm, cd_nm, cd_y_nm)
    m, x, y, image = cell_metrics(rule, cell)
    shown = m
    if focus_nm:
        shown, x, y, image = cell_metrics(rule, cell, focus_nm=(focus_nm,))
    vs = array_violations(rule, lo, m if rule.image_checks else None)
    return ArrayResult(
        (pitch_nm, pitch_y_nm), (cd_nm, cd_y_nm), lo, m, shown, tuple(vs), x, y, image, focus_nm
    )


def square_array_cutoff(exposure) -> float:
    """Smallest pitch (wafer nm) of a square array whose image is 2-D: the
    pupil passes two independent first orders (bisection on the pitch, to
    0.01 nm; for a disc source it is the line cutoff lambda / (NA (1 + sigma)))."""
    from pitchguard.optics.lattice_orders import lattice_orders

    def two_d(p: float) -> bool:
        return lattice_orders(exposure, (p, 0.0), (0.0, p)).rank == 2

    lo, hi = 0.05 * exposure.lambda_over_na_nm, 0.5 * exposure.lambda_over_na_nm
    while not two_d(hi):
        hi *= 2.0
        if hi > 100 * exposure.lambda_over_na_nm:
            return math.inf  # e.g. a dipole: one direction is never imaged
    while hi - lo > 0.01:
        mid = 0.5 * (lo + hi)
        lo, hi = (lo, mid) if two_d(mid) else (mid, hi)
    return hi
