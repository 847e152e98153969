"""Tests of tracker.structures.coreperiphery (Borgatti & Everett 1999)."""

from __future__ import annotations

import itertools
import time

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import minimize
from scipy.stats import spearmanr

from tracker.errors import UsageError
from tracker.structures.coreperiphery import continuous_coreness, discrete_core_periphery


def perfect_core_periphery(n_core: int, n_periphery: int) -> np.ndarray:
    """Core complete, core-periphery complete, periphery empty (B&E 1999, the ideal)."""
    n = n_core + n_periphery
    a = np.zeros((n, n))
    a[:n_core, :] = 1
    a[:, :n_core] = 1
    np.fill_diagonal(a, 0)
    return a


def off_diagonal(a: np.ndarray) -> np.ndarray:
    return a[~np.eye(a.shape[0], dtype=bool)]


def discrete_pattern(core: np.ndarray) -> np.ndarray:
    return (core[:, None] | core[None, :]).astype(float)


def random_graph(rng, n, density, directed):
    a = (rng.random((n, n)) < density).astype(float)
    np.fill_diagonal(a, 0)
    if not directed:
        a = np.triu(a, 1)
        a = a + a.T
    return a


# ---------------------------------------------------------------- discrete model


@pytest.mark.parametrize("directed_input", [False, True])
def test_perfect_structure_has_correlation_one(directed_input):
    # B&E (1999): the data equal the ideal pattern, so the correlation is 1
    a = perfect_core_periphery(4, 8)
    perm = np.random.default_rng(1).permutation(12)
    a = a[np.ix_(perm, perm)]
    matrix = sp.csr_array(a) if directed_input else a
    core, r = discrete_core_periphery(matrix, seed=0)
    assert r == pytest.approx(1.0)
    np.testing.assert_array_equal(core, perm < 4)


@pytest.mark.parametrize("seed", range(8))
def test_discrete_optimum_equals_brute_force(seed):
    # brute force: every core of 1..n-2 actors, correlation by numpy.corrcoef
    # over the explicit off-diagonal cells (B&E 1999 criterion)
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 10))
    a = random_graph(rng, n, rng.uniform(0.2, 0.6), directed=seed % 2 == 0)
    best = -np.inf
    for size in range(1, n - 1):
        for members in itertools.combinations(range(n), size):
            core = np.zeros(n, dtype=bool)
            core[list(members)] = True
            best = max(best, np.corrcoef(off_diagonal(a), off_diagonal(discrete_pattern(core)))[0, 1])
    core, r = discrete_core_periphery(sp.csr_array(a), seed=seed)
    assert r == pytest.approx(best, abs=1e-12)


@settings(max_examples=40, deadline=None)
@given(st.integers(3, 12), st.floats(0.05, 0.95), st.booleans(), st.integers(0, 10_000))
def test_discrete_correlation_equals_numpy(n, density, directed, seed):
    # the correlation from sufficient statistics equals numpy.corrcoef on the
    # explicit off-diagonal cells of the data and the pattern of the core found
    rng = np.random.default_rng(seed)
    a = random_graph(rng, n, density, directed)
    a[a > 0] = rng.integers(1, 5, size=int((a > 0).sum()))  # values: any nonzero is a tie
    core, r = discrete_core_periphery(sp.csr_array(a), seed=seed, restarts=3)
    x = off_diagonal(a) != 0
    if x.all() or not x.any():
        assert np.isnan(r)
        return
    assert 1 <= core.sum() <= n - 2
    assert r == pytest.approx(np.corrcoef(x, off_diagonal(discrete_pattern(core)))[0, 1], abs=1e-12)


def test_discrete_is_seeded_and_accepts_dense_and_sparse():
    a = nx.to_numpy_array(nx.karate_club_graph(), weight=None)  # networkx data set
    one = discrete_core_periphery(a, seed=5)
    two = discrete_core_periphery(sp.csr_array(a), seed=5)
    np.testing.assert_array_equal(one[0], two[0])
    assert one[1] == two[1]


def test_degenerate_graphs():
    # no ties, or every pair tied: the correlation is undefined (zero variance)
    core, r = discrete_core_periphery(np.zeros((4, 4)))
    assert np.isnan(r) and not core.any()
    full = np.ones((4, 4)) - np.eye(4)
    core, r = discrete_core_periphery(full)
    assert np.isnan(r) and core.all()
    c, r = continuous_coreness(np.zeros((4, 4)))
    assert np.isnan(r) and np.allclose(c, 0.5)


# ---------------------------------------------------------------- continuous model


