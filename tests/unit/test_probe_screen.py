"""The probe screen (geometry.cuts._may_change) is a fast path: probing only the
sites where an edge ends in, or slants across, the probed rectangle must give
exactly what probing every site gives.

Checked on random combs, bars, stubs and slanted lines, on hypothesis line
arrays in every placement, and on the manufactured SkyWater 130 nm cells in
tests/fixtures/sky130/ (Apache-2.0).
"""

from __future__ import annotations

import glob

import numpy as np
import pytest
from hypothesis import given, settings

from decks import SKY130_CELLS, SKY130_LAYERS
from pitchguard.geometry.cuts import site_cuts
from pitchguard.geometry.features import build_features
from pitchguard.geometry.sites import find_sites
from pitchguard.layout.polygons import PolygonSet
from pitchguard.layout.reader import read_layout
from strategies import line_arrays, placements, polygons


def _agree(edges, reach, probe, near, grid=1.0) -> int:
    sites, _ = find_sites(edges, probe, reach, grid)
    fast = site_cuts(edges, sites, reach, grid, probe_nm=probe, near_nm=near)
    plain = site_cuts(edges, sites, reach, grid, probe_nm=probe, near_nm=near, screen=False)
    assert np.array_equal(fast.changes, plain.changes)
    assert np.array_equal(fast.which, plain.which)
    assert fast.cuts == plain.cuts
    return int(plain.changes.sum())


def _rect(x0, y0, x1, y1):
    return np.array([(x0, y0), (x1, y0), (x1, y1), (x0, y1)], dtype=np.float64)


def test_random_junctions_and_slants_agree():
    rng = np.random.default_rng(7)
    changed = 0
    for trial in range(30):
        shapes = []
        for _ in range(rng.integers(4, 10)):
            x, y = rng.integers(0, 150) * 5, rng.integers(0, 150) * 5
            w, h = rng.integers(20, 60) * 5, rng.integers(40, 300) * 5
            shapes.append(_rect(x, y, x + w, y + h))
            if rng.random() < 0.5:  # a bar across its end, touching or just short
                gap = rng.choice([0, 140, 300])
                shapes.append(_rect(x - 200, y + h + gap, x + w + 300, y + h + gap + 150))
        if trial % 3 == 0:  # a slanted line through the rest
            th = np.radians(rng.integers(5, 85))
            c, s = np.cos(th), np.sin(th)
            box = _rect(0, 0, 100, 2000) @ np.array([[c, s], [-s, c]])
            shapes.append(np.round(box + rng.integers(0, 150, size=2) * 5))
        edges = build_features(PolygonSet.from_arrays(shapes), 1.0)
        changed += _agree(edges, 900.0, 165.0, 330.0)
    assert changed > 20  # the probe finds changes to agree on


@settings(max_examples=40, deadline=None)
@given(line_arrays(), placements())
def test_line_arrays_in_any_placement_agree(array, placement):
    edges = build_features(PolygonSet.from_arrays(polygons(array, placement)), 1.0)
    _agree(edges, 400.0, 125.0, 250.0)


@pytest.mark.filterwarnings("ignore:Unsupported record")  # the cells' NODE records
def test_manufactured_cells_agree():
    files = sorted(glob.glob(str(SKY130_CELLS / "*.gds")))
    assert files
    changed = 0
    for path in files[:8]:
        specs = [tuple(int(v) for v in src.split("/")) for _, src in SKY130_LAYERS]
        layout = read_layout(path, specs)
        for spec in specs:
            ps = layout.layers.get(spec)
            if ps is None or len(ps) == 0:
                continue
            edges = build_features(ps, layout.grid_nm)
            changed += _agree(edges, 1000.0, 177.0, 354.0, layout.grid_nm)
    assert changed > 50
