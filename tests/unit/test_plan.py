"""Tile planning: the tile-size cost model and the memory cap.

Check values come from outside the model: the number of phases at which a
tile grid meets an array is counted by brute force; the distinct tiles of a
hierarchical chip are counted from the content keys of every tile (the
ground truth the scan itself uses).
"""

from __future__ import annotations

import math
import random

import pytest

from chips import build_bench_chip  # tests/ is on sys.path (conftest)
from decks import BENCH_DECK
from pitchguard.deck import parse_deck
from pitchguard.errors import LayoutError
from pitchguard.geometry.sites import SITE_CELL_NM
from pitchguard.run.plan import (
    DENSITY_MARGIN,
    KB_PER_TILE_SHAPE,
    KEY_COST_SHAPES,
    PARENT_BASE_MB,
    SPLIT_SMALL_SHAPES,
    TILE_COST_SHAPES,
    WORKER_BASE_MB,
    Structure,
    phase_fraction,
    plan_tiles,
    tile_halo_nm,
    tile_work,
    tiles_for,
)
from pitchguard.run.tasks import keys_task, structure_task

DECK = parse_deck(BENCH_DECK)
LAYERS = [(r.layer, r.datatype) for r in DECK.layers]


@pytest.fixture(scope="module")
def chip(tmp_path_factory):
    path = tmp_path_factory.mktemp("plan") / "chip.oas"
    build_bench_chip(path, 3.5e5)  # 2 x 2 blocks of 210 um with arrays nested inside
    return path, structure_task(str(path), None, LAYERS, 10**9)


def test_phase_share_matches_a_brute_force_count():
    rng = random.Random(5)
    for _ in range(300):
        pitch = rng.randrange(50, 5000) * 10
        t = rng.randrange(1, 6) * SITE_CELL_NM
        count = rng.randrange(1, 400)
        span = count * pitch / t
        # Tile origins k t meet the array (period ``pitch``) at these phases.
        phases = len({(k * int(t)) % pitch for k in range(pitch)})
        expect = 1.0 if span <= 1 else min(span, phases + 1) / span
        assert phase_fraction(pitch, count, t) == pytest.approx(expect)


def test_nested_arrays_give_a_positive_cost_below_a_flat_scan(chip):
    _, st = chip
    halo = tile_halo_nm(DECK)
    x0, y0, x1, y1 = st.extent_nm
    shares = []
    for k in range(1, 6):
        t = k * SITE_CELL_NM
        tiles = ((x1 - x0) / t + 1) * ((y1 - y0) / t + 1)
        flat = st.shapes * ((t + 2 * halo) / t) ** 2 + (KEY_COST_SHAPES + TILE_COST_SHAPES) * tiles
        work = tile_work(st, t, halo)
        assert 0 < work <= flat
        shares.append(work / flat)
    # 10 um tiles meet the 210 um blocks and the arrays in them at few phases.
    assert shares[0] < 0.5


def test_auto_tile_size_is_near_the_best_by_real_content_keys(chip):
    """The planner's pick costs at most 25 % more than the best size, where each
    size's cost uses the distinct tiles counted from real content keys."""
    path, st = chip
    halo = tile_halo_nm(DECK)
    x0, y0, x1, y1 = st.extent_nm
    density = st.shapes / ((x1 - x0) * (y1 - y0))
    real = {}
    for k in range(1, 6):
        t = k * SITE_CELL_NM
        tiles = tiles_for(st.extent_nm, t)
        distinct = len(set(keys_task(str(path), None, LAYERS, tiles, halo)))
        real[t] = (
            distinct * density * (t + 2 * halo) ** 2
            + KEY_COST_SHAPES * len(tiles)
            + TILE_COST_SHAPES * distinct
        )
    picked, jobs = plan_tiles(st, halo, 2, None, None)
    assert jobs == 2
    assert real[picked] <= 1.25 * min(real.values()), (picked, real)


def _smallest_worker_mb(st, halo) -> float:
    """A worker scanning the smallest tile (one site cell and its halo, both sides),
    by the memory model of run.plan: WORKER_BASE_MB plus KB_PER_TILE_SHAPE per
    shape, at DENSITY_MARGIN times the layout's mean density."""
    x0, y0, x1, y1 = st.extent_nm
    density = DENSITY_MARGIN * st.shapes / ((x1 - x0) * (y1 - y0))  # shapes per nm^2
    shapes = density * (SITE_CELL_NM + 2 * halo) ** 2
    return WORKER_BASE_MB + shapes * KB_PER_TILE_SHAPE / 1024.0


