"""Placement origins packed into rectangular arrays (outputs/marker_arrays.py).

The packing must be exact: the arrays expand to the given origins, each once
(set identity, checked directly).  A full lattice must come out as one array:
a GDSII AREF holds ``columns x rows`` placements from one corner and two
steps (the GDSII stream format's AREF record).
"""

from __future__ import annotations

import numpy as np
import pytest

from pitchguard.outputs.marker_arrays import MAX_COUNT, Grid, pack


def _expanded(grids: list[Grid]) -> np.ndarray:
    return np.concatenate([g.origins() for g in grids]) if grids else np.zeros((0, 2), np.int64)


def _same_set(a: np.ndarray, b: np.ndarray) -> bool:
    a = a[np.lexsort(a.T[::-1])]
    b = np.unique(b, axis=0)
    return a.shape == b.shape and bool((a == b).all())


@pytest.mark.parametrize("seed", range(40))
def test_arrays_expand_to_the_origins_each_once(seed):
    rng = np.random.default_rng(seed)
    parts = []
    for _ in range(rng.integers(1, 5)):  # lattices with holes, and scattered points
        nx, ny = rng.integers(1, 30, size=2)
        dx, dy = rng.integers(1, 500, size=2)
        x0, y0 = rng.integers(-5000, 5000, size=2)
        i, j = np.meshgrid(np.arange(nx), np.arange(ny), indexing="ij")
        pts = np.column_stack([x0 + dx * i.ravel(), y0 + dy * j.ravel()])
        keep = rng.random(len(pts)) > rng.choice([0.0, 0.1, 0.5])
        parts.append(pts[keep])
    parts.append(rng.integers(-9000, 9000, size=(rng.integers(0, 50), 2)))
    origins = np.concatenate(parts).astype(np.int64)
    got = _expanded(pack(origins))
    assert len(got) == len(np.unique(origins, axis=0))  # each once
    assert _same_set(got, origins)


def test_a_full_lattice_is_one_array():
    g = Grid(-300, 700, 250, 400, 37, 11)
    assert pack(g.origins()[::-1]) == [g]


def test_runs_longer_than_gdsii_allows_are_cut():
    """GDSII stores columns and rows as 16-bit integers (stream format)."""
    n = 2 * MAX_COUNT + 5
    origins = np.column_stack([np.arange(n) * 3, np.zeros(n, np.int64)])
    grids = pack(origins)
    assert all(g.columns <= MAX_COUNT and g.rows <= MAX_COUNT for g in grids)
    assert [g.columns for g in grids] == [MAX_COUNT, MAX_COUNT, 5]
    assert _same_set(_expanded(grids), origins)


def test_nothing_gives_nothing():
    assert pack(np.zeros((0, 2), np.int64)) == []
