"""REGE and the regular-block deviation checked against the definitions, by brute force.

Source of the definitions: regular equivalence (White & Reitz 1983; Borgatti &
Everett 1993): a partition is regular when two actors of one class send ties
to the same set of classes and receive ties from the same set of classes; the
coarsest regular partition is unique.  A regular block (Doreian, Batagelj &
Ferligoj 2005) has at least one tie in every row and every column.  The
coarsest regular partition is found here by enumerating every partition of up
to 7 actors (Bell(7) = 877) and testing the definition on each.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp

from tests.helpers.partitions import set_partitions
from tracker.blockmodel.equivalence import rege_similarities
from tracker.blockmodel.optimize import partition_cost


def _regular(labels, relations) -> bool:
    """The definition, relation by relation: same classes sent to and received from within a class."""
    for a, directed in relations:
        sends = [frozenset(labels[np.flatnonzero(a[i])]) for i in range(labels.size)]
        gets = [frozenset(labels[np.flatnonzero(a[:, i])]) for i in range(labels.size)]
        for c in np.unique(labels):
            members = np.flatnonzero(labels == c)
            if len({sends[i] for i in members}) > 1 or (directed and len({gets[i] for i in members}) > 1):
                return False
    return True


def _coarsest_regular(relations, n):
    regular = [p for p in set_partitions(n) if _regular(p, relations)]
    best = min(regular, key=lambda p: p.max())
    # it is the maximum: every regular partition refines it
    for p in regular:
        assert len({(int(x), int(y)) for x, y in zip(p, best)}) == p.max() + 1
    return best


def _digraph(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(4, 8))
    a = (rng.random((n, n)) < rng.choice([0.2, 0.3, 0.45])).astype(float)
    np.fill_diagonal(a, 0)
    return a


@pytest.mark.parametrize("seed", range(12))
def test_rege_arc_converges_to_the_coarsest_regular_partition(seed):
    # Binary data, iterated until nothing changes (2n steps): similarity 1 exactly
    # for the pairs of one class of the brute-force coarsest regular partition, < 1 otherwise.
    a = _digraph(seed)
    n = a.shape[0]
    classes = _coarsest_regular([(a != 0, True)], n)
    sim = rege_similarities([sp.csr_array(a)], [True], iterations=2 * n, match="arc")
    same = classes[:, None] == classes[None, :]
    assert np.all(sim[same] == 1.0) and np.all(sim[~same] < 1.0 - 1e-12)


@pytest.mark.parametrize("seed", range(12))
def test_rege_pair_converges_to_regular_equivalence_of_typed_ties(seed):
    # The classic form matches a tie sent to k and a tie received from k together,
    # so a perfect match needs the same kind of tie: sent only, received only or
    # mutual.  Its fixed point is therefore the coarsest regular partition of the
    # typed ties (a directed "sent only" relation and an undirected "mutual" one).
    a = _digraph(100 + seed)
    n = a.shape[0]
    sent_only, mutual = (a * (1 - a.T)) != 0, (a * a.T) != 0
    classes = _coarsest_regular([(sent_only, True), (mutual, False)], n)
    sim = rege_similarities([sp.csr_array(a)], [True], iterations=2 * n, match="pair")
    same = classes[:, None] == classes[None, :]
    assert np.all(sim[same] == 1.0) and np.all(sim[~same] < 1.0 - 1e-12)


@pytest.mark.parametrize("seed", range(20))
def test_regular_block_deviation_counts_cells_in_null_rows_or_columns(seed):
    # One off-diagonal block A -> B with ties, every other block empty.  Allowed
    # types null and regular: the block costs min(ties, deviation), where the
    # deviation of a regular block is, by brute force of the definition, the
    # number of its cells lying in a row or a column without any tie (those
    # rows and columns must each receive a tie; zero exactly when every row and
    # column holds one, i.e. the block is regular).
    rng = np.random.default_rng(seed)
    n_a, n_b = int(rng.integers(2, 6)), int(rng.integers(2, 6))
    block = rng.random((n_a, n_b)) < rng.uniform(0.3, 0.9)
    a = np.zeros((n_a + n_b, n_a + n_b))
    a[:n_a, n_a:] = block
    labels = np.repeat([0, 1], [n_a, n_b])
    null_rows, null_cols = ~block.any(axis=1), ~block.any(axis=0)
    deviation = int(np.count_nonzero(null_rows[:, None] | null_cols[None, :]))
    assert (deviation == 0) == bool(block.any(axis=1).all() and block.any(axis=0).all())
    cost = partition_cost([sp.csr_array(a)], [True], labels, 2, block_types=("null", "regular"))
    assert cost == min(int(block.sum()), deviation)
