"""Move gains of the blockmodel likelihood against recomputation, with several relations at once."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.models import likelihood as lik

VARIANTS = [("poisson", False), ("bernoulli", False), ("poisson", True)]


@st.composite
def two_relations(draw):
    """A directed and an undirected count matrix over the same actors, and a partition."""
    n = draw(st.integers(3, 9))
    B = draw(st.integers(2, min(4, n)))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    directed = rng.integers(0, 3, size=(n, n)) * (rng.random((n, n)) < 0.5)
    np.fill_diagonal(directed, 0)
    upper = np.triu(rng.integers(0, 3, size=(n, n)) * (rng.random((n, n)) < 0.5), 1)
    labels = rng.integers(0, B, size=n)
    return [sp.csr_array(directed.astype(float)), sp.csr_array((upper + upper.T).astype(float))], labels, B


@settings(max_examples=60, deadline=None)
@given(two_relations(), st.sampled_from(VARIANTS))
def test_move_gains_equal_the_change_of_the_recomputed_likelihood(graph, variant):
    # source: brute force of the definition (the profile log-likelihood after each single move,
    # recomputed from the ties, minus before); relations add, so two at once
    mats, z, B = graph
    model, dc = variant
    rels, n = lik.prepare(mats, [True, False], model, dc)
    gains = lik.move_gains(rels, z, B)
    base = lik.profile_log_likelihood(rels, z, B)
    for i in range(n):
        for b in range(B):
            moved = z.copy()
            moved[i] = b
            want = lik.profile_log_likelihood(rels, moved, B) - base
            if np.isfinite(want):
                assert gains[i, b] == pytest.approx(want, rel=1e-7, abs=1e-7)
    # the block totals a sweep already has give the same gains, bit for bit
    totals = [lik.block_totals(rel, z, B) for rel in rels]
    assert np.array_equal(lik.move_gains(rels, z, B, totals), gains, equal_nan=True)


def test_greedy_history_is_the_recomputed_likelihood_of_each_kept_partition():
    # source: brute force (the likelihood of the returned partition recomputed from the ties)
    rng = np.random.default_rng(6)
    n, B = 60, 3
    z = rng.integers(0, B, n)
    p = np.where(z[:, None] == z[None, :], 0.3, 0.03)
    A = (rng.random((n, n)) < p).astype(float)
    np.fill_diagonal(A, 0.0)
    rels, _ = lik.prepare([sp.csr_array(A)], [True], "poisson", False)
    labels, value, history = lik.greedy_ascent(rels, lik.random_labels(n, B, rng), B, rng, 50)
    assert value == lik.profile_log_likelihood(rels, labels, B)
    assert history[-1] == value and np.all(np.diff(history) > 0)
