"""Dynamic stochastic blockmodel: bounds by enumeration, pooled detectability, absences."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.special import gammaln, logsumexp, xlogy
from sklearn.metrics import adjusted_rand_score

from tracker.models import dynamic as dyn
from tracker.blockmodel.sbm import SBMPositions, log_likelihood
from tracker.models.dynamic import DynamicSBM
from tests.helpers.planted import planted_sbm

VARIANTS = [("poisson", False), ("bernoulli", False), ("poisson", True)]


def markov_positions(n, T, B, eta, rng):
    """Each actor keeps its position with probability eta, else draws one uniformly
    (the dynamic model of Ghasemian et al. 2016)."""
    z = [rng.integers(B, size=n)]
    for _ in range(1, T):
        z.append(np.where(rng.random(n) < eta, z[-1], rng.integers(B, size=n)))
    return z


def small_periods(rng, directed, B=2, counts=True):
    """Four actors over three periods: one with a gap, two entering or leaving."""
    present = [["a", "b", "d"], ["a", "c", "d"], ["a", "b", "c"]]
    periods = []
    for names in present:
        n = len(names)
        A = rng.integers(0, 3 if counts else 2, size=(n, n)).astype(float)
        np.fill_diagonal(A, 0)
        if not directed:
            A = np.triu(A, 1)
            A = A + A.T
        periods.append((names, [sp.csr_array(A)], [directed]))
    return periods


# ---------------------------------------------------------------- exact bounds


def exact_log_evidence(periods, fit, model, dc):
    """log p(A) by enumerating every actor's chain (definition of the model)."""
    actors = fit.actors_
    T = len(periods)
    where = {a: [t for t in range(T) if a in periods[t][0]] for a in actors}
    spans = {a: list(range(where[a][0], where[a][-1] + 1)) for a in actors}
    slots = [(a, t) for a in actors for t in spans[a]]
    B = fit.transition_.shape[0]
    logpi, logP = np.log(fit.initial_), np.log(fit.transition_)
    total = []
    for states in itertools.product(range(B), repeat=len(slots)):
        z = dict(zip(slots, states))
        value = 0.0
        for a in actors:
            ts = spans[a]
            value += logpi[z[a, ts[0]]] + sum(logP[z[a, s - 1], z[a, s]] for s in ts[1:])
        for t, (names, mats, flags) in enumerate(periods):
            labels = np.array([z[a, t] for a in names])
            for r, (mat, directed) in enumerate(zip(mats, flags)):
                value += period_log_likelihood(mat.toarray(), directed, labels, fit.rates_[r], model, dc)
        total.append(value)
    return logsumexp(total)


def period_log_likelihood(A, directed, z, theta, model, dc):
    n = A.shape[0]
    pair = ~np.eye(n, dtype=bool) if directed else np.triu(~np.eye(n, dtype=bool))
    if model == "bernoulli":
        A = (A > 0).astype(float)
        p = theta[np.ix_(z, z)]
        return (xlogy(A, p) + xlogy(1 - A, 1 - p))[pair].sum()
    if dc:
        # plug-in activity: degree in the period (Karrer & Newman 2011 model,
        # self pair with mean lam_ii, or lam_ii / 2 undirected, observed as zero)
        lam = np.outer(A.sum(1), A.sum(0)) * theta[np.ix_(z, z)]
        diag = (1.0 if directed else 0.5) * np.diag(lam).sum()
    else:
        lam = theta[np.ix_(z, z)]
        diag = 0.0
    return (xlogy(A, lam) - lam - gammaln(A + 1))[pair].sum() - diag


@pytest.mark.parametrize("variant", VARIANTS)
@pytest.mark.parametrize("directed", [False, True])
def test_bound_below_exact_evidence(variant, directed):
    # source: brute force (enumeration of all chains) and Jensen's inequality:
    # the variational bound never exceeds log p(A) (Daudin, Picard & Robin 2008)
    model, dc = variant
    periods = small_periods(np.random.default_rng(11), directed, counts=(model == "poisson"))
    fit = DynamicSBM(2, model=model, degree_corrected=dc).fit(periods)
    exact = exact_log_evidence(periods, fit, model, dc)
    assert fit.elbo_ <= exact + 1e-9
    assert np.isfinite(fit.elbo_)


def test_bound_is_tight_without_ties():
    # source: definition: with no ties the emissions vanish, q is the prior chain,
    # and the bound equals log p(A) = 0 (Bernoulli, all block probabilities 0);
    # checks the chain entropy and expected log-prior terms
    names = [["a", "b", "c"], ["a", "c"], ["a", "b", "c", "d"]]
    periods = [(ns, [sp.csr_array((len(ns), len(ns)))], [False]) for ns in names]
    fit = DynamicSBM(2, model="bernoulli").fit(periods)
    assert fit.elbo_ == pytest.approx(0.0, abs=1e-9)


