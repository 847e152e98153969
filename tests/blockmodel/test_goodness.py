"""Goodness of fit: inconsistencies and density correlation by brute force; permutation test."""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.goodness import (
    density_correlation,
    density_correlation_of_tables,
    fit_summary,
    inconsistencies,
    permutation_test,
)
from tracker.blockmodel.image import image
from tracker.blockmodel.partition import Partition
from tracker.errors import UsageError


def _cells(dense, is_directed):
    """Index arrays of the cells that can hold a tie (unordered pairs once when undirected)."""
    n = dense.shape[0]
    if is_directed:
        return np.nonzero(~np.eye(n, dtype=bool))
    return np.triu_indices(n, 1)


@st.composite
def _case(draw):
    n = draw(st.integers(2, 9))
    n_pos = draw(st.integers(1, 4))
    n_rel = draw(st.integers(1, 2))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    mats, dirs = [], []
    for _ in range(n_rel):
        is_directed = bool(rng.random() < 0.5)
        dense = (rng.random((n, n)) < rng.random()).astype(float)
        np.fill_diagonal(dense, 0)
        if not is_directed:
            dense = np.triu(dense) + np.triu(dense).T
        mats.append(dense)
        dirs.append(is_directed)
    labels = rng.integers(0, n_pos, size=n)
    return mats, dirs, labels, n_pos


@settings(max_examples=60, deadline=None)
@given(_case(), st.integers(0, 2**31 - 1))
def test_inconsistencies_equal_cell_by_cell_count(case, seed):
    mats, dirs, labels, n_pos = case
    img = np.random.default_rng(seed).integers(0, 2, size=(len(mats), n_pos, n_pos))
    for r, is_directed in enumerate(dirs):
        if not is_directed:  # an undirected relation has a symmetric image
            img[r] = np.triu(img[r]) + np.triu(img[r], 1).T
    stats = block_stats([sp.csr_array(m) for m in mats], dirs, Partition(labels, n_pos))
    got = inconsistencies(stats, img)
    for r, (dense, is_directed) in enumerate(zip(mats, dirs)):
        # Brute force over the definition (Doreian, Batagelj & Ferligoj 2005):
        # a cell disagrees when it differs from its block's image value.
        rows, cols = _cells(dense, is_directed)
        ideal = img[r][labels[rows], labels[cols]]
        assert got[r] == np.count_nonzero((dense[rows, cols] != 0) != (ideal == 1))


@settings(max_examples=80, deadline=None)
@given(_case())
def test_density_correlation_equals_numpy_corrcoef(case):
    mats, dirs, labels, n_pos = case
    stats = block_stats([sp.csr_array(m) for m in mats], dirs, Partition(labels, n_pos))
    xs, ds = [], []
    for r, (dense, is_directed) in enumerate(zip(mats, dirs)):
        rows, cols = _cells(dense, is_directed)
        xs.append((dense[rows, cols] != 0).astype(float))
        ds.append(stats.density[r][labels[rows], labels[cols]])
    x, d = np.concatenate(xs), np.concatenate(ds)
    got = density_correlation(stats)
    if x.std() == 0:
        assert math.isnan(got)
        return
    if d.std() < 1e-12:
        assert got == pytest.approx(0.0, abs=1e-9)  # documented convention
        return
    # Reference: numpy.corrcoef of the explicit cell vectors (Pearson).  The tolerance is
    # that of a square root: the statistic is sqrt(between / total variance), so a rounding
    # error of 1e-16 in a between-variance near 0 shows as about 1e-8 in the correlation.
    assert got == pytest.approx(np.corrcoef(x, d)[0, 1], abs=1e-6)


def test_density_correlation_of_perfect_structure_is_one():
    # Two disjoint cliques: densities are 0 or 1, equal to the data (W&F 1994, sec. 10.4.2).
    g = nx.disjoint_union(nx.complete_graph(4), nx.complete_graph(5))
    a = nx.to_scipy_sparse_array(g, dtype=float)
    stats = block_stats([a], [False], Partition(np.array([0] * 4 + [1] * 5), 2))
    assert density_correlation(stats) == pytest.approx(1.0)
    assert density_correlation(block_stats([a], [False], Partition(np.zeros(9, dtype=int), 1))) == 0.0


def _planted_two_groups(rng, n=30, p_in=0.6, p_out=0.05):
    labels = rng.permutation(np.arange(n) % 2)
    prob = np.where(labels[:, None] == labels[None, :], p_in, p_out)
    a = (rng.random((n, n)) < prob).astype(float)
    np.fill_diagonal(a, 0)
    return sp.csr_array(a), labels


def test_permutation_test_detects_planted_structure():
    rng = np.random.default_rng(7)
    a, labels = _planted_two_groups(rng)
    observed, p, null = permutation_test([a], [True], Partition(labels, 2), draws=199, seed=1)
    # Standard permutation-test practice: the smallest attainable p is 1 / (draws + 1).
    assert p < 0.05
    assert p == pytest.approx(1 / 200)
    assert observed > null.max()
    assert null.shape == (199,)


