"""Connected components of an edge list (geometry.spatial.components), against an independent one.

Reference: scipy.sparse.csgraph.connected_components, a separate implementation
(breadth-first search in compiled code).
"""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from pitchguard.geometry.spatial import components


def _scipy(n, a, b):
    graph = coo_matrix((np.ones(len(a)), (a, b)), shape=(n, n))
    return connected_components(graph, directed=False)


MIN_CASES = 50  # of 300 seeded graphs, each kind below must occur at least this often


def test_labels_equal_scipys_on_random_graphs():
    """Graphs of every kind the tally counts are compared: one component holding
    most nodes (long chains of labels to join) or none, self-loops, repeated edges."""
    rng = np.random.default_rng(11)
    kinds = {"giant": 0, "fragmented": 0, "self-loops": 0, "repeated edges": 0}
    for _ in range(300):
        n = int(rng.integers(1, 400))
        m = int(rng.integers(0, 2 * n))
        a = rng.integers(0, n, m)
        b = rng.integers(0, n, m)  # self-loops and repeated edges included
        count, label = components(n, a, b)
        ref_count, ref_label = _scipy(n, a, b)
        assert count == ref_count
        np.testing.assert_array_equal(label, ref_label)  # same numbering, too
        kinds["giant" if np.bincount(ref_label).max() > n / 2 else "fragmented"] += 1
        kinds["self-loops"] += bool(np.any(a == b))
        pair = np.minimum(a, b) * n + np.maximum(a, b)
        kinds["repeated edges"] += len(np.unique(pair)) < m
    assert min(kinds.values()) >= MIN_CASES, kinds


def test_long_shuffled_chains_and_a_star():
    """Chains are the slow case for label propagation (one step per round);
    hooking with pointer jumping must still join them whole."""
    rng = np.random.default_rng(3)
    n = 200_000
    order = rng.permutation(n)
    a, b = order[:-1], order[1:]  # one chain through every node, in random order
    count, label = components(n, a, b)
    assert count == 1 and not label.any()
    # Two chains (even and odd nodes, each in falling order) and a star.
    ev = np.arange(0, 1000, 2)[::-1]
    od = np.arange(1, 1000, 2)[::-1]
    star = np.arange(1001, 1100)
    a = np.concatenate([ev[:-1], od[:-1], np.full(len(star), 1000)])
    b = np.concatenate([ev[1:], od[1:], star])
    count, label = components(1100, a, b)
    ref_count, ref_label = _scipy(1100, a, b)
    assert count == ref_count == 3
    np.testing.assert_array_equal(label, ref_label)


def test_no_edges_and_no_nodes():
    count, label = components(5, np.zeros(0, int), np.zeros(0, int))
    assert count == 5
    np.testing.assert_array_equal(label, np.arange(5))
    count, label = components(0, np.zeros(0, int), np.zeros(0, int))
    assert count == 0 and label.shape == (0,)