@pytest.mark.parametrize("variant", VARIANTS)
def test_one_period_clear_structure_matches_static_likelihood(variant):
    # source: cross-check with the static profile likelihood (itself checked by
    # brute force in test_sbm.py): with near-certain memberships the bound is
    # log p(A | z) + sum_k n_k log(n_k / n) (Daudin, Picard & Robin 2008)
    model, dc = variant
    rng = np.random.default_rng(0)
    z = np.repeat([0, 1, 2], 20)
    A = planted_sbm(z, 3, 45.0, 0.5, rng)
    names = [f"a{i}" for i in range(z.size)]
    fit = DynamicSBM(3, model=model, degree_corrected=dc).fit([(names, [A], [False])])
    labels = fit.labels_[0]
    assert adjusted_rand_score(z, labels) == 1.0
    sizes = np.bincount(labels)
    want = log_likelihood([A], [False], labels, model=model, degree_corrected=dc) + xlogy(sizes, sizes / z.size).sum()
    assert fit.elbo_ == pytest.approx(want, rel=1e-7)


@pytest.mark.parametrize("variant", VARIANTS)
@pytest.mark.parametrize("directed", [False, True])
def test_emissions_are_the_derivative_of_the_bound(variant, directed):
    # source: brute force: the expected log-likelihood is linear in one actor's
    # memberships, so moving that actor's mass from position 0 to k changes it
    # by exactly e[k] - e[0] (mean-field fixed point of Daudin, Picard & Robin 2008)
    model, dc = variant
    rng = np.random.default_rng(4)
    periods = small_periods(rng, directed, B=3, counts=(model == "poisson"))
    data = dyn._prepare_periods(periods, model == "bernoulli", dc)
    B = 3
    gamma = rng.dirichlet(np.ones(B), size=(data.T, data.n))
    theta = rng.uniform(0.05, 0.9, size=(1, B, B))
    if not directed:
        theta = (theta + theta.transpose(0, 2, 1)) / 2
    params = dyn._Params(np.full(B, 1 / B), np.full((B, B), 1 / B), theta)

    def fit_term(g):
        state = dyn._State(g, np.zeros((data.n, B, B)), np.zeros((data.n, B)), np.zeros(data.n), dyn._all_stats(data, g))
        return dyn._elbo(data, state, params), state

    base, state = fit_term(gamma)
    E = dyn._emissions(data, state, params)
    for t, idx in enumerate(data.index):
        for i in idx:
            values = []
            for k in range(B):
                g = gamma.copy()
                g[t, i] = np.eye(B)[k]
                values.append(fit_term(g)[0])
            assert np.allclose(np.diff(values), np.diff(E[t, i]), rtol=1e-9, atol=1e-9)


# ---------------------------------------------------------------- recovery


def test_joint_fit_beats_period_by_period_below_one_period_limit():
    # source: Ghasemian, Zhang, Clauset, Moore & Peel (2016): with stay probability
    # eta = 0.9 the detectability limit of the pooled dynamic model is
    # c lambda^2 = (1 - eta^2)/(1 + eta^2) = 0.105, below the one-period limit 1
    # (Decelle et al. 2011).  At c lambda^2 = 0.7, n = 600, 8 periods: measured
    # mean ARI 0.01 period by period, 0.69 jointly.
    rng = np.random.default_rng(0)
    n, T, B, c, snr = 600, 8, 2, 8.0, 0.7
    lam = np.sqrt(snr / c)
    zs = markov_positions(n, T, B, 0.9, rng)
    mats = [planted_sbm(z, B, c * (1 + lam), c * (1 - lam), rng) for z in zs]
    names = [f"a{i}" for i in range(n)]
    separate = np.mean(
        [adjusted_rand_score(z, SBMPositions(B, restarts=2).fit([A], [False]).labels_) for z, A in zip(zs, mats)]
    )
    fit = DynamicSBM(B).fit([(names, [A], [False]) for A in mats])
    joint = np.mean([adjusted_rand_score(z, fit.labels_[t]) for t, z in enumerate(zs)])
    assert joint - separate > 0.3
    assert np.all(np.diff(fit.history_) >= -1e-9 * abs(fit.history_[0]))
    # the fitted chain is sticky, as planted: stay 0.9 + 0.1/2 = 0.95
    assert np.all(np.diag(fit.transition_) > 0.85)


