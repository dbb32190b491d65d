"""The image stage: each distinct cut and ideal grating imaged through focus, into Metrics."""

from __future__ import annotations

import math
from dataclasses import replace
from functools import lru_cache
from typing import NamedTuple

import numpy as np

from pitchguard.deck import Exposure, LayerRule
from pitchguard.geometry.cuts import Cut, cut_segments, window_period
from pitchguard.optics.aerial import (
    CoherentSystems,
    Optics,
    PupilFrame,
    grating_spectrum,
    mask_amplitudes,
    n_orders,
    segment_spectrum,
    source_is_symmetric,
)
from pitchguard.optics.axis_batch import cds
from pitchguard.optics.resist import SIZED, UNSIZED, Metrics, evaluate
from pitchguard.optics.resist_batch import evaluate_batch
from pitchguard.optics.sizing import bias_limits, biased_edges, solve_bias
from pitchguard.optics.source_rims import line_source

BATCH = 256
"""Cuts imaged per batch (bounds memory: focus x batch x samples x kernels)."""


CUT_CACHE_MAX = 50_000
"""Metrics of imaged cuts kept per process (about 0.5 kB each); the cache is
emptied when it would grow past this."""


_imaged: dict[tuple, Metrics] = {}


_imaged_stats = {"hits": 0, "misses": 0}


_fresh: list[tuple] = []  # keys imaged here since the last take_imaged()


def cut_cache_info() -> dict[str, int]:
    """This process's cut-metrics cache: ``hits``, ``misses`` and ``size``."""
    return {**_imaged_stats, "size": len(_imaged)}


def clear_cut_cache() -> None:
    _imaged.clear()
    _fresh.clear()
    _imaged_stats.update(hits=0, misses=0)


def _rule_key(rule: LayerRule, scale_to_wafer: float) -> tuple:
    """All of a layer's rule that a cut's metrics depend on."""
    return (
        rule.exposure,
        rule.field,
        rule.interaction_range_nm,
        rule.focus_nm,
        rule.anchor,
        rule.cd_tolerance_pct,
        rule.el_min_pct,
        rule.resist_blur_nm,
        rule.sizing,
        scale_to_wafer,
    )


class ImagedCut(NamedTuple):
    """A cut's metrics as passed between processes, keyed by values only (a
    forked worker may hold leftovers of another deck's rules)."""

    rule_key: tuple  # all of the layer's rule the metrics depend on
    angle_deg: float
    bounds_nm: tuple[float, ...]
    reach_nm: float
    metrics: Metrics

    @property
    def key(self) -> tuple:
        return (self.rule_key, self.angle_deg, self.bounds_nm, self.reach_nm)


def take_imaged() -> list[ImagedCut]:
    """The cuts imaged in this process since the last call, to share with other
    processes (see :func:`give_imaged`)."""
    rows = [ImagedCut(*k, _imaged[k]) for k in _fresh if k in _imaged]
    _fresh.clear()
    return rows


def give_imaged(rows: list[ImagedCut]) -> None:
    """Take cuts another process imaged (:func:`take_imaged`); a row serves only
    layers whose exposure and limits equal those it was imaged under."""
    if len(_imaged) + len(rows) > CUT_CACHE_MAX:
        _imaged.clear()
    for row in rows:
        _imaged.setdefault(row.key, row.metrics)


def samples_for(period_nm: float, n_max: int, optics: Optics) -> int:
    """FFT samples per period: at least 4x the orders, and a step of at most
    lambda/NA / 128 (about 1 nm at ArF immersion)."""
    step = optics.wavelength_nm / optics.na / 128.0
    need = max(4 * n_max + 1, int(math.ceil(period_nm / step)), 64)
    return 1 << (need - 1).bit_length()


@lru_cache(maxsize=64)
def _frame(exposure: Exposure, angle_deg: float, period_nm: float, n_max: int) -> PupilFrame:
    src = line_source(exposure, angle_deg, period_nm, n_max)
    return PupilFrame(Optics.of(exposure), src, period_nm, n_max, angle_deg)


