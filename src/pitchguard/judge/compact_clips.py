"""Compact features judged on 2-D clips of their surroundings
(:mod:`pitchguard.optics.compact_clips`): those with no other feature of their
shape within reach (context ``alone``), those whose local lattice no
neighbour confirms (``group``: in pairs, irregular groups, at the ragged edge
of an array), and the members of arrays whose clip is not their lattice
continued on every side (``group`` too: an array's last rows and columns, a
shape of another kind within reach).  The rest of an array is judged on its
unit cell (:mod:`pitchguard.judge.arrays`).

The layer's shapes within the clip window are turned into the feature's frame
and cut into canonical rectangles; identical clips are imaged once per
process.  A clip holding a shape that is not Manhattan in the feature's frame
is counted, not judged.  ``group`` findings on members of an array are settled
once arrays are known (:func:`judge.arrays.edge_findings`): dropped where the
array's own finding is at least as severe, else one per array and check.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.geometry.lattice import NONE
from pitchguard.geometry.lattice.records import LatticeSites
from pitchguard.geometry.rectangles import (
    clip_hits,
    frame_rectangles,
    lattice_rectangles,
    neighbourhood_groups,
    neighbourhood_hashes,
    same_rectangles,
    shape_hashes,
)
from pitchguard.geometry.sites import in_region
from pitchguard.judge.array_checks import array_violations
from pitchguard.judge.arrays import clip_judged, image_fields
from pitchguard.judge.caches import layer_cache
from pitchguard.judge.findings import ArrayShape, Finding
from pitchguard.layout.polygons import PolygonSet
from pitchguard.optics.aerial2d import source_angle
from pitchguard.optics.compact_clips import alone_metrics_batch, clip_window

KEY_DECIMALS = 2
"""Clip rectangles are compared to 0.01 nm (drawn)."""

BATCH = 256
"""Clips imaged and measured together (:func:`optics.compact_clips.alone_metrics_batch`)."""


@dataclass
class AloneVerdicts:
    """What judging one layer's compact features on clips gave."""

    findings: list[Finding] = field(default_factory=list)
    judged: int = 0  # features in no confirmed array judged on clips
    judged_nm: float = 0.0  # their drawn perimeter
    not_manhattan: int = 0
    edge: int = 0  # array members whose surroundings are not their array's: clips too
    inside: int = 0  # array members whose surroundings are their array's: no clip


_CACHES: dict = {}
"""Judgements per deck layer, for the life of the process (see judge.caches)."""

INTERIOR = "interior"
"""A member's clip is its array continued on every side: its array judges it."""


