"""Structural-equivalence positions: planted structures, invariance, edge cases."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.spatial.distance import pdist
from sklearn.metrics import adjusted_rand_score

from tracker.blockmodel.structural import StructuralPositions
from tracker.errors import UsageError

# A chain-like image whose rows and columns all differ: positions are distinct.
CHAIN = np.array([[1, 1, 0], [0, 0, 1], [0, 0, 0]])


def _planted(sizes, image, rng, p_in=1.0, p_out=0.0, directed=True):
    """Ties with probability p_in where the image is 1, p_out where it is 0; shuffled.

    Undirected data use the symmetrised image (a tie where either direction is 1).
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


@pytest.mark.parametrize("measure", ["euclidean", "correlation"])
@pytest.mark.parametrize("link", ["average", "complete", "single"])
@pytest.mark.parametrize("seed", range(3))
def test_planted_perfect_structure_is_recovered(measure, link, seed):
    # Source: Lorrain & White (1971) -- in a blow-up of an image with all-0/all-1
    # blocks, members of a position are structurally equivalent and positions
    # with different image rows/columns are not; ARI by sklearn (Hubert & Arabie 1985).
    x, truth = _planted([4, 5, 6], CHAIN, np.random.default_rng(seed))
    fit = StructuralPositions(3, linkage=link, measure=measure).fit([x], [True])
    assert adjusted_rand_score(truth, fit.labels_) == 1.0
    assert fit.n_positions_ == 3


def test_planted_perfect_structure_with_ward_and_two_relations():
    # Source: as above; the second relation alone separates positions 0 and 1,
    # which relation one leaves identical.
    rng = np.random.default_rng(11)
    x1, truth = _planted([4, 5, 6], [[1, 1, 0], [1, 1, 0], [0, 0, 1]], rng)
    t2 = (truth[:, None] == 0) & (truth[None, :] == 2)
    x2 = sp.csr_array(t2.astype(float))
    assert adjusted_rand_score(truth, StructuralPositions(3).fit([x1], [True]).labels_) < 1.0
    fit = StructuralPositions(3, linkage="ward").fit([x1, x2], [True, True])
    assert adjusted_rand_score(truth, fit.labels_) == 1.0


@pytest.mark.parametrize("measure", ["euclidean", "correlation"])
@pytest.mark.parametrize("directed", [True, False])
@pytest.mark.parametrize("seed", range(3))
def test_noisy_planted_positions_are_recovered(measure, directed, seed):
    # Source: planted partition (4 positions x 30 actors, p_in 0.8, p_out 0.05),
    # scored with sklearn's adjusted_rand_score (Hubert & Arabie 1985).
    x, truth = _planted([30] * 4, np.eye(4), np.random.default_rng(seed), 0.8, 0.05, directed)
    fit = StructuralPositions(4, measure=measure).fit([x], [directed])
    assert adjusted_rand_score(truth, fit.labels_) > 0.9


def test_labels_equal_scipy_clustering_of_explicit_profiles():
    # Source: scipy.cluster.hierarchy on scipy pdist of explicit row+column
    # profiles.  With no tie inside the two groups of a bipartite graph, every
    # pair in a group has its left-out entries at zero, so within-group
    # distances equal the full-profile ones; between-group distances differ, but
    # the cut below separates the groups anyway, so both give the same partition.
    rng = np.random.default_rng(4)
    a = np.zeros((20, 20))
    a[:10, 10:] = rng.random((10, 10)) < 0.5
    a[:10, 10:] *= rng.integers(1, 4, (10, 10))
    x = sp.csr_array(a)
    full = np.hstack([a, a.T])
    reference = fcluster(linkage(pdist(full), "average"), t=2, criterion="maxclust")
    ours = StructuralPositions(2).fit([x], [True]).labels_
    assert adjusted_rand_score(reference, ours) == 1.0
    assert adjusted_rand_score(np.repeat([0, 1], 10), ours) == 1.0


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**32 - 1), st.integers(2, 6), st.sampled_from(["euclidean", "correlation"]))
def test_labels_follow_a_relabelling_of_actors(seed, n_positions, measure):
    # Source: definition -- positions depend on the ties, not on actor order.
    # Continuous random weights make all distances distinct, so no tie-breaking.
    rng = np.random.default_rng(seed)
    n = 15
    a = rng.uniform(0.5, 2.0, (n, n)) * (rng.random((n, n)) < 0.4)
    np.fill_diagonal(a, 0)
    perm = rng.permutation(n)
    fit = StructuralPositions(n_positions, measure=measure)
    ours = fit.fit([sp.csr_array(a)], [True]).labels_
    theirs = fit.fit([sp.csr_array(a[np.ix_(perm, perm)])], [True]).labels_
    assert adjusted_rand_score(ours[perm], theirs) == 1.0


def test_same_seed_same_answer_and_seed_is_unused():
    # Common practice: hierarchical clustering is deterministic.
    x, _ = _planted([10] * 3, np.eye(3), np.random.default_rng(2), 0.6, 0.1)
    runs = [StructuralPositions(3, seed=s).fit([x], [True]).labels_ for s in (0, 0, 9)]
    np.testing.assert_array_equal(runs[0], runs[1])
    np.testing.assert_array_equal(runs[0], runs[2])


def test_edge_cases_of_the_number_of_positions():
    # Documented contract: n_positions >= n puts each actor alone; 1 puts all together.
    x, _ = _planted([3, 3], np.eye(2), np.random.default_rng(0))
    assert StructuralPositions(6).fit([x], [True]).labels_.tolist() == list(range(6))
    assert StructuralPositions(50).fit([x], [True]).labels_.tolist() == list(range(6))
    one = StructuralPositions(1).fit([x], [True])
    assert one.labels_.tolist() == [0] * 6 and one.n_positions_ == 1


def test_tied_actors_are_not_split_arbitrarily():
    # Source: definition -- two groups of identical actors give two positions even
    # when more are asked for (documented: fewer rather than arbitrary splits).
    x, truth = _planted([4, 4], np.eye(2), np.random.default_rng(0))
    fit = StructuralPositions(3).fit([x], [True])
    assert fit.n_positions_ == 2
    assert adjusted_rand_score(truth, fit.labels_) == 1.0


def test_bad_options_raise_usage_errors():
    x = sp.csr_array(np.ones((4, 4)) - np.eye(4))
    for bad in (0, -1, 2.5, "3", True):
        with pytest.raises(UsageError):
            StructuralPositions(bad).fit([x], [True])
    with pytest.raises(UsageError):
        StructuralPositions(2, linkage="median").fit([x], [True])
    with pytest.raises(UsageError):
        StructuralPositions(2, measure="cosine").fit([x], [True])
    with pytest.raises(UsageError):
        StructuralPositions(2, linkage="ward", measure="correlation").fit([x], [True])


def test_tied_merge_heights_still_give_the_positions_asked_for():
    # Three groups at equal structural distance (a cyclic image) asked for two
    # positions: maxclust alone would stop at one; the cut must give two, and
    # no group may be split (identical profiles stay together).
    import numpy as np
    import scipy.sparse as sp

    image = np.array([[0, 1, 0], [0, 0, 1], [1, 0, 0]])
    labels = np.repeat(np.arange(3), 4)
    adj = image[labels][:, labels].astype(float)
    result = StructuralPositions(2).fit([sp.csr_array(adj)], [True]).labels_
    assert np.unique(result).size == 2
    for g in range(3):
        assert np.unique(result[labels == g]).size == 1