def test_history_never_decreases_with_absences_directed_degree_corrected():
    # source: property of EM (Dempster, Laird & Rubin 1977) kept by the
    # accept-if-no-worse E-step; common practice
    rng = np.random.default_rng(8)
    n, T, B = 150, 5, 3
    zs = markov_positions(n, T, B, 0.8, rng)
    periods = []
    for z in zs:
        keep = np.flatnonzero(rng.random(n) < 0.8)
        A = planted_sbm(z[keep], B, 6.0, 1.5, rng, directed=True)
        A = sp.csr_array(A.multiply(rng.integers(1, 4, size=A.shape)))
        periods.append(([f"a{i}" for i in keep], [A], [True]))
    fit = DynamicSBM(B, degree_corrected=True, restarts=2).fit(periods)
    steps = np.diff(fit.history_)
    assert np.all(steps >= -1e-9 * abs(fit.history_[0]))


# ---------------------------------------------------------------- bookkeeping


def test_absent_actors_get_no_posterior():
    # source: definition (absent is not isolated; an actor has a row only where present)
    rng = np.random.default_rng(1)
    periods = small_periods(rng, directed=False)
    fit = DynamicSBM(2, seed=3).fit(periods)
    assert fit.actors_ == ("a", "b", "d", "c")
    for t, (names, _, _) in enumerate(periods):
        assert fit.posteriors_[t].shape == (len(names), 2)
        assert fit.labels_[t].shape == (len(names),)
        assert np.allclose(fit.posteriors_[t].sum(axis=1), 1.0)
        assert np.all(fit.posteriors_[t] >= 0)
    assert set(fit.posteriors_) == {0, 1, 2}
    assert np.allclose(fit.transition_.sum(axis=1), 1.0)
    assert fit.initial_.sum() == pytest.approx(1.0)
    assert fit.rates_.shape == (1, 2, 2)


def test_same_seed_same_answer():
    # source: common practice (determinism rule of the project)
    rng = np.random.default_rng(2)
    zs = markov_positions(200, 4, 2, 0.9, rng)
    names = [f"a{i}" for i in range(200)]
    periods = [(names, [planted_sbm(z, 2, 7.0, 2.0, rng)], [False]) for z in zs]
    one = DynamicSBM(2, seed=5).fit(periods)
    two = DynamicSBM(2, seed=5).fit(periods)
    assert one.elbo_ == two.elbo_
    for t in range(4):
        assert np.array_equal(one.posteriors_[t], two.posteriors_[t])


def test_usage_errors():
    A = sp.csr_array(np.array([[0.0, 1.0], [1.0, 0.0]]))
    with pytest.raises(ValueError):
        DynamicSBM(2).fit([])
    with pytest.raises(ValueError):
        DynamicSBM(2).fit([(["a", "b"], [A], [False]), (["a", "b"], [A], [True])])  # relations differ
    with pytest.raises(ValueError):
        DynamicSBM(2).fit([(["a", "a"], [A], [False])])  # an actor twice
    with pytest.raises(ValueError):
        DynamicSBM(3).fit([(["a", "b"], [A], [False])])  # more positions than actors
    with pytest.raises(ValueError):
        DynamicSBM(2).fit([(["a", "b", "c"], [A], [False])])  # matrix does not fit the actors


# ---------------------------------------------------------------- pairwise posteriors


def test_pairwise_posterior_matches_enumeration_across_an_absence():
    # source: brute force of the definition: q(z_s = k, z_t = l) is the sum over every
    # position path of prior(path) * exp(emissions) with z_s = k, z_t = l, normalised
    # (Rabiner 1989, eq. 37); the actor is absent in period 2, where it emits nothing
    from types import SimpleNamespace

    rng = np.random.default_rng(2)
    T, B = 4, 3
    E = rng.normal(size=(T, 1, B))
    E[2] = 0.0  # absent: no emission
    pi = rng.dirichlet(np.ones(B))
    P = rng.dirichlet(np.ones(B), size=B)
    data = SimpleNamespace(first=np.array([0]), last=np.array([T - 1]),
                           index=[np.array([0]), np.array([0]), np.array([], dtype=int), np.array([0])])
    previous, pairwise = dyn._pairwise(E, data, pi, P)
    brute = {1: np.zeros((B, B)), 3: np.zeros((B, B))}
    for path in itertools.product(range(B), repeat=T):
        w = pi[path[0]] * np.prod([P[path[t - 1], path[t]] for t in range(1, T)])
        w *= np.exp(sum(E[t, 0, path[t]] for t in range(T)))
        brute[1][path[0], path[1]] += w
        brute[3][path[1], path[3]] += w  # across the absence: previous presence is period 1
    assert previous[1].tolist() == [0] and previous[3].tolist() == [1] and previous[0].tolist() == [-1]
    for t in (1, 3):
        assert np.allclose(pairwise[t][0], brute[t] / brute[t].sum(), atol=1e-12)
    assert np.isnan(pairwise[0]).all()