def judge_alone(
    lattice: LatticeSites,
    ps: PolygonSet,
    rule: LayerRule,
    scale: float,
    grid_nm: float,
    region=None,
    plain: bool = False,
) -> AloneVerdicts:
    """Judge, in ``region``, on clips of ``ps`` (drawn nm; it must hold every shape
    within the window): the features of ``lattice`` that
    :func:`judge.arrays.clip_judged` picks, and the members of arrays (confirmed
    lattices) whose clip is not their lattice continued on every side (the last
    rows and columns, or a shape of another kind within reach).

    ``plain`` compares every member's clip with its lattice rectangle by
    rectangle, without first counting its neighbours (the twin the tests hold
    the count to)."""
    out = AloneVerdicts()
    if not rule.image_checks or not len(lattice):
        return out
    f = lattice.features
    pick = clip_judged(lattice, rule)
    member = ~pick
    inside = in_region(f.centroid, region) if region is not None else np.ones(len(f), bool)
    idx = np.flatnonzero(inside)
    if not len(idx):
        return out
    half = clip_window(rule) / scale
    window = (-half, -half, half, half)
    centres = f.centre[idx]
    cache = layer_cache(_CACHES, rule)
    # Features with equal neighbourhoods (by hash), sizes, turn and role are judged once.
    step = 10.0**-KEY_DECIMALS
    shapes = shape_hashes(ps, step)
    radius = half * math.sqrt(2.0)
    hit, bounds = clip_hits(ps, centres, radius)
    # An array member whose neighbourhood is as many shapes of its own as its lattice
    # puts there is inside its array: judged by the unit cell, no clip.
    inner = member[idx] & (not plain)
    if inner.any():
        inner &= _lattice_full(lattice, idx, hit, bounds, shapes, radius)
    rest = np.flatnonzero(~inner)
    counts = np.diff(bounds)[rest]
    sub = np.r_[0, np.cumsum(counts)]
    q = np.repeat(np.arange(len(rest)), counts)
    pairs = np.repeat(bounds[rest], counts) + np.arange(len(q)) - np.repeat(sub[:-1], counts)
    around = neighbourhood_hashes(q, hit[pairs], len(rest), centres[rest], ps, shapes, step)
    basis = np.nan_to_num(np.column_stack([lattice.a1[idx], lattice.a2[idx]]))
    roles = np.column_stack([f.size[idx], f.angle_deg[idx], member[idx], basis])[rest]
    first, group = neighbourhood_groups(around, sub, roles, step)
    first = rest[first]
    keys: list = []
    pending: dict = {}  # clips not judged yet, by source turn: key -> (rects, size, angle)
    for j in first.tolist():
        k = int(idx[j])
        angle = float(f.angle_deg[k])
        w, h = (float(v) for v in f.size[k])
        near = hit[bounds[j] : bounds[j + 1]]
        rects = frame_rectangles(ps, near, centres[j], angle, window, 1.01 * grid_nm, cache)
        key = None
        if rects is not None and member[k]:
            ideal = lattice_rectangles(lattice.a1[k], lattice.a2[k], (w, h), angle, window)
            if same_rectangles(rects, ideal, lattice.tol_nm + 2.0 * step):
                keys.append(INTERIOR)
                continue
        if rects is not None:
            turn = source_angle(rule.exposure, angle)
            key = (np.round(rects, KEY_DECIMALS).tobytes(), round(w, KEY_DECIMALS),
                   round(h, KEY_DECIMALS), turn)  # fmt: skip
            if key not in cache:
                pending.setdefault(turn, {})[key] = (rects * scale, (w * scale, h * scale), angle)
        keys.append(key)
    for clips in pending.values():
        items = list(clips.items())
        for a in range(0, len(items), BATCH):
            part = items[a : a + BATCH]
            ms = alone_metrics_batch(rule, [v[:2] for _, v in part], part[0][1][2])
            for (key, _), m in zip(part, ms, strict=True):
                cache[key] = (m, tuple(array_violations(rule, None, m)))
    verdicts = [
        (None, ()) if key is None else (INTERIOR, ()) if key is INTERIOR else cache[key]
        for key in keys
    ] + [(INTERIOR, ())]
    member_group = np.full(len(idx), len(keys))  # the last verdict: inside its array
    member_group[rest] = group
    group = member_group
    kind = np.array([0 if v[0] is None else 1 if v[0] is INTERIOR else 2 for v in verdicts])[group]
    alone = pick[idx]
    out.not_manhattan = int(((kind == 0) & alone).sum())
    imaged = (kind == 2) & alone
    out.judged = int(imaged.sum())
    out.judged_nm = float(2.0 * f.size[idx][imaged].sum())
    out.edge = int(((kind == 2) & ~alone).sum())
    out.inside = int((kind == 1).sum())
    flagged = np.array([bool(v[1]) for v in verdicts], dtype=bool)[group]
    for j in np.flatnonzero(flagged).tolist():
        m, vs = verdicts[group[j]]
        k = int(idx[j])
        context = "alone" if lattice.lattice[k] == NONE else "group"
        out.findings.append(_finding(rule, vs, m, f, k, context))
    return out


