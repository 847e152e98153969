"""Block tables: hand-worked densities, undirected counting, brute force over definitions."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.partition import Partition


def _brute_force(dense: np.ndarray, is_directed: bool, labels: np.ndarray, n_pos: int):
    """Block tables by visiting every cell of every block (definition, W&F 1994 sec. 10.2)."""
    ties = np.zeros((n_pos, n_pos), dtype=int)
    possible = np.zeros((n_pos, n_pos), dtype=int)
    total = np.zeros((n_pos, n_pos))
    maximum = np.zeros((n_pos, n_pos))
    n = labels.size
    for k in range(n_pos):
        for l in range(n_pos):
            for i in np.flatnonzero(labels == k):
                for j in np.flatnonzero(labels == l):
                    if i == j:
                        continue
                    # Undirected: the unordered pair {i, j} counts once in a
                    # diagonal block, and once in each of (k, l) and (l, k).
                    if not is_directed and k == l and i > j:
                        continue
                    possible[k, l] += 1
                    if dense[i, j] != 0:
                        ties[k, l] += 1
                        total[k, l] += dense[i, j]
                        maximum[k, l] = max(maximum[k, l], dense[i, j])
    assert n == dense.shape[0]
    return ties, possible, total, maximum


def test_diagonal_block_of_four_with_nine_ties_has_density_three_quarters():
    # Common practice (Wasserman & Faust 1994, sec. 10.2): a diagonal block of 4
    # actors has 4 * 3 = 12 possible directed ties, so 9 ties give 0.75.
    a = np.ones((4, 4)) - np.eye(4)
    a[0, 1] = a[1, 2] = a[2, 3] = 0  # 12 - 3 = 9 ties
    stats = block_stats([sp.csr_array(a)], [True], Partition(np.zeros(4, dtype=int), 1))
    assert stats.possible[0, 0, 0] == 12
    assert stats.ties[0, 0, 0] == 9
    assert stats.density[0, 0, 0] == pytest.approx(0.75)


def test_off_diagonal_block_of_three_by_five():
    # Common practice: a 3 x 5 off-diagonal block has 15 possible ties; 6 ties give 0.4.
    a = np.zeros((8, 8))
    rows, cols = [0, 0, 1, 1, 2, 2], [3, 4, 5, 6, 7, 3]
    a[rows, cols] = [1, 2, 3, 1, 1, 5]
    labels = np.array([0, 0, 0, 1, 1, 1, 1, 1])
    stats = block_stats([sp.csr_array(a)], [True], Partition(labels, 2))
    assert stats.possible[0, 0, 1] == 15
    assert stats.ties[0, 0, 1] == 6
    assert stats.density[0, 0, 1] == pytest.approx(0.4)
    assert stats.total[0, 0, 1] == pytest.approx(13.0)
    assert stats.maximum[0, 0, 1] == 5.0
    assert stats.mean_value[0, 0, 1] == pytest.approx(13 / 15)
    # The reverse block is empty: no tie, maximum 0 by convention.
    assert stats.ties[0, 1, 0] == 0 and stats.maximum[0, 1, 0] == 0.0


def test_undirected_counts_each_pair_once():
    # Common practice: an undirected diagonal block of n_k actors has
    # n_k (n_k - 1) / 2 possible ties; a triangle in 3 actors is complete.
    g = nx.Graph([(0, 1), (1, 2), (0, 2), (2, 3)])
    g.add_node(4)
    a = sp.csr_array(nx.to_scipy_sparse_array(g, nodelist=range(5), dtype=float))
    stats = block_stats([a], [False], Partition(np.array([0, 0, 0, 1, 1]), 2))
    assert stats.possible[0].tolist() == [[3, 6], [6, 1]]
    assert stats.ties[0].tolist() == [[3, 1], [1, 0]]
    assert stats.density[0, 0, 0] == pytest.approx(1.0)
    # Whole-network density as networkx computes it (reference library).
    assert stats.network_density[0] == pytest.approx(nx.density(g))


def test_whole_network_density_matches_networkx_directed():
    g = nx.gnp_random_graph(15, 0.2, seed=3, directed=True)
    a = sp.csr_array(nx.to_scipy_sparse_array(g, nodelist=range(15), dtype=float))
    stats = block_stats([a], [True], Partition(np.arange(15) % 3, 3))
    # Reference: networkx.density = m / (n (n - 1)) for a digraph.
    assert stats.network_density[0] == pytest.approx(nx.density(g))
    assert stats.ties.sum() == g.number_of_edges()


def test_singleton_and_empty_positions_have_no_possible_ties():
    a = sp.csr_array(np.array([[0, 1, 0], [1, 0, 1], [0, 1, 0]], dtype=float))
    stats = block_stats([a], [False], Partition(np.array([0, 0, 1]), 3))
    assert stats.possible[0, 1, 1] == 0 and stats.possible[0, 2, 2] == 0
    assert stats.density[0, 1, 1] == 0.0  # 0 by convention where nothing is possible
    assert stats.sizes.tolist() == [2, 1, 0]


def test_median_positive_value():
    a = np.zeros((4, 4))
    a[0, 1] = a[1, 0] = 1
    a[1, 2] = a[2, 1] = 3
    a[2, 3] = a[3, 2] = 7
    stats = block_stats([sp.csr_array(a)], [False], Partition(np.zeros(4, dtype=int), 1))
    # numpy.median of the three unordered-pair values (reference library).
    assert stats.network_median_positive[0] == np.median([1, 3, 7])
    assert stats.network_total[0] == 11.0


@st.composite
def _graphs(draw):
    n = draw(st.integers(1, 8))
    n_pos = draw(st.integers(1, 4))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    is_directed = draw(st.booleans())
    dense = rng.integers(0, 4, size=(n, n)).astype(float) * (rng.random((n, n)) < rng.random())
    np.fill_diagonal(dense, 0)
    if not is_directed:
        dense = np.triu(dense) + np.triu(dense).T
    labels = rng.integers(0, n_pos, size=n)
    return dense, is_directed, labels, n_pos


@settings(max_examples=60, deadline=None)
@given(_graphs(), st.booleans())
def test_block_stats_equal_brute_force(graph, dir2):
    # Two relations on the same actors and partition, checked against cell-by-cell counts.
    dense1, dir1, labels, n_pos = graph
    n = labels.size
    rng = np.random.default_rng(n)
    dense2 = rng.integers(0, 3, size=(n, n)).astype(float)
    np.fill_diagonal(dense2, 0)
    if not dir2:
        dense2 = np.triu(dense2) + np.triu(dense2).T
    stats = block_stats([sp.csr_array(dense1), sp.csr_array(dense2)], [dir1, dir2], Partition(labels, n_pos))
    for r, (dense, is_directed) in enumerate([(dense1, dir1), (dense2, dir2)]):
        ties, possible, total, maximum = _brute_force(dense, is_directed, labels, n_pos)
        np.testing.assert_array_equal(stats.ties[r], ties)
        np.testing.assert_array_equal(stats.possible[r], possible)
        np.testing.assert_allclose(stats.total[r], total)
        np.testing.assert_allclose(stats.maximum[r], maximum)
        # Blocks partition the cells: their sums are the whole network's.
        assert stats.network_possible[r] == (n * (n - 1) if is_directed else n * (n - 1) // 2)
        cells = dense[~np.eye(n, dtype=bool)] if is_directed else dense[np.triu_indices(n, 1)]
        assert stats.network_ties[r] == np.count_nonzero(cells)
        assert stats.network_total[r] == pytest.approx(cells.sum())
