"""CONCOR positions: planted structures, convergence, nesting, edge cases."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import adjusted_rand_score

from tracker.blockmodel.concor import ConcorPositions, _column_correlations
from tracker.errors import UsageError


def _planted(sizes, image, rng, p_in=1.0, p_out=0.0, directed=True):
    """Ties with probability p_in where the image is 1, p_out where it is 0; shuffled.

    Undirected data use the symmetrised image.
    """
    truth = np.repeat(np.arange(len(sizes)), sizes)
    truth = truth[rng.permutation(truth.size)]
    image = np.asarray(image)
    if not directed:
        image = np.maximum(image, image.T)
    prob = np.where(image[np.ix_(truth, truth)] == 1, p_in, p_out)
    a = (rng.random(prob.shape) < prob).astype(float)
    np.fill_diagonal(a, 0)
    if not directed:
        a = np.triu(a, 1)
        a = a + a.T
    return sp.csr_array(a), truth


CASES = {
    # Two cohesive subgroups: CONCOR's first split separates them (Breiger,
    # Boorman & Arabie 1975; W&F 1994 sec. 9.4).
    "two groups": ([5, 7], np.eye(2), 2),
    # Core-periphery: core tied to all, periphery only to the core.
    "core-periphery": ([5, 10], [[1, 1], [1, 0]], 2),
    # Four cohesive subgroups: two levels of splits.
    "four groups": ([4, 5, 6, 7], np.eye(4), 4),
    "four equal groups": ([6, 6, 6, 6], np.eye(4), 4),
    # Not a power of two: the partial last level splits the mixed group.
    "three groups": ([4, 5, 6], np.eye(3), 3),
    "chain": ([4, 5, 6], [[1, 1, 0], [0, 0, 1], [0, 0, 0]], 3),
}


@pytest.mark.parametrize("case", sorted(CASES))
@pytest.mark.parametrize("directed", [True, False])
@pytest.mark.parametrize("seed", range(3))
def test_planted_perfect_structure_is_recovered(case, directed, seed):
    # Source: planted all-0/all-1 blockmodels (Lorrain & White 1971), scored with
    # sklearn's adjusted_rand_score (Hubert & Arabie 1985).
    sizes, image, n_positions = CASES[case]
    x, truth = _planted(sizes, image, np.random.default_rng(seed), directed=directed)
    fit = ConcorPositions(n_positions).fit([x], [directed])
    assert adjusted_rand_score(truth, fit.labels_) == 1.0
    assert fit.converged_


def test_two_relations_are_stacked():
    # Source: Breiger, Boorman & Arabie (1975) stack all relations' profiles: the
    # second relation separates groups that the first leaves identical.
    rng = np.random.default_rng(3)
    x1, truth = _planted([6, 6, 6, 6], [[1, 1, 0, 0], [1, 1, 0, 0], [0, 0, 1, 1], [0, 0, 1, 1]], rng)
    image2 = np.array([[0, 0, 1, 0], [0, 0, 0, 0], [0, 0, 0, 0], [1, 0, 0, 0]])
    x2 = sp.csr_array(image2[np.ix_(truth, truth)].astype(float))
    assert adjusted_rand_score(truth, ConcorPositions(4).fit([x1], [True]).labels_) < 1.0
    fit = ConcorPositions(4).fit([x1, x2], [True, True])
    assert adjusted_rand_score(truth, fit.labels_) == 1.0


def test_noisy_planted_positions_are_recovered():
    # Source: planted partition, sklearn adjusted_rand_score.
    x, truth = _planted([30] * 4, np.eye(4), np.random.default_rng(0), 0.8, 0.05)
    assert adjusted_rand_score(truth, ConcorPositions(4).fit([x], [True]).labels_) > 0.9


def test_iterated_correlations_converge_to_a_two_block_sign_pattern():
    # Source: Breiger, Boorman & Arabie (1975) -- iterating correlations converges
    # to +-1 entries, +1 within and -1 between two groups (a rank-one sign matrix).
    rng = np.random.default_rng(8)
    c = np.corrcoef(rng.normal(size=(12, 30)))
    for _ in range(100):
        c = _column_correlations(c)
    np.testing.assert_allclose(np.abs(c), 1.0, atol=1e-6)
    signs = np.sign(c[0])
    np.testing.assert_array_equal(np.sign(c), np.outer(signs, signs))
    assert 0 < (signs > 0).sum() < 12


def test_column_correlations_equal_numpy_corrcoef():
    # Source: numpy.corrcoef (columns as variables) on a matrix without constant
    # columns; constant columns get 0 by the documented convention.
    rng = np.random.default_rng(1)
    m = rng.normal(size=(9, 6))
    np.testing.assert_allclose(_column_correlations(m), np.corrcoef(m, rowvar=False), atol=1e-12)
    m[:, 2] = 4.0
    got = _column_correlations(m)
    assert np.all(got[2, [0, 1, 3, 4, 5]] == 0) and got[2, 2] == 1


@pytest.mark.parametrize("seed", range(4))
def test_more_positions_refine_fewer(seed):
    # Source: definition of a divisive tree -- positions for B + 1 come from
    # splitting positions for B, so each partition refines the previous one.
    x, _ = _planted([8] * 4, np.eye(4), np.random.default_rng(seed), 0.7, 0.1)
    previous = None
    for b in range(1, 8):
        labels = ConcorPositions(b).fit([x], [True]).labels_
        assert labels.max() + 1 <= b
        if previous is not None:
            pairs = set(zip(labels.tolist(), previous.tolist()))
            assert len(pairs) == labels.max() + 1
        previous = labels


@settings(max_examples=20, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(2, 5))
def test_labels_follow_a_relabelling_of_actors(seed, n_positions):
    # Source: definition -- CONCOR depends on the ties, not on the actor order
    # (continuous random weights avoid ties in the split order).
    rng = np.random.default_rng(seed)
    n = 14
    a = rng.uniform(0.5, 2.0, (n, n)) * (rng.random((n, n)) < 0.4)
    np.fill_diagonal(a, 0)
    perm = rng.permutation(n)
    fit = ConcorPositions(n_positions)
    ours = fit.fit([sp.csr_array(a)], [True]).labels_
    theirs = fit.fit([sp.csr_array(a[np.ix_(perm, perm)])], [True]).labels_
    assert adjusted_rand_score(ours[perm], theirs) == 1.0


def test_identical_actors_are_never_split():
    # Source: definition -- structurally identical actors have identical columns
    # at every step, so no split separates them; fewer positions result.
    x, truth = _planted([5, 6], np.eye(2), np.random.default_rng(0))
    fit = ConcorPositions(4).fit([x], [True])
    assert fit.n_positions_ == 2
    assert adjusted_rand_score(truth, fit.labels_) == 1.0


def test_same_seed_same_answer_and_edge_cases():
    # Common practice: CONCOR is deterministic.
    x, _ = _planted([10] * 3, np.eye(3), np.random.default_rng(2), 0.6, 0.1)
    runs = [ConcorPositions(3, seed=s).fit([x], [True]).labels_ for s in (0, 0, 5)]
    np.testing.assert_array_equal(runs[0], runs[1])
    np.testing.assert_array_equal(runs[0], runs[2])
    assert ConcorPositions(30).fit([x], [True]).labels_.tolist() == list(range(30))
    assert ConcorPositions(1).fit([x], [True]).labels_.tolist() == [0] * 30


def test_bad_options_raise_usage_errors():
    x = sp.csr_array(np.ones((4, 4)) - np.eye(4))
    with pytest.raises(UsageError):
        ConcorPositions(0).fit([x], [True])
    with pytest.raises(UsageError):
        ConcorPositions(2, max_iter=0).fit([x], [True])
    with pytest.raises(UsageError):
        ConcorPositions(2, tol=0).fit([x], [True])


def test_periods_above_the_size_limit_are_refused_with_the_alternative():
    # The limit is forced low so that the refusal is exercised on a small network
    # (the default, SIZE_LIMIT, is 8,000 actors: four dense n x n float64 arrays, 2 GB).
    import networkx as nx

    g = nx.karate_club_graph()  # networkx's copy of Zachary's club, 34 actors
    a = sp.csr_array(nx.to_scipy_sparse_array(g, dtype=float))
    with pytest.raises(UsageError, match=r"CONCOR needs a dense 34 x 34 .* at most 20 actors\. Use --method structural"):
        ConcorPositions(2, size_limit=20).fit([a], [False])
    exact = ConcorPositions(2, size_limit=34).fit([a], [False]).labels_  # at the limit it runs, unchanged
    assert exact.tolist() == ConcorPositions(2).fit([a], [False]).labels_.tolist()
    assert len(set(exact.tolist())) == 2
    with pytest.raises(UsageError, match="size_limit must be a whole number"):
        ConcorPositions(2, size_limit=1).fit([a], [False])
