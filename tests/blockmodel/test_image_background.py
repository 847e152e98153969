"""The noise-aware "above-background" image criterion.

Reference library: scipy.stats.binomtest (exact one-sided binomial test), block
by block, against the relation's whole-network density.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import binomtest

from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.image import BACKGROUND_LEVEL, above_background, image
from tracker.blockmodel.partition import Partition
from tracker.errors import UsageError


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 10_000), st.booleans(), st.floats(0.05, 0.5))
def test_matches_scipy_binomtest_block_by_block(seed, directed, density):
    rng = np.random.default_rng(seed)
    n, n_pos = 18, 3
    a = (rng.random((n, n)) < density).astype(float)
    a[:6, :6] = rng.random((6, 6)) < 0.9  # one denser block
    np.fill_diagonal(a, 0)
    if not directed:
        a = np.triu(a, 1)
        a = a + a.T
    labels = rng.permutation(np.repeat(np.arange(n_pos), 6))
    stats = block_stats([sp.csr_array(a)], [directed], Partition(labels, n_pos))
    got = image(stats, "above-background")[0]
    d = float(stats.network_density[0])
    blocks = [(k, l) for k in range(n_pos) for l in range(n_pos) if directed or k <= l]
    for k, l in blocks:
        t, p = int(stats.ties[0, k, l]), int(stats.possible[0, k, l])
        tail = binomtest(t, p, d, alternative="greater").pvalue if p else 1.0
        expected = t > 0 and t > d * p and tail <= BACKGROUND_LEVEL / len(blocks)
        assert bool(got[k, l]) == expected, (k, l, t, p, d, tail)


def test_stray_ties_stay_background_but_zero_block_counts_them():
    rng = np.random.default_rng(1)
    labels = np.repeat(np.arange(4), 9)
    a = (labels[:, None] == labels[None, :]).astype(float)  # cohesive subgroups
    a = np.maximum(a, rng.random(a.shape) < 0.02)
    np.fill_diagonal(a, 0)
    stats = block_stats([sp.csr_array(a)], [True], Partition(labels, 4))
    assert image(stats, "above-background")[0].tolist() == np.eye(4, dtype=int).tolist()
    assert image(stats, "zero-block")[0].sum() > 4  # the textbook criterion keeps every stray tie


def test_uniform_random_ties_give_an_empty_image_most_of_the_time():
    # Bonferroni over blocks: at most 5% of such networks may show any 1 (seeded, 200 networks;
    # 99.9% binomial bound on 200 x 0.05 is 20)
    ones = 0
    for seed in range(200):
        rng = np.random.default_rng(seed)
        a = (rng.random((30, 30)) < 0.1).astype(float)
        np.fill_diagonal(a, 0)
        stats = block_stats([sp.csr_array(a)], [True], Partition(rng.integers(0, 3, 30), 3))
        ones += bool(image(stats, "above-background").any())
    assert ones <= 20


def test_level_is_checked():
    stats = block_stats([sp.csr_array(np.ones((4, 4)))], [True], Partition(np.array([0, 0, 1, 1]), 2))
    with pytest.raises(UsageError):
        above_background(stats, 1.5)
