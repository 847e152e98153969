"""Regular-equivalence positions: exact and REGE-based, planted and shipped data."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import adjusted_rand_score

from tracker.blockmodel.equivalence import maximal_regular_partition
from tracker.blockmodel.regular import RegularPositions
from tracker.errors import UsageError

CHAIN = np.array([[1, 1, 0], [0, 0, 1], [0, 0, 0]])


def _shuffled(sizes, rng):
    truth = np.repeat(np.arange(len(sizes)), sizes)
    return truth[rng.permutation(truth.size)]


def _planted_perfect(sizes, image, rng):
    """All-0/all-1 blocks from a directed image, actors shuffled."""
    truth = _shuffled(sizes, rng)
    a = np.asarray(image)[np.ix_(truth, truth)].astype(float)
    np.fill_diagonal(a, 0)
    return sp.csr_array(a), truth


def _planted_regular(sizes, rng, density=0.2):
    """Top -> middle -> bottom with sparse blocks where every row and column of a
    1-block holds at least one tie (a regular, not structural, blockmodel)."""
    truth = _shuffled(sizes, rng)
    a = np.zeros((truth.size, truth.size))
    for src, dst in ((0, 1), (1, 2)):
        rows, cols = np.flatnonzero(truth == src), np.flatnonzero(truth == dst)
        block = rng.random((rows.size, cols.size)) < density
        block[np.arange(rows.size), rng.integers(0, cols.size, rows.size)] = True
        block[rng.integers(0, rows.size, cols.size), np.arange(cols.size)] = True
        a[np.ix_(rows, cols)] = block * rng.integers(1, 4, block.shape)
    return sp.csr_array(a), truth


@pytest.mark.parametrize("exact", [True, False])
@pytest.mark.parametrize("match", ["pair", "arc"])
@pytest.mark.parametrize("seed", range(3))
def test_planted_perfect_structure_is_recovered(exact, match, seed):
    # Source: structural equivalence implies regular equivalence (White & Reitz
    # 1983); the chain image's three positions are regularly distinct (worked
    # from the definition: senders only / senders and receivers / receivers only,
    # then split by whom they send to).  ARI by sklearn.
    x, truth = _planted_perfect([4, 5, 6], CHAIN, np.random.default_rng(seed))
    fit = RegularPositions(3, exact=exact, match=match).fit([x], [True])
    assert adjusted_rand_score(truth, fit.labels_) == 1.0


@pytest.mark.parametrize("exact", [True, False])
@pytest.mark.parametrize("seed", range(4))
def test_planted_regular_structure_is_recovered(exact, seed):
    # Source: definition (White & Reitz 1983) -- in a top -> middle -> bottom
    # hierarchy where each actor has at least one tie into the next level, the
    # levels are regular positions though no two actors are structurally
    # equivalent; valued ties (1-3) for REGE.
    x, truth = _planted_regular([6, 8, 10], np.random.default_rng(seed))
    fit = RegularPositions(3, exact=exact).fit([x], [True])
    assert adjusted_rand_score(truth, fit.labels_) == 1.0


def test_levels_of_a_directed_tree_are_its_regular_positions():
    # Source: networkx balanced_tree, and the definition worked by hand: in a
    # rooted tree directed away from the root, with all leaves at one depth,
    # actors are regularly equivalent exactly when they share a depth.
    tree = nx.bfs_tree(nx.balanced_tree(2, 3), 0)
    x = sp.csr_array(nx.to_scipy_sparse_array(tree, nodelist=sorted(tree), dtype=float))
    depth = nx.shortest_path_length(tree, 0)
    depth = np.array([depth[v] for v in sorted(tree)])
    fit = RegularPositions(4, exact=True).fit([x], [True])
    assert adjusted_rand_score(depth, fit.labels_) == 1.0
    assert adjusted_rand_score(depth, RegularPositions(4).fit([x], [True]).labels_) == 1.0


@pytest.mark.parametrize("graph", ["karate_club_graph", "florentine_families_graph", "davis_southern_women_graph"])
def test_connected_undirected_shipped_graphs_are_one_regular_class(graph):
    # Source: Borgatti & Everett (1993) -- without isolates, one class is regular
    # for an undirected graph; data sets shipped by networkx.
    g = getattr(nx, graph)()
    x = sp.csr_array(nx.to_scipy_sparse_array(g, weight=None, dtype=float))
    fit = RegularPositions(5, exact=True).fit([x], [False])
    assert fit.n_positions_ == 1


def test_exact_ignores_the_number_of_positions():
    # Documented: the maximal regular equivalence is unique.
    x, truth = _planted_perfect([4, 5, 6], CHAIN, np.random.default_rng(0))
    fit = RegularPositions(1, exact=True).fit([x], [True])
    assert fit.n_positions_ == 3
    np.testing.assert_array_equal(fit.labels_, maximal_regular_partition([x], [True]))
    assert fit.similarities_ is None


@settings(max_examples=20, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(2, 5), st.booleans())
def test_labels_follow_a_relabelling_of_actors(seed, n_positions, exact):
    # Source: definition -- regular equivalence depends on the ties, not on the
    # actor order (continuous random weights avoid ties in the clustering).
    rng = np.random.default_rng(seed)
    n = 12
    a = rng.uniform(0.5, 2.0, (n, n)) * (rng.random((n, n)) < 0.25)
    np.fill_diagonal(a, 0)
    perm = rng.permutation(n)
    fit = RegularPositions(n_positions, exact=exact)
    ours = fit.fit([sp.csr_array(a)], [True]).labels_
    theirs = fit.fit([sp.csr_array(a[np.ix_(perm, perm)])], [True]).labels_
    assert adjusted_rand_score(ours[perm], theirs) == 1.0


def test_same_seed_same_answer_and_edge_cases():
    # Common practice: both forms are deterministic.
    x, _ = _planted_regular([5, 6, 7], np.random.default_rng(1))
    runs = [RegularPositions(3, seed=s).fit([x], [True]).labels_ for s in (0, 0, 4)]
    np.testing.assert_array_equal(runs[0], runs[1])
    np.testing.assert_array_equal(runs[0], runs[2])
    assert RegularPositions(18).fit([x], [True]).labels_.tolist() == list(range(18))
    assert RegularPositions(1).fit([x], [True]).labels_.tolist() == [0] * 18
    fit = RegularPositions(3).fit([x], [True])
    assert fit.similarities_.shape == (18, 18) and fit.linkage_.shape == (17, 4)


def test_bad_options_raise_usage_errors():
    x = sp.csr_array(np.ones((4, 4)) - np.eye(4))
    with pytest.raises(UsageError):
        RegularPositions(0).fit([x], [True])
    with pytest.raises(UsageError):
        RegularPositions(2, linkage="ward").fit([x], [True])
    with pytest.raises(UsageError):
        RegularPositions(2, match="both").fit([x, x], [True, False])
    with pytest.raises(UsageError):
        RegularPositions(2, iterations=-1).fit([x], [True])