def test_continuous_ranks_core_above_periphery():
    # B&E (1999): in the ideal structure core actors have the higher coreness
    a = perfect_core_periphery(3, 7)
    perm = np.random.default_rng(4).permutation(10)
    a = a[np.ix_(perm, perm)]
    c, r = continuous_coreness(sp.csr_array(a))
    core = perm < 3
    assert c[core].min() > c[~core].max()
    assert np.linalg.norm(c) == pytest.approx(1.0)
    assert r == pytest.approx(np.corrcoef(off_diagonal(a), off_diagonal(np.outer(c, c)))[0, 1], abs=1e-12)


@pytest.mark.parametrize("seed", range(6))
def test_continuous_correlation_and_least_squares(seed):
    # brute force: numpy.corrcoef over explicit cells; reference optimiser:
    # scipy.optimize.minimize on sum_{i != j} (a_ij - c_i c_j)^2
    rng = np.random.default_rng(seed)
    n = int(rng.integers(6, 12))
    a = random_graph(rng, n, 0.5, directed=seed % 2 == 0)
    c, r = continuous_coreness(sp.csr_array(a), tol=1e-12)
    assert r == pytest.approx(np.corrcoef(off_diagonal(a), off_diagonal(np.outer(c, c)))[0, 1], abs=1e-12)

    def loss(x):
        return float((off_diagonal(a - np.outer(x, x)) ** 2).sum())

    reference = minimize(loss, np.full(n, 0.5), method="BFGS")
    # our c has unit length; the least-squares solution is c at its best scale s
    sym = (a + a.T) / 2
    s2 = (c @ sym @ c) / (1 - (c**4).sum())
    assert loss(np.sqrt(s2) * c) == pytest.approx(reference.fun, rel=1e-6)


def test_continuous_coreness_tracks_eigenvector_centrality():
    # B&E (1999) relate the continuous model to centrality; on Zachary's karate
    # club (networkx data set) the rank correlation with networkx's eigenvector
    # centrality is near 1 (measured 0.997)
    graph = nx.karate_club_graph()
    c, r = continuous_coreness(nx.to_scipy_sparse_array(graph, weight=None))
    centrality = nx.eigenvector_centrality_numpy(graph, weight=None)
    assert spearmanr(c, [centrality[i] for i in range(34)]).statistic > 0.95
    assert 0 < r < 1


def test_sparse_input_scales_with_ties():
    # 20000 actors: an n x n float array would take 3.2 GB; the fits use the ties only
    rng = np.random.default_rng(0)
    n, m = 20_000, 60_000
    a = sp.csr_array((np.ones(m), (rng.integers(0, n, m), rng.integers(0, n, m))), shape=(n, n))
    start = time.perf_counter()
    c, r = continuous_coreness(a)
    core, rd = discrete_core_periphery(a, restarts=1)
    assert time.perf_counter() - start < 20
    assert c.shape == (n,) and np.isfinite(r) and np.isfinite(rd)


@pytest.mark.parametrize("matrix", [np.zeros((3, 4)), np.zeros((2, 2))])
def test_usage_errors(matrix):
    with pytest.raises(UsageError):
        discrete_core_periphery(matrix)


def test_usage_error_restarts():
    with pytest.raises(UsageError):
        discrete_core_periphery(np.ones((4, 4)), restarts=0)


def test_two_candidate_steps_are_a_steepest_ascent_by_brute_force():
    # Source: brute force -- after the search no single move (any actor into or
    # out of the core) raises numpy.corrcoef of data and pattern: the result is
    # a local optimum, as steepest ascent by single moves guarantees.
    rng = np.random.default_rng(3)
    a = random_graph(rng, 40, 0.15, directed=True)
    core, r = discrete_core_periphery(sp.csr_array(a), seed=1, restarts=4)
    x = off_diagonal(a) != 0
    for v in range(40):
        moved = core.copy()
        moved[v] = not moved[v]
        if 1 <= moved.sum() <= 38:
            assert np.corrcoef(x, off_diagonal(discrete_pattern(moved)))[0, 1] <= r + 1e-12


def test_large_networks_find_a_planted_core_quickly():
    # Source: Borgatti & Everett (1999) ideal pattern, planted: a core of 60 among
    # 3,000 actors, dense inside and to the periphery, a sparse periphery.  Above
    # 1,000 actors the random starts perturb the degree start (documented); the
    # planted core must still be found, and fast.
    rng = np.random.default_rng(5)
    n, k = 3000, 60
    core_true = np.zeros(n, dtype=bool)
    core_true[rng.choice(n, k, replace=False)] = True
    prob = np.where(core_true[:, None] | core_true[None, :], 0.3, 0.001)
    a = sp.csr_array((rng.random((n, n)) < prob).astype(float))
    start = time.perf_counter()
    core, r = discrete_core_periphery(a, seed=2)
    assert time.perf_counter() - start < 5  # measured about 0.2 s
    assert (core == core_true).mean() > 0.99 and r > 0.5
