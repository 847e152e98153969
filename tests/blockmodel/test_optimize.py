"""Direct optimisation: planted structures, brute-force costs and optima, incremental counts."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import adjusted_rand_score

from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.goodness import inconsistencies
from tracker.blockmodel.optimize import (
    OptimizedPositions,
    _binary_relations,
    _check_block_types,
    _SearchState,
    optimize_partition,
    partition_cost,
)
from tracker.blockmodel.partition import Partition
from tracker.errors import UsageError

TYPES = ("null", "complete", "regular")


def _block_cost(sub: np.ndarray, allowed) -> float:
    """Ideal-block deviations of one block read as directed (Doreian, Batagelj & Ferligoj 2005).

    ``sub`` is the 0/1 block with ``-1`` in cells that do not exist (self-ties).
    """
    n_k, n_l = sub.shape
    cells = sub >= 0
    t = int((sub == 1).sum())
    p = int(cells.sum())
    q = int((sub == 1).any(axis=1).sum())  # rows holding a tie
    c = int((sub == 1).any(axis=0).sum())  # columns holding a tie
    costs = {"null": t, "complete": p - t, "regular": (n_l - c) * n_k + (n_k - q) * c}
    return min(costs[k] for k in allowed)


def _brute_cost(dense_list, directed, labels, n_pos, allowed, prior=None, penalty=0.0) -> float:
    """The criterion visited block by block; undirected relations count half (each pair once)."""
    total = 0.0
    for dense, is_directed in zip(dense_list, directed):
        a = (dense != 0).astype(int)
        np.fill_diagonal(a, -1)
        part = 0.0
        for k in range(n_pos):
            for l in range(n_pos):
                rows, cols = np.flatnonzero(labels == k), np.flatnonzero(labels == l)
                if rows.size and cols.size:
                    part += _block_cost(a[np.ix_(rows, cols)], allowed)
        total += part if is_directed else part / 2
    if prior is not None:
        known = prior >= 0
        total += penalty * np.count_nonzero(labels[known] != prior[known])
    return total


def _planted(sizes, image, rng, directed=True):
    """Perfect null/complete structure on shuffled actors."""
    truth = np.repeat(np.arange(len(sizes)), sizes)
    truth = truth[rng.permutation(truth.size)]
    image = np.asarray(image)
    if not directed:
        image = np.maximum(image, image.T)
    a = image[np.ix_(truth, truth)].astype(float)
    np.fill_diagonal(a, 0)
    return sp.csr_array(a), truth


@pytest.mark.parametrize("directed", [True, False])
@pytest.mark.parametrize("init", ["random", "structural"])
def test_planted_perfect_structure_is_recovered(directed, init):
    rng = np.random.default_rng(4)
    # Core-periphery with a bridging position; rows and columns differ, so the
    # planted partition is the only one with zero inconsistencies.
    image = [[1, 1, 0], [1, 0, 1], [0, 0, 0]] if directed else [[1, 1, 0], [1, 0, 1], [0, 1, 1]]
    a, truth = _planted([8, 7, 9], image, rng, directed)
    model = OptimizedPositions(3, seed=0, restarts=20, init=init).fit([a], [directed])
    # Reference: scikit-learn's adjusted Rand index (Hubert & Arabie 1985), 1 = identical.
    assert adjusted_rand_score(truth, model.labels_) == 1.0
    assert model.cost_ == 0.0
    stats = block_stats([a], [directed], Partition(model.labels_, 3))
    best = (stats.ties * 2 > stats.possible).astype(int)  # complete where mostly tied
    assert inconsistencies(stats, best).sum() == 0


def test_planted_structure_over_two_relations():
    rng = np.random.default_rng(8)
    truth = rng.permutation(np.repeat(np.arange(3), [6, 6, 6]))
    first = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 0]])[np.ix_(truth, truth)].astype(float)
    second = np.array([[0, 1, 0], [0, 0, 1], [1, 0, 0]])[np.ix_(truth, truth)].astype(float)
    np.fill_diagonal(first, 0)
    labels, cost = optimize_partition(
        [sp.csr_array(first), sp.csr_array(second)], [False, True], 3, restarts=20, structural_start=False
    )
    assert cost == 0.0
    assert adjusted_rand_score(truth, labels) == 1.0


@st.composite
def _small(draw, max_n=9):
    n = draw(st.integers(2, max_n))
    n_pos = draw(st.integers(1, min(4, n)))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    dense_list, directed = [], []
    for _ in range(draw(st.integers(1, 2))):
        is_directed = bool(rng.random() < 0.5)
        dense = (rng.random((n, n)) < rng.random()).astype(float) * rng.integers(1, 4, (n, n))
        np.fill_diagonal(dense, 0)
        if not is_directed:
            dense = np.triu(dense) + np.triu(dense).T
        dense_list.append(dense)
        directed.append(is_directed)
    allowed = tuple(t for t in TYPES if draw(st.booleans())) or ("null", "complete")
    return dense_list, directed, n_pos, allowed, rng


@settings(max_examples=60, deadline=None)
@given(_small())
def test_cost_equals_brute_force(case):
    dense_list, directed, n_pos, allowed, rng = case
    n = dense_list[0].shape[0]
    mats = [sp.csr_array(d) for d in dense_list]
    labels = rng.integers(0, n_pos, size=n)
    prior = rng.integers(-1, n_pos, size=n)
    got = partition_cost(mats, directed, labels, n_pos, block_types=allowed, prior_labels=prior, change_penalty=0.7)
    assert got == pytest.approx(_brute_cost(dense_list, directed, labels, n_pos, allowed, prior, 0.7))
    found, cost = optimize_partition(mats, directed, n_pos, restarts=3, block_types=allowed, structural_start=False)
    assert found.min() >= 0 and found.max() < n_pos
    assert np.unique(found).size == n_pos  # no empty position while n >= B
    assert cost == pytest.approx(_brute_cost(dense_list, directed, found, n_pos, allowed))


def test_undirected_null_complete_cost_counts_unordered_pairs():
    # Against the block tables: with the best of null/complete per block the
    # criterion is the inconsistency count of that image (each pair once).
    rng = np.random.default_rng(2)
    dense = np.triu((rng.random((12, 12)) < 0.4).astype(float), 1)
    dense = dense + dense.T
    labels = rng.integers(0, 3, 12)
    stats = block_stats([sp.csr_array(dense)], [False], Partition(labels, 3))
    best = (2 * stats.ties > stats.possible).astype(int)
    assert partition_cost([sp.csr_array(dense)], [False], labels, 3) == inconsistencies(stats, best).sum()


def _brute_optimum(dense_list, directed, n_pos, allowed) -> float:
    """Lowest criterion over every labelling that occupies all positions.

    The criterion does not depend on how positions are numbered, so only
    labellings numbered by first appearance are visited (one per partition).
    """
    n = dense_list[0].shape[0]
    best = np.inf
    for labels in itertools.product(range(n_pos), repeat=n):
        labels = np.array(labels)
        uniq, first = np.unique(labels, return_index=True)
        if uniq.size == n_pos and np.all(np.diff(first) > 0):
            best = min(best, _brute_cost(dense_list, directed, labels, n_pos, allowed))
    return best


@settings(max_examples=20, deadline=None)
@given(_small(max_n=6), st.integers(2, 3))
def test_optimum_equals_brute_force_over_all_labelings(case, n_pos):
    # Null and complete blocks: relocations and exchanges, as in Doreian,
    # Batagelj & Ferligoj (2005); on tiny graphs 30 starts reach the optimum.
    dense_list, directed, _, _, _ = case
    allowed = ("null", "complete")
    n_pos = min(n_pos, dense_list[0].shape[0])
    mats = [sp.csr_array(d) for d in dense_list]
    _, cost = optimize_partition(mats, directed, n_pos, restarts=30, block_types=allowed, structural_start=False)
    assert cost == pytest.approx(_brute_optimum(dense_list, directed, n_pos, allowed))


def test_regular_optimum_on_fixed_tiny_graphs():
    # With regular blocks the search uses relocations only (documented), so it
    # is checked on fixed cases rather than on generated edge cases: each must
    # reach the brute-force optimum.
    for seed in range(12):
        rng = np.random.default_rng(seed)
        n, n_pos = int(rng.integers(4, 7)), int(rng.integers(2, 4))
        allowed = [("regular",), ("null", "regular"), TYPES][seed % 3]
        dense_list = []
        for _ in range(int(rng.integers(1, 3))):
            dense = (rng.random((n, n)) < rng.random()).astype(float)
            np.fill_diagonal(dense, 0)
            dense_list.append(dense)
        directed = [True] * len(dense_list)
        mats = [sp.csr_array(d) for d in dense_list]
        _, cost = optimize_partition(mats, directed, n_pos, restarts=30, block_types=allowed, structural_start=False)
        assert cost == pytest.approx(_brute_optimum(dense_list, directed, n_pos, allowed)), seed


@settings(max_examples=40, deadline=None)
@given(_small(max_n=10), st.integers(0, 2**31 - 1))
def test_incremental_counts_equal_recomputed_counts(case, seed):
    dense_list, directed, n_pos, allowed, _ = case
    rng = np.random.default_rng(seed)
    n = dense_list[0].shape[0]
    adj, adj_t, weights = _binary_relations([sp.csr_array(d) for d in dense_list], directed)
    prior = rng.integers(-1, n_pos, size=n)
    flags = _check_block_types(allowed)
    state = _SearchState(adj, adj_t, weights, n_pos, rng.integers(0, n_pos, n), flags, prior, 0.5)
    for _ in range(8):
        i = int(rng.integers(n))
        if rng.random() < 0.5 or state.regular:
            obj, spread = state.relocation_objectives(i)
            b = int(rng.integers(n_pos))
            state.move(i, b)
            predicted = (obj[b], spread[b])
        else:
            obj, spread, partners = state.exchange_objectives(i)
            if partners.size == 0:
                continue
            k = int(rng.integers(partners.size))
            state.exchange(i, int(partners[k]))
            predicted = (obj[k], spread[k])
        fresh = _SearchState(adj, adj_t, weights, n_pos, state.labels, flags, prior, 0.5)
        for name in ("ties", "rout", "rin", "sizes", "rows", "cols"):
            if getattr(fresh, name) is not None:
                np.testing.assert_allclose(getattr(state, name), getattr(fresh, name), err_msg=name)
        # The evaluated candidate predicts the state reached by applying it.
        assert predicted[0] == pytest.approx(fresh.current)
        assert predicted[1] == pytest.approx(fresh.spread)
        assert state.current == pytest.approx(
            _brute_cost(dense_list, directed, state.labels, n_pos, allowed, prior, 0.5)
        )


def test_regular_blocks():
    # Each actor of A sends a tie to one actor of B (a matching), B sends none:
    # block A->B is regular but neither null nor complete (White & Reitz 1983).
    n = 12
    a = np.zeros((n, n))
    a[np.arange(6), 6 + np.arange(6)] = 1
    mats = [sp.csr_array(a)]
    truth = np.array([0] * 6 + [1] * 6)
    assert partition_cost(mats, [True], truth, 2, block_types=("null", "regular")) == 0.0
    assert partition_cost(mats, [True], truth, 2) == 6.0  # null/complete: 6 stray ties
    labels, cost = optimize_partition(mats, [True], 2, block_types=("null", "regular"), restarts=10)
    assert cost == 0.0
    assert adjusted_rand_score(truth, labels) == 1.0


def test_huge_penalty_returns_the_prior_labels():
    rng = np.random.default_rng(1)
    a, truth = _planted([5, 5, 5], [[1, 0, 0], [0, 1, 0], [0, 0, 1]], rng, directed=False)
    prior = rng.permutation(np.arange(15) % 3)  # unrelated to the structure
    labels, cost = optimize_partition([a], [False], 3, prior_labels=prior, change_penalty=1e6, restarts=5)
    np.testing.assert_array_equal(labels, prior)
    assert cost == pytest.approx(partition_cost([a], [False], prior, 3))
    # Without penalty the structure wins and many actors change position.
    free, free_cost = optimize_partition([a], [False], 3, prior_labels=prior, change_penalty=0.0, restarts=5)
    assert free_cost == 0.0 and adjusted_rand_score(truth, free) == 1.0


def test_penalty_only_counts_known_prior_labels():
    rng = np.random.default_rng(2)
    a, truth = _planted([4, 4], [[1, 0], [0, 1]], rng, directed=False)
    prior = np.full(8, -1)
    prior[0] = 1 - truth[0]  # one known label, on the "wrong" side of the structure
    labels, cost = optimize_partition([a], [False], 2, prior_labels=prior, change_penalty=100.0, restarts=5)
    # Labels are arbitrary up to a swap: the penalty forces the numbering, not the split.
    assert labels[0] == prior[0]
    assert cost == 0.0
    assert adjusted_rand_score(truth, labels) == 1.0


def test_init_labels_at_the_optimum_stay():
    rng = np.random.default_rng(3)
    a, truth = _planted([6, 4], [[0, 1], [1, 0]], rng)
    labels, cost, costs = optimize_partition([a], [True], 2, init_labels=truth, restarts=0,
                                             structural_start=False, return_all=True)
    np.testing.assert_array_equal(labels, truth)
    assert cost == 0.0 and costs.tolist() == [0.0]


def test_more_positions_than_actors_and_determinism():
    a = sp.csr_array(np.array([[0, 1, 0], [0, 0, 1], [1, 0, 0]], dtype=float))
    labels, cost = optimize_partition([a], [True], 5, restarts=3)
    assert labels.min() >= 0 and labels.max() < 5 and np.unique(labels).size == 3
    assert cost == 0.0  # every block 1 x 1: null or complete
    rng = np.random.default_rng(0)
    dense = (rng.random((25, 25)) < 0.2).astype(float)
    np.fill_diagonal(dense, 0)
    first = optimize_partition([sp.csr_array(dense)], [True], 3, seed=9, restarts=5)
    second = optimize_partition([sp.csr_array(dense)], [True], 3, seed=9, restarts=5)
    np.testing.assert_array_equal(first[0], second[0])
    assert first[1] == second[1]


def test_empty_positions_in_a_start_are_filled():
    rng = np.random.default_rng(5)
    a, _ = _planted([5, 5, 5], [[1, 0, 0], [0, 1, 0], [0, 0, 1]], rng)
    labels, _ = optimize_partition([a], [True], 3, init_labels=np.zeros(15, dtype=int), restarts=0,
                                   structural_start=False)
    assert np.unique(labels).size == 3


def test_estimator_attributes_and_errors():
    rng = np.random.default_rng(6)
    a, truth = _planted([5, 5], [[1, 0], [1, 1]], rng)
    model = OptimizedPositions(2, restarts=4, init="random", change_penalty=0.0).fit([a], [True])
    assert model.restart_costs_.shape == (4,)
    assert model.cost_ == model.restart_costs_.min() == model.inconsistencies_ == 0.0
    with pytest.raises(UsageError, match="unknown option"):
        OptimizedPositions(2, colour="red").fit([a], [True])
    with pytest.raises(UsageError, match="block types"):
        optimize_partition([a], [True], 2, block_types=("dense",))
    with pytest.raises(UsageError, match="n_positions"):
        optimize_partition([a], [True], 0)
    with pytest.raises(UsageError, match="prior_labels"):
        optimize_partition([a], [True], 2, prior_labels=np.full(10, 5))
    with pytest.raises(UsageError, match="init_labels"):
        optimize_partition([a], [True], 2, init_labels=[0, 1])
