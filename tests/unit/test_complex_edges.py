"""Edges with several nearest neighbours: the array version against its plain twin.

``geometry.complex_edges.resolve_complex_arrays`` must give the pieces of
``geometry.edge_frames.resolve_complex`` exactly (same floats, same order), on
random candidate sets built to hit ties, touching ends, slivers of about the
snapping grid and sides with no candidate at all.
"""

from __future__ import annotations

import numpy as np
import pytest

from pitchguard.geometry.complex_edges import resolve_complex_arrays
from pitchguard.geometry.edge_frames import resolve_complex


def _random_case(rng, n_edges):
    length = rng.choice([0.3, 40.0, 100.0, 250.0], size=n_edges + 3)
    edges = rng.permutation(n_edges + 3)[:n_edges]
    grid = np.array([0.0, 0.2, 10.0, 10.3, 25.0, 50.0, 50.4, 90.0, 100.0, 120.0, 250.0])
    rows = []
    for e in edges:
        for _ in range(rng.integers(0, 7)):
            a, b = np.sort(rng.choice(grid, 2, replace=False) + rng.choice([0, 0, -5.0, 0.1], 2))
            if b - a <= 0.25:
                continue
            rows.append(
                (
                    int(e),
                    int(rng.choice([-1, 1])),
                    float(a),
                    float(b),
                    float(rng.choice([30.0, 45.0, 45.0, 60.0])),
                    bool(rng.random() < 0.7),
                    int(rng.integers(0, 4)),
                )
            )
    # Exact ties but for the neighbour found: the first found must win.
    rows += [(*r[:6], r[6] + 10) for r in rows if rng.random() < 0.3]
    rng.shuffle(rows)
    return length, edges, rows


@pytest.mark.parametrize("seed", range(80))
def test_arrays_give_the_plain_pieces(seed):
    rng = np.random.default_rng(seed)
    length, edges, rows = _random_case(rng, int(rng.integers(1, 12)))
    eps, min_run = 0.25, 20.0
    # The plain twin's input: candidates per edge, edges in order of first candidate,
    # then those without one (as geometry.sites builds it).
    plain_rows: dict[int, list] = {}
    for r in rows:
        plain_rows.setdefault(r[0], []).append(r[1:])
    for e in edges.tolist():
        plain_rows.setdefault(e, [])
    sites, flat = resolve_complex(plain_rows, length, min_run, eps)
    cols = list(zip(*rows, strict=True)) if rows else [[]] * 7
    cands = tuple(np.asarray(c) for c in cols)
    cands = (
        cands[0].astype(np.int64),
        cands[1].astype(np.int64),
        *(c.astype(float) for c in cands[2:5]),
        cands[5].astype(bool),
        cands[6].astype(np.int64),
    )
    a_sites, a_flat = resolve_complex_arrays(list(plain_rows), length, cands, min_run, eps)
    got_sites = list(zip(*(v.tolist() for v in a_sites), strict=True))
    got_flat = list(zip(*(v.tolist() for v in a_flat), strict=True))
    assert got_sites == [tuple(s) for s in sites]
    assert got_flat == [tuple(f) for f in flat]


def test_the_random_cases_hold_the_cases_that_matter():
    """The cases above are not trivial: both kinds of piece, several per edge."""
    n_sites = n_flat = multi = 0
    for seed in range(40):
        rng = np.random.default_rng(seed)
        length, edges, rows = _random_case(rng, int(rng.integers(1, 12)))
        plain_rows: dict[int, list] = {}
        for r in rows:
            plain_rows.setdefault(r[0], []).append(r[1:])
        for e in edges.tolist():
            plain_rows.setdefault(e, [])
        sites, flat = resolve_complex(plain_rows, length, 20.0, 0.25)
        n_sites += len(sites)
        n_flat += len(flat)
        per_edge = np.bincount([s[0] for s in sites] + [f[0] for f in flat])
        multi += int((per_edge >= 2).sum())
    assert n_sites > 50 and n_flat > 50 and multi > 20