def test_change_probability_is_consistent_with_marginals_and_finds_a_planted_move():
    # source: definition: the pairwise posterior's margins are the marginal posteriors;
    # a planted single move (two clear blocks, an actor switching in period 2) has
    # change probability near 1 there and near 0 elsewhere (Matias & Miele 2017)
    rng = np.random.default_rng(5)
    n, B = 40, 2
    z = np.repeat([0, 1], n // 2)
    names = [f"a{i}" for i in range(n)]
    periods = []
    for t in range(4):
        zt = z.copy()
        if t >= 2:
            zt[0] = 1
        periods.append((names, [planted_sbm(zt, B, 12.0, 1.0, rng)], [False]))
    fit = DynamicSBM(B, seed=1, model="bernoulli").fit(periods)
    for t in (1, 2, 3):
        pw = fit.pairwise_[t]
        assert np.allclose(pw.sum(axis=2), fit.posteriors_[t - 1], atol=1e-6)
        assert np.allclose(pw.sum(axis=1), fit.posteriors_[t], atol=1e-6)
    assert fit.change_probability_[2][0] > 0.95
    others = np.concatenate([fit.change_probability_[t][1:] for t in (1, 2, 3)] + [fit.change_probability_[1][:1]])
    assert others.max() < 0.05


@pytest.mark.parametrize("snr, low, high", [(0.03, -0.05, 0.1), (0.7, 0.4, 1.0), (3.0, 0.9, 1.0)])
def test_recovery_below_near_and_above_the_dynamic_detectability_limit(snr, low, high):
    # source: Ghasemian, Zhang, Clauset, Moore & Peel (2016), Phys. Rev. X 6, 031005: for two
    # groups, stay probability eta and T -> infinity, positions are detectable iff
    # c lambda^2 > (1 - eta^2) / (1 + eta^2) = 0.105 at eta = 0.9 (their eq. for the
    # dynamic limit, from memory).  Below it (0.03) no method recovers them (mean ARI ~ 0);
    # near it (0.7: below the one-period limit 1, where each period alone is undetectable)
    # recovery is partial but real; far above (3.0) it is near perfect.  Measured with
    # n = 300, 6 periods, seed 11: ARI 0.00, 0.61, 0.99+.  At this finite size variational EM
    # still fails at 0.5 (ARI 0.00): the finite-size algorithmic threshold lies above the
    # asymptotic limit, so "near" here means within a factor of 7.
    rng = np.random.default_rng(11)
    n, T, B, c = 300, 6, 2, 8.0
    lam = np.sqrt(snr / c)
    zs = markov_positions(n, T, B, 0.9, rng)
    mats = [planted_sbm(z, B, c * (1 + lam), c * (1 - lam), rng) for z in zs]
    names = [f"a{i}" for i in range(n)]
    fit = DynamicSBM(B, restarts=2).fit([(names, [A], [False]) for A in mats])
    ari = np.mean([adjusted_rand_score(z, fit.labels_[t]) for t, z in enumerate(zs)])
    assert low <= ari <= high, ari


def test_a_position_founded_mid_series_is_born_then_and_recruits_are_dated():
    # source: planted dynamic blockmodel (Matias & Miele 2017) with a birth: three groups
    # of 15 from period 0; a founder, absent before period 3, starts a fourth position
    # there; it recruits two actors in period 4 and one in period 5.  Poisson counts per
    # pair: 0.8 inside a position, 0.03 between (common practice for planted partitions).
    # Known limit: at 0.4 inside, the quietest actor of an old group already sits in the
    # new position's slot in early periods (a position with few ties explains a quiet
    # actor), and the birth is not found (degree correction may help there; not measured).
    rng = np.random.default_rng(21)
    n, T = 46, 7
    z = np.tile(np.repeat([0, 1, 2, 3], [15, 15, 15, 1]), (T, 1))
    z[4:, [0, 16]] = 3
    z[5:, 30] = 3
    names = [f"a{i}" for i in range(n)]
    periods = []
    for t in range(T):
        present = np.arange(n) if t >= 3 else np.arange(n - 1)  # the founder (last) is absent before 3
        zt = z[t, present]
        rate = np.where(zt[:, None] == zt[None, :], 0.8, 0.03)
        upper = np.triu(rng.poisson(rate), 1).astype(float)
        periods.append(([names[i] for i in present], [sp.csr_array(upper + upper.T)], [False]))
    fit = DynamicSBM(4, seed=0).fit(periods)
    new = fit.labels_[3][-1]  # the founder's position
    assert fit.births_[new] == 3
    assert all((fit.labels_[t] != new).all() for t in range(3))  # empty before it is born
    # the recruits' moves are dated exactly, with a change probability near 1
    for actor, when in ((0, 4), (16, 4), (30, 5)):
        assert fit.labels_[when - 1][actor] != new and fit.labels_[when][actor] == new
        assert fit.change_probability_[when][actor] > 0.9