def test_memory_cap_drops_workers_then_refuses(chip):
    _, st = chip
    halo = tile_halo_nm(DECK)
    _, jobs_free = plan_tiles(st, halo, 4, None, None)
    assert jobs_free == 4
    _, jobs_roomy = plan_tiles(st, halo, 4, 8000, None)
    assert jobs_roomy == 4
    # The cap must hold the parent (PARENT_BASE_MB) and n workers of at least w MB
    # each; 1 MB either side of a boundary is far above float round-off.
    w = _smallest_worker_mb(st, halo)
    _, jobs = plan_tiles(st, halo, 4, PARENT_BASE_MB + 1.5 * w, None)
    assert jobs == 1  # room for one worker, not two
    _, jobs = plan_tiles(st, halo, 4, PARENT_BASE_MB + 2 * w - 1.0, None)
    assert jobs == 1
    _, jobs = plan_tiles(st, halo, 4, PARENT_BASE_MB + 2 * w + 1.0, None)
    assert jobs == 2
    _, jobs = plan_tiles(st, halo, 4, PARENT_BASE_MB + w + 1.0, None)
    assert jobs == 1
    # Below the parent and one worker: refused, naming what a scan needs.
    with pytest.raises(LayoutError, match="too small") as info:
        plan_tiles(st, halo, 4, PARENT_BASE_MB + w - 1.0, None)
    assert f"about {math.ceil(PARENT_BASE_MB + w)} MB" in str(info.value)


def test_smaller_caps_never_get_larger_tiles(chip):
    _, st = chip
    halo = tile_halo_nm(DECK)
    sizes = [plan_tiles(st, halo, 1, cap, None)[0] for cap in (2000, 1000, 700, 560, 480)]
    assert sizes == sorted(sizes, reverse=True)


def test_asked_tile_size_is_rounded_up_to_whole_site_cells(chip):
    _, st = chip
    t, _ = plan_tiles(st, tile_halo_nm(DECK), 1, None, 25.0)
    assert t == math.ceil(25_000 / SITE_CELL_NM) * SITE_CELL_NM


@pytest.mark.parametrize(
    ("extent", "tile", "region"),
    [
        ((0, 0, 95_000, 47_000), 10_000, None),
        ((0, 0, 95_000, 47_000), 10_000, (3_300, 7_700, 41_900, 18_100)),
        ((-5, -5, 5, 5), 10_000, None),
        ((0, 0, 30_000, 5_000), 10_000, None),
        ((0, 0, 5_000, 30_000), 10_000, None),
    ],
)
def test_neighbouring_tiles_are_those_an_rtree_finds_touching(extent, tile, region):
    """Reference: an R-tree query of each tile's box, widened by 1e-3 nm (tiles that
    share a side or a corner touch)."""
    import numpy as np

    from pitchguard.geometry.spatial import build_rtree, query_pairs
    from pitchguard.run.merge import neighbouring_tiles

    tiles = tiles_for(extent, tile, region)
    got = list(zip(*(v.tolist() for v in neighbouring_tiles(tiles)), strict=True))
    b = np.asarray(tiles, dtype=np.float64)
    qi, qj = query_pairs(
        build_rtree(b[:, :2] - 1e-3, b[:, 2:] + 1e-3), b[:, :2] - 1e-3, b[:, 2:] + 1e-3
    )
    want = set(zip(qi[qi < qj].tolist(), qj[qi < qj].tolist(), strict=True))
    assert len(got) == len(set(got)) and set(got) == want


def test_a_small_layout_is_split_between_workers_only_when_it_has_the_shapes():
    """A small layout is one tile for one worker; with two workers and at least
    SPLIT_SMALL_SHAPES shapes, tiles of about a quarter of its area each (arithmetic:
    sqrt(44 x 130 um^2 / 4) = 37.8 um, rounded up to whole site cells)."""
    extent = (0.0, 0.0, 44_000.0, 130_000.0)

    def plan(shapes, jobs):
        st = Structure(1e-9, 1.0, ("TOP",), extent, "gds", shapes=shapes)
        return plan_tiles(st, 1000.0, jobs, None, None)[0]

    whole = math.ceil(130_000.0 / SITE_CELL_NM) * SITE_CELL_NM
    assert plan(10_000, 1) == whole
    assert plan(SPLIT_SMALL_SHAPES - 1, 2) == whole
    split = plan(10_000, 2)
    assert split == math.ceil(math.sqrt(44_000.0 * 130_000.0 / 4) / SITE_CELL_NM) * SITE_CELL_NM
    assert len(tiles_for(extent, split)) >= 4


def test_hint_keys_split_among_workers_in_runs_of_pitch():
    """The hints left once every tile is in are shared among the workers in runs of
    layer and pitch: each key in exactly one part, every part's pitches a
    contiguous range (their ideal gratings overlap only where runs meet)."""
    from pitchguard.run.tiled import split_by_pitch

    rng = random.Random(7)
    keys = [
        (layer, (("low-nils",), 50.0, rng.uniform(20, 60), p, 0.0, 1.0, None))
        for layer in ("M1", "M2")
        for p in [rng.uniform(80, 300) for _ in range(25)] + [math.nan, math.inf]
    ]
    for n in (1, 2, 3, 8):
        parts = split_by_pitch(keys, n)
        assert 1 <= len(parts) <= n
        assert sorted(map(repr, (k for part in parts for k in part))) == sorted(map(repr, keys))
        for a, b in zip(parts, parts[1:], strict=False):
            la, lb = a[-1], b[0]
            # Each part ends at or below where the next begins (same layer), nan last.
            if la[0] == lb[0] and not math.isnan(lb[1][3]):
                assert la[1][3] <= lb[1][3]
            else:
                assert la[0] < lb[0] or math.isnan(lb[1][3])