@lru_cache(maxsize=512)
def coherent_systems(
    exposure: Exposure,
    angle_deg: float,
    period_nm: float,
    n_max: int,
    focus_nm: float,
    blur_nm: float = 0.0,
):
    """The imaging systems at one focus, of an image blurred by a Gaussian of
    ``blur_nm`` (the layer's resist blur).  Those at ``-z`` are the conjugates of
    those at ``+z`` (:meth:`CoherentSystems.through_opposite_focus`): a deck's
    focus values mostly come in such pairs, and each pair costs one TCC."""
    if focus_nm < 0:
        return coherent_systems(
            exposure, angle_deg, period_nm, n_max, -focus_nm, blur_nm
        ).through_opposite_focus()
    return CoherentSystems.from_frame(
        _frame(exposure, angle_deg, period_nm, n_max),
        period_nm,
        n_max,
        focus_nm,
        blur_nm=blur_nm,
    )


def anchor_threshold(rule: LayerRule) -> float | None:
    """Nominal threshold: the image at the drawn edge of the anchor grating, best focus."""
    if rule.anchor is None:
        return None
    p, cd = rule.anchor.pitch_nm, rule.anchor.cd_nm
    e = rule.exposure
    optics = Optics.of(e)
    n_max = n_orders(p, optics, e.sigma_max)
    feat, bg = mask_amplitudes(e, rule.field)
    spec = grating_spectrum(p, cd, feat, bg, n_max)
    # Lines along y (pitch along x): angle 0.  Symmetric grating: both edges alike.
    inten, _ = coherent_systems(e, 0.0, p, n_max, 0.0, rule.resist_blur_nm).at(
        spec, np.array([cd / 2.0])
    )
    return float(inten[0, 0])


