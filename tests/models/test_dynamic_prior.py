"""The dynamic model's transition prior: its density, its MAP step, and what it changes."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import minimize
from scipy.special import softmax
from scipy.stats import dirichlet

from tests.helpers.planted import planted_sbm
from tracker.execution import configured
from tracker.models import dynamic as dyn
from tracker.models.dynamic import DynamicSBM


@pytest.fixture(autouse=True)
def one_worker():
    # same answer whatever the workers (tracker.execution); one keeps these small fits fast
    with configured(workers=1):
        yield


def two_block_periods(rng, moves=(), T=4, n=40):
    """Two clear blocks of ``n / 2``; ``moves`` lists (actor, period) where the actor switches for good."""
    z = np.repeat([0, 1], n // 2)
    names = [f"a{i}" for i in range(n)]
    periods = []
    for t in range(T):
        zt = z.copy()
        for actor, when in moves:
            if t >= when:
                zt[actor] = 1 - z[actor]
        periods.append((names, [planted_sbm(zt, 2, 12.0, 1.0, rng)], [False]))
    return periods


def test_log_prior_is_the_dirichlet_density():
    # source: reference library: scipy.stats.dirichlet.logpdf of each row of P under
    # Dirichlet(1 + c m(rho)), m the pooled stay/move law (rows independent)
    rng = np.random.default_rng(3)
    B, c, rho = 4, 37.0, 0.08
    P = rng.dirichlet(np.ones(B) * 2.0, size=B)
    params = dyn._Params(np.full(B, 1 / B), P, np.ones((1, B, B)), prior=c, rho=rho)
    law = dyn._stay_law(rho, B)
    want = sum(dirichlet.logpdf(P[k], 1.0 + c * law[k]) for k in range(B))
    assert dyn._log_prior(params) == pytest.approx(want, rel=1e-10)
    assert dyn._log_prior(dyn._Params(params.pi, P, params.theta, prior=0.0, rho=rho)) == 0.0


def test_map_step_maximises_expected_transitions_plus_log_prior():
    # source: reference optimiser (scipy.optimize.minimize over each row on the simplex,
    # softmax parametrisation): the P-part of bound + log prior is
    # sum_kl (n_kl + c m_kl) log P_kl (Dempster, Laird & Rubin 1977, sec. 4.1, MAP by EM)
    rng = np.random.default_rng(8)
    periods = two_block_periods(rng, moves=[(0, 2), (25, 1)])
    data = dyn._prepare_periods(periods, True, False)
    state = dyn._one_start(data, 2, 0, 1, 20, 1e-6)[0]
    c, rho = 25.0, 0.05
    P = dyn._m_step(data, state, 2, None, c, rho).P
    weights = state.xi.sum(axis=0) + c * dyn._stay_law(rho, 2)
    for k in range(2):
        best = minimize(lambda x: -(weights[k] * np.log(softmax(x))).sum(), np.zeros(2), method="BFGS", tol=1e-12)
        assert np.allclose(P[k], softmax(best.x), atol=1e-6)


def test_unseen_kind_of_move_keeps_a_probability():
    # source: definition of the MAP: P_kl >= c m_kl / (n_k + c) > 0 where maximum likelihood
    # gives 0 to a kind of move never seen (here no actor leaves block 1)
    rng = np.random.default_rng(2)
    periods = two_block_periods(rng, moves=[(0, 2), (3, 2)])
    ml = DynamicSBM(2, seed=0, model="bernoulli", transition_prior=0).fit(periods)
    post = DynamicSBM(2, seed=0, model="bernoulli", transition_prior=50).fit(periods)
    stay_ml = int(np.argmin(ml.transition_.min(axis=1)))  # the row without moves out
    assert ml.transition_[stay_ml].min() < 1e-8
    assert np.isnan(ml.move_rate_) and ml.prior_strength_ == 0.0
    steps = 20 * 3  # about n_k = 20 actors x 3 steps in that row
    floor = 50 * post.move_rate_ / (steps + 50 + 5)
    assert post.transition_.min() > floor > 1e-3
    # the planted moves are still found, each with a change probability near 1
    assert post.change_probability_[2][[0, 3]].min() > 0.95


def test_zero_strength_is_maximum_likelihood():
    # source: definition: without the prior, P is the normalised expected transition counts,
    # i.e. the summed pairwise posteriors of consecutive periods (Rabiner 1989, eq. 40b)
    rng = np.random.default_rng(6)
    periods = two_block_periods(rng, moves=[(5, 1)])
    fit = DynamicSBM(2, seed=0, model="bernoulli", transition_prior=0, births=False).fit(periods)
    counts = sum(fit.pairwise_[t].sum(axis=0) for t in range(1, 4))
    want = np.maximum(counts / counts.sum(axis=1, keepdims=True), 1e-10)
    want /= want.sum(axis=1, keepdims=True)
    assert np.allclose(fit.transition_, want, atol=1e-6)


def test_the_prior_centre_is_the_pooled_move_rate_of_the_fit():
    # source: definition (empirical Bayes centre): rho = 1 - trace(n) / sum(n) of the
    # expected transition counts, here recomputed from the pairwise posteriors; two
    # planted moves among 40 x 3 steps
    rng = np.random.default_rng(9)
    periods = two_block_periods(rng, moves=[(1, 1), (30, 3)])
    fit = DynamicSBM(2, seed=0, model="bernoulli", births=False, transition_prior=dyn.MEASURED_PRIOR).fit(periods)
    counts = sum(fit.pairwise_[t].sum(axis=0) for t in range(1, 4))
    assert fit.move_rate_ == pytest.approx(1 - np.trace(counts) / counts.sum(), abs=2e-3)
    assert fit.move_rate_ == pytest.approx(2 / 120, abs=0.01)
    assert np.all(np.diff(fit.history_) >= -1e-9 * abs(fit.history_[0]))


@pytest.mark.parametrize("bad", [-1.0, float("nan"), float("inf")])
def test_bad_strength_is_refused(bad):
    with pytest.raises(ValueError, match="transition_prior"):
        DynamicSBM(2, transition_prior=bad).fit(two_block_periods(np.random.default_rng(0), T=2))