def _lattice_full(lattice, idx, hit, bounds, shapes, radius: float) -> np.ndarray:
    """Per feature ``idx``: whether the shapes found within ``radius`` (``hit``,
    ``bounds``) are all of one shape and exactly as many as the points of its local
    lattice whose box meets that square (a bound on where the lattice ends; a
    feature that fails it is compared rectangle by rectangle)."""
    count = np.diff(bounds)
    out = np.zeros(len(idx), dtype=bool)
    some = np.flatnonzero(count > 0)
    if not len(some):
        return out
    sh = shapes[hit]
    one = np.minimum.reduceat(sh, bounds[some]) == np.maximum.reduceat(sh, bounds[some])
    f = lattice.features
    box = f.bbox[idx][:, 2:] - f.bbox[idx][:, :2]
    key = np.round(np.column_stack([lattice.a1[idx], lattice.a2[idx], box]), 2)
    usable = np.isfinite(key).all(axis=1)
    kinds, which = np.unique(np.nan_to_num(key), axis=0, return_inverse=True)
    expected = np.full(len(kinds), -1)
    for u in np.unique(which.ravel()[usable]).tolist():
        a1, a2, (bw, bh) = kinds[u, :2], kinds[u, 2:4], kinds[u, 4:]
        expected[u] = _lattice_count(a1, a2, radius + 0.5 * bw, radius + 0.5 * bh)
    full = usable & (count == expected[which.ravel()])
    out[some] = one & full[some]
    return out


def _lattice_count(a1, a2, rx: float, ry: float) -> int:
    """Points ``i a1 + j a2`` with ``|x| <= rx`` and ``|y| <= ry``."""
    det = abs(a1[0] * a2[1] - a1[1] * a2[0])
    if det <= 0:
        return -1
    height = det / max(math.hypot(*a1), math.hypot(*a2))
    m = int(math.ceil(math.hypot(rx, ry) / height)) + 1
    i, j = np.meshgrid(np.arange(-m, m + 1), np.arange(-m, m + 1))
    x = i * a1[0] + j * a2[0]
    y = i * a1[1] + j * a2[1]
    return int(np.count_nonzero((np.abs(x) <= rx) & (np.abs(y) <= ry)))


def _finding(rule: LayerRule, vs, m, f, k: int, context: str) -> Finding:
    top = vs[0]
    w, h = (float(v) for v in f.size[k])
    angle = float(f.angle_deg[k])
    t = math.radians(angle)
    u, v = np.array([math.cos(t), math.sin(t)]), np.array([-math.sin(t), math.cos(t)])
    c = np.asarray(f.centre[k], dtype=np.float64)
    outline = tuple(
        (float(p[0]), float(p[1]))
        for p in (
            c + sx * 0.5 * w * u + sy * 0.5 * h * v
            for sx, sy in ((-1, -1), (1, -1), (1, 1), (-1, 1))
        )
    )
    xs, ys = [p[0] for p in outline], [p[1] for p in outline]
    return Finding(
        layer=rule.name,
        source=rule.source,
        exposure=rule.exposure_name,
        check=top.check,
        severity=top.severity,
        pitch_nm=math.nan,
        pitch_max_nm=math.nan,
        width_nm=round(w, 3),
        space_nm=math.nan,
        wafer_pitch_nm=math.nan,
        k1=math.nan,
        orientation_deg=round(angle % 180.0, 3),
        orders=(),
        orders_on_axis=(),
        two_beam_fraction=math.nan,
        cutoff_pitch_nm=math.nan,
        lines=1,
        periodicity=context,
        sites=1,
        run_nm=round(max(w, h), 3),
        bbox_nm=(min(xs), min(ys), max(xs), max(ys)),
        outline_nm=outline,
        limit=f"{top.check}: {top.value:.4g} against {top.limit:.4g}",
        message=top.message,
        hint=_hint(top.check),
        **image_fields(m),
        violations=tuple(vs),
        context=context,
        threshold=round(m.threshold, 5),
        cut_origin_nm=(float(c[0]), float(c[1])),
        array=ArrayShape(
            lattice=context,
            a1_nm=(math.nan, math.nan),
            a2_nm=(math.nan, math.nan),
            feature_nm=(round(w, 3), round(h, 3)),
            feature_angle_deg=round(angle, 3),
            features=1,
            columns=1,
            rows=1,
            orders=(),
            worst_angle_deg=math.nan,
        ),
    )


def _hint(check: str) -> str:
    if check == "feature-not-printed":
        return "enlarge the feature; a feature on its own images worse than one in an array"
    if check == "features-bridged":
        return "move the feature away from the shapes around it, or shrink it"
    if check == "cd-error":
        return "bias the drawn size (OPC), or check the deck's anchor for this layer"
    return (
        "enlarge the feature or give it room; alone or at an edge it images worse than in an array"
    )