def test_permutation_test_on_random_graphs_is_not_small_on_average():
    # Under the null (no link between graph and labels) p is about uniform:
    # its mean is near 1/2 and few runs fall below 0.05 (common practice).
    ps = []
    for seed in range(12):
        g = nx.gnp_random_graph(25, 0.15, seed=seed, directed=True)
        a = nx.to_scipy_sparse_array(g, nodelist=range(25), dtype=float)
        labels = np.random.default_rng(seed).integers(0, 3, size=25)
        ps.append(permutation_test([a], [True], Partition(labels, 3), draws=99, seed=seed)[1])
    assert np.mean(ps) > 0.25
    assert np.mean(np.array(ps) < 0.05) <= 0.25


def test_permutation_test_is_deterministic_and_p_value_formula():
    rng = np.random.default_rng(3)
    a, labels = _planted_two_groups(rng, p_in=0.3, p_out=0.2)
    part = Partition(labels, 2)
    first = permutation_test([a], [True], part, draws=50, seed=11)
    second = permutation_test([a], [True], part, draws=50, seed=11)
    other = permutation_test([a], [True], part, draws=50, seed=12)
    assert first[0] == second[0] and first[1] == second[1]
    np.testing.assert_array_equal(first[2], second[2])
    assert not np.array_equal(first[2], other[2])
    observed, p, null = first
    assert p == pytest.approx((1 + np.sum(null >= observed)) / 51)


def test_fast_null_agrees_with_full_recomputation():
    # The fast path recounts ties only; a callable statistic recomputes the
    # whole block table. Same seed, same relabellings: same null values.
    rng = np.random.default_rng(5)
    a, labels = _planted_two_groups(rng, n=20)
    b = sp.csr_array(np.triu(rng.random((20, 20)) < 0.2, 1).astype(float))
    b = b + b.T
    part = Partition(labels, 2)
    fast = permutation_test([a, b], [True, False], part, draws=30, seed=2)
    slow = permutation_test([a, b], [True, False], part, draws=30, seed=2, statistic=density_correlation)
    assert fast[0] == pytest.approx(slow[0])
    np.testing.assert_allclose(fast[2], slow[2])


def test_permutation_test_bad_arguments():
    a = sp.csr_array(np.ones((3, 3)) - np.eye(3))
    part = Partition(np.array([0, 0, 1]), 2)
    with pytest.raises(UsageError):
        permutation_test([a], [True], part, draws=0)
    with pytest.raises(UsageError):
        permutation_test([a], [True], part, statistic="likelihood")
    # A complete graph has no variation: the statistic and p are undefined.
    observed, p, _ = permutation_test([a], [True], part, draws=5)
    assert math.isnan(observed) and math.isnan(p)


def test_fit_summary():
    g = nx.disjoint_union(nx.complete_graph(3), nx.path_graph(3))
    a = nx.to_scipy_sparse_array(g, dtype=float)
    part = Partition(np.array([0, 0, 0, 1, 1, 1]), 2)
    summary = fit_summary([a], [False], part, "one-block")
    assert summary["image"] == [[[1, 0], [0, 0]]]
    # The path 3-4-5 has 2 of 3 possible ties, imaged 0 by one-block: 2 inconsistencies.
    assert summary["inconsistencies"] == 2
    assert summary["inconsistencies_by_relation"] == [2]
    assert summary["perfect_fit"] is False
    stats = block_stats([a], [False], part)
    assert summary["density_correlation"] == density_correlation(stats)
    assert inconsistencies(stats, image(stats, "zero-block")).tolist() == [1]


@pytest.mark.parametrize("directed", [True, False])
def test_density_correlation_of_tables_without_the_isolates_position(directed):
    # Source: the definition recomputed on the tied actors alone (block_stats of the
    # sub-network): leaving the isolates' position out of the tables is the same.
    rng = np.random.default_rng(4)
    a = (rng.random((12, 12)) < 0.3).astype(float)
    a[9:, :] = a[:, 9:] = 0  # actors 9-11 have no tie
    np.fill_diagonal(a, 0)
    if not directed:
        a = np.triu(a) + np.triu(a).T
    labels = np.array([0, 0, 0, 1, 1, 1, 2, 2, 2, 3, 3, 3])
    stats = block_stats([sp.csr_array(a)], [directed], Partition(labels, 4))
    tied = block_stats([sp.csr_array(a[:9, :9])], [directed], Partition(labels[:9], 3))
    got = density_correlation_of_tables(stats.ties, stats.possible, [directed], leave_out=3)
    assert got == pytest.approx(density_correlation(tied), abs=1e-12)
    assert density_correlation_of_tables(stats.ties, stats.possible, [directed]) == pytest.approx(
        density_correlation(stats), abs=1e-12)
    assert abs(density_correlation(stats) - got) > 1e-3  # the isolates' empty blocks change it
    with pytest.raises(ValueError):
        density_correlation_of_tables(stats.ties[0], stats.possible[0], [directed])
