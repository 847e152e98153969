"""The fit test against a null model: draws, p- and q-values, size and power.

Outside references: scipy.stats (false_discovery_control, binom) and numpy
index enumeration (brute force of the pair numbering).  The size check is the
definition of a valid test: on networks drawn with no positions at all, p <= 0.05
must happen in about 5% of studies.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats

from tracker.blockmodel.goodness import permutation_test
from tracker.execution import configured
from tracker.inference.fit_test import (
    Procedure, benjamini_hochberg, fit_test, fit_tests, monte_carlo_p, null_draw, tied_statistic,
)
from tracker.inference.fit_test import _pair_from_index


def _random_digraph(rng, n, density):
    a = (rng.random((n, n)) < density).astype(float)
    np.fill_diagonal(a, 0)
    return sp.csr_array(a)


def _planted_digraph(rng, sizes=(8, 8, 8), inside=0.7, outside=0.05):
    labels = np.repeat(np.arange(len(sizes)), sizes)
    prob = np.where(labels[:, None] == labels[None, :], inside, outside)
    a = (rng.random(prob.shape) < prob).astype(float)
    np.fill_diagonal(a, 0)
    return sp.csr_array(a)


@pytest.mark.parametrize("n", [2, 3, 7, 40, 301])
def test_pair_numbering_matches_brute_force_enumeration(n):
    # brute force: numpy's own enumeration of the off-diagonal cells and of the upper triangle
    i, j = _pair_from_index(np.arange(n * (n - 1)), n, True)
    rows, cols = np.nonzero(~np.eye(n, dtype=bool))
    assert np.array_equal(i, rows) and np.array_equal(j, cols)
    i, j = _pair_from_index(np.arange(n * (n - 1) // 2), n, False)
    rows, cols = np.triu_indices(n, 1)
    assert np.array_equal(i, rows) and np.array_equal(j, cols)


def test_ties_null_keeps_tie_count_and_values_per_relation():
    rng = np.random.default_rng(3)
    a = sp.random(30, 30, density=0.1, random_state=1, format="csr") * 5
    a.setdiag(0)
    a.eliminate_zeros()
    u = sp.triu(sp.random(30, 30, density=0.08, random_state=2), 1)
    u = sp.csr_array(u + u.T)
    draw = null_draw([sp.csr_array(a), u], [True, False], "ties", rng)
    assert draw[0].nnz == a.nnz and np.allclose(np.sort(draw[0].data), np.sort(a.data))
    assert draw[0].diagonal().sum() == 0
    assert (draw[1] != draw[1].T).nnz == 0 and draw[1].nnz == u.nnz
    assert np.allclose(np.sort(draw[1].data), np.sort(u.data))
    assert (draw[0] != sp.csr_array(a)).nnz > 0  # it did move the ties


def test_degree_null_keeps_every_degree():
    rng = np.random.default_rng(5)
    a = _random_digraph(rng, 25, 0.15)
    u = sp.csr_array(sp.triu(_random_digraph(rng, 25, 0.2), 1))
    u = sp.csr_array(u + u.T)
    d, s = null_draw([a, u], [True, False], "degrees", np.random.default_rng(1))
    assert np.array_equal(d.sum(axis=1), a.sum(axis=1)) and np.array_equal(d.sum(axis=0), a.sum(axis=0))
    assert np.array_equal(s.sum(axis=1), u.sum(axis=1)) and d.diagonal().sum() == 0
    assert (d != a).nnz > 0 and (s != u).nnz > 0


def test_null_draws_are_seeded():
    a = _random_digraph(np.random.default_rng(0), 20, 0.2)
    for null in ("ties", "degrees"):
        one = null_draw([a], [True], null, np.random.default_rng(9))[0]
        two = null_draw([a], [True], null, np.random.default_rng(9))[0]
        assert (one != two).nnz == 0


def test_benjamini_hochberg_matches_scipy():
    # reference: scipy.stats.false_discovery_control(method="bh")
    p = np.random.default_rng(2).random(40) ** 3
    assert np.allclose(benjamini_hochberg(p), stats.false_discovery_control(p, method="bh"))
    with_nan = benjamini_hochberg(np.r_[p[:5], np.nan])
    assert np.isnan(with_nan[-1]) and np.allclose(with_nan[:5], stats.false_discovery_control(p[:5]))


def test_monte_carlo_p_is_phipson_smyth():
    # Phipson & Smyth (2010): p = (b + 1) / (m + 1), b = draws at least as extreme
    assert monte_carlo_p(0.9, np.zeros(19)) == (0.05, 0)
    assert monte_carlo_p(0.1, np.ones(19)) == (1.0, 19)
    assert np.isnan(monte_carlo_p(float("nan"), np.ones(3))[0])


def test_bad_arguments_raise_value_error():
    a = _random_digraph(np.random.default_rng(0), 10, 0.3)
    with pytest.raises(ValueError, match="draws"):
        fit_test([a], [True], Procedure(positions=2), draws=0)
    with pytest.raises(ValueError, match="null model"):
        fit_test([a], [True], Procedure(positions=2), draws=5, null="shuffle")
    with pytest.raises(ValueError, match="square"):
        fit_test([a, sp.csr_array((4, 4))], [True, True], Procedure(positions=2), draws=5)
    with pytest.raises(ValueError):
        benjamini_hochberg([0.2, 1.5])


def test_same_answer_for_any_number_of_workers(pool_for_every_batch):
    a = _planted_digraph(np.random.default_rng(4))
    proc = Procedure(positions=3)
    with configured(workers=1):
        one = fit_test([a], [True], proc, draws=9, seed=5)
    with configured(workers=2):
        two = fit_test([a], [True], proc, draws=9, seed=5)
    assert np.array_equal(one.null_values, two.null_values) and one.p_value == two.p_value


def test_observed_statistic_is_the_procedure_on_the_data():
    a = _planted_digraph(np.random.default_rng(8))
    proc = Procedure(positions=3)
    with configured(workers=1):
        test = fit_test([a], [True], proc, draws=5, seed=1)
    assert test.observed == tied_statistic([a], [True], proc)
    assert test.draws == 5 and test.null_values.shape == (5,)


def _size_study(n_graphs=100, n=14, density=0.18, draws=19):
    """p-values of the fit test and of the old relabelling test on graphs without positions."""
    rng = np.random.default_rng(2026)
    proc = Procedure(method="structural", positions=3)
    new, old = [], []
    with configured(workers=1):
        graphs = [_random_digraph(rng, n, density) for _ in range(n_graphs)]
        tests = fit_tests([([g], [True], s) for s, g in enumerate(graphs)], proc, draws=draws)
        new = np.array([t.p_value for t in tests])
        for s, g in enumerate(graphs):
            part = proc.partition([g], [True])
            old.append(permutation_test([g], [True], part, draws=draws, seed=s)[1])
    return new, np.array(old)


@pytest.fixture(scope="module")
def size_study():  # 100 studies x 20 refits: a few seconds
    return _size_study()


@pytest.mark.slow
def test_false_positive_rate_is_near_five_percent(size_study):
    # Under the null, P(p <= 0.05) = 1 / 20 exactly for 19 draws (ties in the
    # statistic only lower it).  Two-sided 99.9% binomial bounds for 100 studies.
    new, _ = size_study
    hits = int(np.count_nonzero(new <= 0.05))
    low, high = stats.binom.ppf([0.0005, 0.9995], new.size, 0.05)
    assert hits <= high, f"{hits} of {new.size} random graphs rejected at 0.05"
    assert hits >= low
    # and the p-values spread over [0, 1] as they should (not piled at the minimum)
    assert 0.3 < np.median(new) < 0.7


@pytest.mark.slow
def test_old_relabelling_test_fails_the_same_check(size_study):
    # Relabelling the partition fitted to the data (the former p-value) rejects
    # almost every random graph: it is descriptive, not a test of structure.
    _, old = size_study
    hits = int(np.count_nonzero(old <= 0.05))
    high = stats.binom.ppf(0.9995, old.size, 0.05)
    assert hits > high, f"the relabelling test rejected only {hits} of {old.size}"


def test_power_is_near_one_on_planted_positions():
    rng = np.random.default_rng(11)
    graphs = [_planted_digraph(rng) for _ in range(10)]
    with configured(workers=1):
        tests = fit_tests([([g], [True], s) for s, g in enumerate(graphs)], Procedure(positions=3), draws=19)
    assert all(t.p_value <= 0.05 for t in tests)


def test_auto_positions_refits_the_choice_of_k():
    a = _planted_digraph(np.random.default_rng(12))
    with configured(workers=1):
        test = fit_test([a], [True], Procedure(positions="auto", k_range=(2, 4)), draws=5, null="degrees")
    assert test.null_model == "degrees" and test.p_value == pytest.approx(1 / 6)