def _centred_grid(period_nm: float, samples: int) -> tuple[np.ndarray, np.ndarray]:
    """x on [-P/2, P/2) and the permutation from FFT order (x = k P / M) to it."""
    x = np.arange(samples) * period_nm / samples
    order = np.roll(np.arange(samples), samples // 2)
    xs = x[order]
    xs = np.where(xs >= period_nm / 2, xs - period_nm, xs)
    return xs, order


def _sized_spectra(
    rule: LayerRule,
    period: float,
    n_max: int,
    geometry: tuple[np.ndarray, np.ndarray, np.ndarray],
    drawn: np.ndarray,
    searches: np.ndarray,
    imaging: tuple,
    t_nom: float,
):
    """Spectra of cuts retargeted as OPC would size them (:mod:`optics.sizing`):
    ``(spectra, bias, state)``.  ``geometry`` is ``(edges, material, reach)`` of the
    cuts' segments; ``imaging`` ``(systems at best focus, samples, order, x)``."""
    edges, material, reach = geometry
    best_sys, samples, order, x = imaging
    feat, bg = mask_amplitudes(rule.exposure, rule.field)
    values = np.where(material, feat, bg)
    bright = rule.field == "dark"
    at = np.full((len(drawn), 1), float(t_nom))

    def printed_cd(bias: np.ndarray, rows: np.ndarray | None = None) -> np.ndarray:
        """The CD each cut (or each of ``rows``, one bias each) prints with ``bias``."""
        r = slice(None) if rows is None else rows
        moved = biased_edges(edges[r], material[r], bias, reach[r])
        img = best_sys.image(segment_spectrum(period, moved, values[r], n_max), samples)
        lo_hi = searches[r]
        return cds(x, img[:, order], 0.0, lo_hi[:, 0], lo_hi[:, 1], bright, at[r])[:, 0]

    lo, hi = bias_limits(edges, material, reach)
    bias, reached = solve_bias(printed_cd, drawn, printed_cd(np.zeros(len(drawn))), lo, hi)
    spectra = segment_spectrum(period, biased_edges(edges, material, bias, reach), values, n_max)
    return spectra, bias, np.where(reached, SIZED, UNSIZED)


def _with_sizing(ms: list[Metrics], bias: np.ndarray, state: np.ndarray) -> list[Metrics]:
    return [
        replace(m, bias_nm=float(b), sizing=int(st))
        for m, b, st in zip(ms, bias, state, strict=True)
    ]


def measure_cuts(
    cuts: list[Cut], angles_deg: list[float], rule: LayerRule, scale_to_wafer: float
) -> list[Metrics]:
    """Metrics of every cut (drawn nm) for one layer; ``angles_deg[k]`` turns cut k's source.

    A cut's metrics depend only on its profile, its source turn and the
    layer's exposure and limits, so they are kept per process: the tiles of
    a tiled scan repeat each other's cuts, and a worker images each distinct
    cut once, whichever tiles it meets it in (and none that another worker
    imaged before its tile started: see :func:`take_imaged`).
    """
    if not cuts:
        return []
    rule_key = _rule_key(rule, scale_to_wafer)
    keys = [
        (rule_key, round(a, 1) % 180.0, c.bounds, c.reach)
        for c, a in zip(cuts, angles_deg, strict=True)
    ]
    known = [_imaged.get(k) for k in keys]
    todo = [k for k, m in enumerate(known) if m is None]
    _imaged_stats["hits"] += len(cuts) - len(todo)
    _imaged_stats["misses"] += len(todo)
    if todo:
        fresh = measure_one(
            [cuts[k] for k in todo], [angles_deg[k] for k in todo], rule, scale_to_wafer
        )
        if len(_imaged) + len(todo) > CUT_CACHE_MAX:
            _imaged.clear()
        for k, m in zip(todo, fresh, strict=True):
            known[k] = _imaged[keys[k]] = m
            _fresh.append(keys[k])
    return known  # type: ignore[return-value]


def measure_one(
    cuts: list[Cut], angles_deg: list[float], rule: LayerRule, scale_to_wafer: float
) -> list[Metrics]:
    """:func:`measure_cuts` without the cache."""
    e = rule.exposure
    optics = Optics.of(e)
    reach = rule.interaction_range_nm
    period = window_period(reach, e.lambda_over_na_nm)
    n_max = n_orders(period, optics, e.sigma_max)
    samples = samples_for(period, n_max, optics)
    x, order = _centred_grid(period, samples)
    feat, bg = mask_amplitudes(e, rule.field)
    focus = np.array(rule.focus_nm)
    best = int(np.argmin(np.abs(focus)))
    t_nom = anchor_threshold(rule)
    tol = rule.cd_tolerance_pct / 100.0
    bright = rule.field == "dark"
    out: list[Metrics | None] = [None] * len(cuts)

    scaled = [
        Cut(tuple(v * scale_to_wafer for v in c.bounds), c.reach * scale_to_wafer) for c in cuts
    ]
    groups: dict[float, list[int]] = {}
    for k, a in enumerate(angles_deg):
        groups.setdefault(round(a, 1) % 180.0, []).append(k)
    for angle, members in groups.items():
        for c0 in range(0, len(members), BATCH):
            idx = members[c0 : c0 + BATCH]
            segs = [cut_segments(scaled[k], period) for k in idx]
            width = max(len(s[0]) for s in segs)
            edges = np.full((len(idx), width), period / 2)
            material = np.zeros((len(idx), width - 1), dtype=bool)
            for r, (ed, mat) in enumerate(segs):
                edges[r, : len(ed)] = ed
                material[r, : len(mat)] = mat
            spectra = segment_spectrum(period, edges, np.where(material, feat, bg), n_max)
            feats = [scaled[k].feature for k in idx]
            pts = np.array([[lft, rgt] for lft, rgt in feats])
            searches = np.array([scaled[k].search for k in idx], dtype=np.float64)
            at_best = coherent_systems(
                e, angle, period, n_max, float(focus[best]), rule.resist_blur_nm
            )
            sizing = None
            if rule.sizing == "retarget" and t_nom is not None:
                reach_c = np.array([scaled[k].reach for k in idx])
                spectra, *sizing = _sized_spectra(
                    rule, period, n_max, (edges, material, reach_c), pts[:, 1] - pts[:, 0],
                    searches, (at_best, samples, order, x), t_nom,
                )  # fmt: skip
            stack = np.stack(
                [
                    coherent_systems(e, angle, period, n_max, float(z), rule.resist_blur_nm).image(
                        spectra, samples
                    )[:, order]
                    for z in focus
                ]
            )  # (F, m, X)
            i_e, d_e = at_best.at(spectra, pts)
            ms = evaluate_batch(
                x,
                stack.transpose(1, 0, 2),
                focus,
                pts,
                searches,
                bright,
                t_nom,
                tol,
                rule.el_min_pct,
                (i_e, d_e),
                np.array([scaled[k].reach for k in idx]),
                lambda where, sys=at_best, sp=spectra: sys.at(sp, where),
            )
            if sizing is not None:
                ms = _with_sizing(ms, *sizing)
            for k, m in zip(idx, ms, strict=True):
                out[k] = m
    return out  # type: ignore[return-value]


def _grating_frame(rule: LayerRule, pitch_nm: float) -> tuple:
    """What imaging one period of a grating of the layer needs: ``(exposure, n_max,
    samples, x centred on the feature, FFT order to x, feature and background
    amplitudes)``."""
    e = rule.exposure
    optics = Optics.of(e)
    n_max = n_orders(pitch_nm, optics, e.sigma_max)
    samples = samples_for(pitch_nm, n_max, optics)
    x, order = _centred_grid(pitch_nm, samples)
    feat, bg = mask_amplitudes(e, rule.field)
    return e, n_max, samples, x, order, feat, bg


def grating_metrics(
    rule: LayerRule,
    pitch_nm: float,
    cd_nm: float,
    angle_deg: float = 0.0,
    focus_nm: tuple[float, ...] | None = None,
) -> tuple[Metrics, np.ndarray, np.ndarray]:
    """Metrics of an ideal grating (wafer nm), plus its best-focus image over one period.

    Returns ``(metrics, x_nm, intensity)`` with ``x = 0`` at the centre of the
    drawn feature.  ``angle_deg`` is the pitch direction (0: lines along y).
    """
    e, n_max, samples, x, order, feat, bg = _grating_frame(rule, pitch_nm)
    spec = grating_spectrum(pitch_nm, cd_nm, feat, bg, n_max)
    focus = np.array(focus_nm if focus_nm is not None else rule.focus_nm)
    best = int(np.argmin(np.abs(focus)))
    sizing = _sized_gratings(rule, pitch_nm, np.array([cd_nm]), angle_deg, focus[best])
    if sizing is not None:
        spec = sizing[0][0]
    stack = np.stack(
        [
            coherent_systems(e, angle_deg, pitch_nm, n_max, float(z), rule.resist_blur_nm).image(
                spec, samples
            )[0, order]
            for z in focus
        ]
    )
    h = cd_nm / 2.0
    at_best = coherent_systems(
        e, angle_deg, pitch_nm, n_max, float(focus[best]), rule.resist_blur_nm
    )
    i_e, d_e = at_best.at(spec, np.array([-h, h]))
    m = evaluate(
        x,
        stack,
        focus,
        (-h, h),
        (-pitch_nm / 2, pitch_nm / 2),
        rule.field == "dark",
        cd_nm,
        anchor_threshold(rule),
        rule.cd_tolerance_pct / 100.0,
        rule.el_min_pct,
        (i_e[0], d_e[0]),
        values_at=lambda where: at_best.at(spec, where),
    )
    if sizing is not None:
        m = _with_sizing([m], *sizing[1:])[0]
    return m, x, stack[best]


def grating_metrics_batch(
    rule: LayerRule, pitch_nm: float, cds_nm, angle_deg: float = 0.0
) -> list[Metrics]:
    """:func:`grating_metrics` of ideal gratings of one pitch and several CDs (wafer
    nm) at the layer's focus values, imaged and evaluated together (one set of
    imaging systems, :func:`evaluate_batch`); the tests hold it to the plain one."""
    cds = np.asarray(cds_nm, dtype=np.float64).reshape(-1)
    if len(cds) == 0:
        return []
    e, n_max, samples, x, order, feat, bg = _grating_frame(rule, pitch_nm)
    h = cds / 2.0
    edges = np.stack([np.full_like(h, -pitch_nm / 2), -h, h, np.full_like(h, pitch_nm / 2)], axis=1)
    values = np.broadcast_to(np.array([bg, feat, bg]), (len(cds), 3))
    spectra = segment_spectrum(pitch_nm, edges, values, n_max)
    focus = np.array(rule.focus_nm)
    best = int(np.argmin(np.abs(focus)))
    sizing = _sized_gratings(rule, pitch_nm, cds, angle_deg, focus[best])
    if sizing is not None:
        spectra = sizing[0]
    stack = np.stack(
        [
            coherent_systems(e, angle_deg, pitch_nm, n_max, float(z), rule.resist_blur_nm).image(
                spectra, samples
            )[:, order]
            for z in focus
        ]
    )  # (F, m, X)
    pts = np.stack([-h, h], axis=1)
    at_best = coherent_systems(
        e, angle_deg, pitch_nm, n_max, float(focus[best]), rule.resist_blur_nm
    )
    i_e, d_e = at_best.at(spectra, pts)
    ms = evaluate_batch(
        x,
        stack.transpose(1, 0, 2),
        focus,
        pts,
        np.broadcast_to([-pitch_nm / 2, pitch_nm / 2], pts.shape),
        rule.field == "dark",
        anchor_threshold(rule),
        rule.cd_tolerance_pct / 100.0,
        rule.el_min_pct,
        (i_e, d_e),
        values_at=lambda where: at_best.at(spectra, where),
    )
    return ms if sizing is None else _with_sizing(ms, *sizing[1:])


def _sized_gratings(rule: LayerRule, pitch_nm: float, cds_nm: np.ndarray, angle_deg, focus_nm):
    """:func:`_sized_spectra` of ideal gratings of one pitch, or None when the layer
    is judged as drawn (or has no anchored dose to size at)."""
    t_nom = anchor_threshold(rule)
    if rule.sizing != "retarget" or t_nom is None:
        return None
    e, n_max, samples, x, order, _, _ = _grating_frame(rule, pitch_nm)
    h = np.asarray(cds_nm, dtype=np.float64) / 2.0
    half = np.full_like(h, pitch_nm / 2)
    edges = np.stack([-half, -h, h, half], axis=1)
    material = np.broadcast_to(np.array([False, True, False]), (len(h), 3))
    best_sys = coherent_systems(e, angle_deg, pitch_nm, n_max, float(focus_nm), rule.resist_blur_nm)
    return _sized_spectra(
        rule, pitch_nm, n_max, (edges, material, half), 2.0 * h,
        np.stack([-half, half], axis=1), (best_sys, samples, order, x), t_nom,
    )  # fmt: skip


def cut_image(
    rule: LayerRule, bounds_nm: tuple[float, ...], angle_deg: float, focus_nm: float = 0.0
) -> tuple[np.ndarray, np.ndarray]:
    """Aerial image ``(x_nm, intensity)`` of a cut given by its material boundaries.

    ``bounds_nm`` are wafer nm relative to the feature centre (as in
    :attr:`pitchguard.judge.findings.Finding.cut_bounds_nm`); ``x`` spans the cut.
    """
    e = rule.exposure
    optics = Optics.of(e)
    period = window_period(rule.interaction_range_nm, e.lambda_over_na_nm)
    n_max = n_orders(period, optics, e.sigma_max)
    samples = samples_for(period, n_max, optics)
    x, order = _centred_grid(period, samples)
    feat, bg = mask_amplitudes(e, rule.field)
    edges, mat = cut_segments(Cut(tuple(bounds_nm), rule.interaction_range_nm), period)
    spec = segment_spectrum(period, edges, np.where(mat, feat, bg), n_max)
    angle = 0.0 if source_is_symmetric(e) else round(angle_deg, 1) % 180.0
    inten = coherent_systems(e, angle, period, n_max, float(focus_nm), rule.resist_blur_nm).image(
        spec, samples
    )[0, order]
    keep = np.abs(x) <= rule.interaction_range_nm
    return x[keep], inten[keep]
