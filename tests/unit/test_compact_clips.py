"""Compact features on their own, judged on a 2-D clip.

Check values:

* The clip is imaged in a periodic window, so a feature alone in it is an
  array whose period is the window's: its metrics must equal those of that
  array's unit cell by the array engine (``resist2d.cell_metrics``, itself
  checked against an independent 2-D implementation in
  tests/integration/test_array_probe.py).
* The fast path (truncated coherent systems at the sampled lines) equals
  the plain Abbe sum (``plain=True``) within the truncation bound.
* The batched path (``alone_metrics_batch``: arrays over clip x focus x
  threshold) equals its plain twin, ``alone_metrics`` one clip at a time, to
  rounding, and a clip's result does not depend on the clips batched with it
  (a tiled scan must equal the whole one).
* Physics of a lone hole on a 6 % attenuated PSM (from memory, any text on
  attenuated phase-shift masks): the background transmits sqrt(0.06) = 0.245
  of the amplitude in opposite phase; a hole much smaller than lambda/NA
  passes too little light to outweigh it and does not print, while one of
  about lambda/(2 NA) and larger does.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from decks import DEMO_DECK
from pitchguard.deck import load_deck
from pitchguard.geometry.lattice import compact_features, lattice_sites
from pitchguard.judge.compact_clips import judge_alone
from pitchguard.layout.polygons import PolygonSet
from pitchguard.optics.cells2d import array_cell
from pitchguard.optics.compact_clips import alone_metrics, alone_metrics_batch, feature_cell
from pitchguard.optics.point_images import KERNEL_TOL
from pitchguard.optics.resist2d import cell_metrics

DIRS = ((-1, -1), (1, -1), (1, 1), (-1, 1))


@pytest.fixture(scope="module")
def via1():
    return next(r for r in load_deck(DEMO_DECK).layers if r.name == "via1")


@pytest.mark.parametrize("w", [50.0, 80.0, 110.0])
def test_a_lone_feature_equals_the_array_of_the_window_period(via1, w):
    rects = np.array([[-w / 2, -w / 2, w / 2, w / 2]])
    clip = alone_metrics(via1, rects, (w, w), 0.0)
    plain = alone_metrics(via1, rects, (w, w), 0.0, plain=True)
    cell = feature_cell(via1, rects)
    ref = cell_metrics(via1, array_cell(cell.px_nm, cell.py_nm, w, w))[0]
    for m in (clip, plain):
        assert m.missing == ref.missing and m.merged == ref.merged
        assert m.threshold == pytest.approx(ref.threshold, abs=1e-3)
        if not ref.missing:
            assert m.size_x_nm == pytest.approx(ref.size_x_nm, abs=0.5)
            assert m.nils_x == pytest.approx(ref.nils_x, rel=0.01)
            # EL and DOF read the same windows on another threshold grid.
            assert m.el_pct == pytest.approx(ref.el_pct, abs=1.5)
            assert m.dof_nm == pytest.approx(ref.dof_nm, rel=0.1)
    assert clip.missing == (w < 0.5 * via1.exposure.lambda_over_na_nm)


def test_a_neighbour_close_enough_merges_and_one_far_does_not(via1):
    w = 80.0
    for gap, merged in ((10.0, True), (200.0, False)):
        rects = np.array(
            [[-w / 2, -w / 2, w / 2, w / 2], [w / 2 + gap, -150, w / 2 + gap + 300, 150]]
        )
        m = alone_metrics(via1, rects, (w, w), 0.0)
        assert m.merged == merged and not m.missing, gap
        p = alone_metrics(via1, rects, (w, w), 0.0, plain=True)
        assert p.merged == merged


def test_the_clip_turns_the_source_with_the_feature():
    deck = load_deck(DEMO_DECK)
    m1 = next(r for r in deck.layers if r.name == "metal1")  # x dipole
    w = 90.0
    rects = np.array([[-w / 2, -w / 2, w / 2, w / 2], [-w / 2, 90.0, w / 2, 90.0 + w]])
    a = alone_metrics(m1, rects, (w, w), 0.0)
    b = alone_metrics(m1, rects, (w, w), 90.0)
    pa = alone_metrics(m1, rects, (w, w), 90.0, plain=True)
    # The fast path holds the image to KERNEL_TOL, which moves a printed edge by at
    # most KERNEL_TOL / slope = KERNEL_TOL w / (NILS T): up to about 1 nm on this
    # dim clip (the x dipole turned across a 90 nm hole; threshold 0.028).
    bound = 2 * KERNEL_TOL * w / (pa.nils_x * pa.threshold)
    assert b.missing == pa.missing
    assert b.size_x_nm == pa.size_x_nm or abs(b.size_x_nm - pa.size_x_nm) <= bound
    assert not math.isclose(a.contrast, b.contrast, abs_tol=1e-3)


def _random_clips(rng, n):
    clips = []
    for _ in range(n):
        w = float(rng.choice([50.0, 80.0, 110.0]))
        h = w if rng.random() < 0.7 else 1.5 * w
        rects = [(-w / 2, -h / 2, w / 2, h / 2)]
        for _ in range(int(rng.integers(0, 4))):
            x, y = rng.uniform(-200.0, 200.0, 2)
            if abs(x) > 0.5 * w + 30 or abs(y) > 0.5 * h + 30:
                rects.append((x - 30, y - 30, x + 30, y + 30))
        clips.append((np.array(rects), (w, h)))
    return clips


def _same(a, b, tol):
    for x, y in zip(dataclasses.astuple(a), dataclasses.astuple(b), strict=True):
        if isinstance(x, bool) or not (math.isfinite(x) and math.isfinite(y)):
            assert x == y or (math.isnan(x) and math.isnan(y)), (a, b)
        else:
            assert x == pytest.approx(y, rel=tol, abs=tol), (a, b)


@pytest.mark.parametrize("layer", ["via1", "metal1"])
def test_the_batched_clips_equal_their_plain_twin_whatever_the_batch(layer):
    rule = next(r for r in load_deck(DEMO_DECK).layers if r.name == layer)
    rng = np.random.default_rng(20261205)
    clips = _random_clips(rng, 24)
    batch = alone_metrics_batch(rule, clips, 30.0)
    for clip, m in zip(clips, batch, strict=True):
        _same(m, alone_metrics(rule, *clip, 30.0), 1e-9)
    # The same clips in another batch, in another order, and alone: bit for bit.
    again = alone_metrics_batch(rule, clips[::-3], 30.0)
    for m, n in zip(batch[::-3], again, strict=True):
        _same(m, n, 0.0)
    _same(batch[5], alone_metrics_batch(rule, [clips[5]], 30.0)[0], 0.0)


def test_counting_an_array_members_neighbours_picks_the_members_it_should():
    """The count that skips members inside their array (as many shapes of their own
    as their lattice puts within reach) against comparing every member's clip
    rectangle by rectangle (``plain``): the same findings and clips, on a square
    array, a turned one, a hexagonal one, an array with a via missing and one
    with a pad of another kind beside it (the demo via1 exposure)."""
    rule = next(r for r in load_deck(DEMO_DECK).layers if r.name == "via1")
    polys = []

    def square(cx, cy, w, turn=0.0):
        t = math.radians(turn)
        u, v = np.array([math.cos(t), math.sin(t)]), np.array([-math.sin(t), math.cos(t)])
        c = np.array([cx, cy])
        return np.array([c + sx * w / 2 * u + sy * w / 2 * v for sx, sy in DIRS])

    for i in range(8):
        for j in range(8):
            polys.append(square(i * 150.0, j * 150.0, 64.0))  # square
            if (i, j) != (3, 4):
                polys.append(square(3000 + i * 150.0, j * 150.0, 64.0))  # one missing
            polys.append(square(6000 + i * 150.0, j * 150.0 + (75.0 if i % 2 else 0.0), 64.0))
            polys.append(square(9000 + i * 150.0, j * 150.0, 64.0))  # pad beside
            t = math.radians(30.0)
            x, y = i * 150.0, j * 150.0
            polys.append(
                square(
                    12000 + x * math.cos(t) - y * math.sin(t),
                    x * math.sin(t) + y * math.cos(t),
                    64.0,
                    30.0,
                )
            )
    polys.append(np.array([(10250.0, 0.0), (11000.0, 0.0), (11000.0, 900.0), (10250.0, 900.0)]))
    ps = PolygonSet.from_arrays(polys)
    compact = compact_features(ps, 1.0, rule.compact_max_nm)
    lattice = lattice_sites(
        ps, 1.0, rule.compact_max_nm, rule.interaction_range_nm, compact=compact
    )
    fast = judge_alone(lattice, ps, rule, 1.0, 1.0)
    plain = judge_alone(lattice, ps, rule, 1.0, 1.0, plain=True)
    assert fast.edge == plain.edge > 0
    assert fast.inside == plain.inside > 0
    assert (fast.judged, fast.not_manhattan) == (plain.judged, plain.not_manhattan)
    assert fast.findings == plain.findings
