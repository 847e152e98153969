"""Dynamic move confidence learned on studies drawn from the fitted model (tracker.pipeline.calibration):
the number of studies, the chain draws, tie values, the stored map, the ECE floor, and a seeded check
that the confidence is calibrated on planted data from an outside generator."""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp
import scipy.stats as st

import tracker.pipeline.calibration as calibration
from tests.helpers.planted import planted_dynamic
from tests.helpers.planted_study import planted_study
from tracker.blockmodel.fitting import FitSettings
from tracker.longitudinal.confidence import MoveCalibrator, simulate_period
from tracker.pipeline.fitting import fit_snapshots
from tracker.pipeline.calibration import (MAX_STUDIES, MIN_CANDIDATES, _Period, chain_draw, ece_floor,
                                          fitted_chain, posterior_feature, studies_needed)
from tracker.snapshot import Relation, Snapshot


def test_studies_needed_follows_the_stated_rule():
    # Source: the rule in studies_needed's docstring, worked by hand: ceil(500 x studies / candidates),
    # clipped to [floor, min(10 x floor, MAX_STUDIES)].
    assert MIN_CANDIDATES == 500 and MAX_STUDIES == 250
    assert studies_needed(50, 20, 20) == 200      # 2.5 per study -> 200 studies
    assert studies_needed(1000, 20, 20) == 20     # a large study: the floor
    assert studies_needed(499, 1, 1) == 2
    assert studies_needed(3, 20, 20) == 200       # 10 x the floor
    assert studies_needed(3, 30, 30) == MAX_STUDIES
    assert studies_needed(0, 20, 5) == 50
    assert studies_needed(0, 300, 300) == 300     # the floor wins over the cap
    try:
        studies_needed(5, 0, 1)
    except ValueError:
        pass
    else:
        raise AssertionError("zero studies must be refused")


def _template(n_actors, n_periods, labels, absent=()):
    rel = (Relation("r", False),)
    out = []
    for t in range(n_periods):
        actors = tuple(f"a{i}" for i in range(n_actors) if (i, t) not in absent)
        n = len(actors)
        out.append(_Period(str(t), actors, rel, (sp.csr_array((n, n)),), np.asarray(labels[t]), 3, None,
                           np.arange(3) + 1))
    return out


def test_chain_draw_moves_actors_at_the_fitted_transition_rate():
    # Source: the Markov chain's definition (Matias & Miele 2017, sec. 2): z_1 ~ pi, z_t | z_s ~ P^(t-s).
    # 4000 actors over 3 periods; the share of changes in each step is 1 - sum_k pi_k P_kk at step 1.
    # Binomial bound: 4 standard errors (common practice for a seeded check).
    n = 4000
    labels = [np.arange(n) % 3] * 3
    template = _template(n, 3, labels, absent={(i, 1) for i in range(n // 2)})  # half skip period 1
    pi = np.array([0.5, 0.3, 0.2])
    P = np.array([[0.9, 0.05, 0.05], [0.1, 0.8, 0.1], [0.0, 0.3, 0.7]])
    chain = {"initial": pi, "transition": P, "active": np.ones((3, 3), bool)}
    drawn, truth = chain_draw(template, chain, np.random.default_rng(5))
    first = drawn[0]
    assert np.all(np.abs(np.bincount(first, minlength=3) / n - pi) < 4 * np.sqrt(pi * (1 - pi) / n))
    wide = truth.pivot(index="actor", columns="period", values="track")
    skip = wide.index.isin([f"a{i}" for i in range(n // 2)])  # absent in period 1: one two-step draw
    for stay, law in ((wide["0"][skip] == wide["2"][skip], np.linalg.matrix_power(P, 2)),
                      (wide["0"][~skip] == wide["1"][~skip], P)):
        want = float(pi @ np.diag(law))
        assert abs(stay.mean() - want) < 4 * np.sqrt(want * (1 - want) / stay.size)
    # A position closed in a period takes nobody there, and the others are renormalised.
    chain["active"] = np.array([[True, True, False]] * 3)
    drawn, _ = chain_draw(template, chain, np.random.default_rng(6))
    assert all((d != 2).all() for d in drawn)


def test_ties_carry_values_drawn_from_the_given_law():
    # Source: Bernoulli blockmodel (Holland, Laskey & Leinhardt 1983) for which pairs are tied; each tie's
    # value drawn from the stated law {1: 0.6, 3: 0.4} (mean 1.8).  4 standard errors.
    labels = np.repeat([0, 1], 150)
    prob = np.array([[[0.3, 0.05], [0.05, 0.2]]])
    law = {(0, 0, 0): (np.array([1.0, 3.0]), np.array([0.6, 0.4]))}
    mat = simulate_period(labels, prob, [False], np.random.default_rng(2), values=law)[0].toarray()
    assert np.allclose(mat, mat.T) and np.all(np.diag(mat) == 0)
    inside = mat[:150, :150][np.triu_indices(150, 1)]
    assert abs((inside > 0).mean() - 0.3) < 4 * np.sqrt(0.3 * 0.7 / inside.size)
    v = inside[inside > 0]
    assert set(np.unique(v)) == {1.0, 3.0} and abs((v == 3).mean() - 0.4) < 4 * np.sqrt(0.24 / v.size)
    assert set(np.unique(mat[:150, 150:])) <= {0.0, 1.0}  # a block without a law: ties carry 1


def test_chain_ties_keep_the_fitted_rate_and_the_observed_events_per_tie():
    # Source: the definitions in fitted_chain, counted by hand on one period (Wasserman & Faust 1994,
    # sec. 10.2: block density = ties / possible pairs).  Block (0,0): a-b, 3 events, 2 ordered pairs;
    # block (0,1): a-c, 1 event, 2 ordered pairs.
    m = sp.csr_array(np.array([[0, 3, 1], [3, 0, 0], [1, 0, 0]], dtype=float))
    template = [_Period("1", ("a", "b", "c"), (Relation("r", False),), (m,), np.array([0, 0, 1]), 2, None,
                        np.array([1, 2]))]
    law = {"initial": [0.5, 0.5], "transition": [[1, 0], [0, 1]]}
    chain = fitted_chain(template, law)  # no stored rates: events / pairs
    assert chain["rates"][0].tolist() == [[3.0, 0.5], [0.5, 0.0]]
    # P(tie) = rate / events per tie: 3 / 3 = 1 and 0.5 / 1.
    assert chain["tie_prob"][0].tolist() == [[1.0, 0.5], [0.5, 0.0]]
    assert chain["values"][(0, 0, 0)][0].tolist() == [3.0] and chain["active"].tolist() == [[True, True]]
    stored = fitted_chain(template, {**law, "rates": [[[0.6, 0.2], [0.2, 0.3]]]})
    assert np.allclose(stored["tie_prob"][0], [[0.2, 0.2], [0.2, 0.3]])  # 0.6 / 3 events per tie
    binary = fitted_chain(template, {**law, "rates": [[[0.6, 0.2], [0.2, 0.3]]], "model": "bernoulli"})
    assert np.allclose(binary["tie_prob"][0], [[0.6, 0.2], [0.2, 0.3]]) and binary["values"] == {}


def test_stored_map_gives_the_isotonic_predictions():
    # Source: scikit-learn's IsotonicRegression predicts by linear interpolation between its knots
    # (X_thresholds_, y_thresholds_), clipped outside; the stored map must give the same numbers.
    rng = np.random.default_rng(3)
    p = rng.random(600)
    model = MoveCalibrator(monotone=True).fit(p[:, None], rng.random(600) < p ** 2)
    grid = np.concatenate([np.linspace(-0.1, 1.1, 37), [np.nan]])
    want = model.predict(grid[:, None])
    got = MoveCalibrator.apply_steps(model.steps(), grid)
    assert np.allclose(got[:-1], want[:-1]) and np.isnan(got[-1])
    empty = MoveCalibrator(monotone=True).fit(np.array([[0.5]]), np.array([True]))
    assert np.allclose(MoveCalibrator.apply_steps(empty.steps(), np.array([0.2])), empty.predict(np.array([[0.2]])))


def test_ece_floor_is_the_binomial_expectation():
    # Source: exact binomial law (scipy.stats.binom): n moves at confidence 0.5 fall in one bin, so a
    # perfectly calibrated ECE is |X/n - 1/2| with X ~ Binomial(n, 1/2); its mean is the floor.
    n = 40
    x = np.arange(n + 1)
    exact = float(np.sum(st.binom.pmf(x, n, 0.5) * np.abs(x / n - 0.5)))
    mean, high = ece_floor(np.full(n, 0.5), draws=1000, seed=1)
    assert abs(mean - exact) < 0.006 and high >= mean  # SE of the mean of 1000 draws: 0.0015
    assert ece_floor(np.array([0.0, 1.0, 1.0]))[0] == 0.0
    assert np.isnan(ece_floor(np.zeros(0))[0])


GENERATOR = dict(n_actors=60, n_positions=3, n_periods=4, density_in=0.25, density_out=0.03, movers=8, core=False,
                 extra_events=0.5)


def test_dynamic_confidence_is_calibrated_on_planted_data(tmp_path, monkeypatch):
    # Generator (outside the model: ties present with probability 0.25 inside a position and 0.03
    # between, each carrying 1 + Poisson(0.5) events, so counts are not the model's Poisson; 8 planted
    # single moves; tests/helpers/planted.py; one start of the dynamic model).  The map is learned on studies drawn from the fit of
    # seed 0 (with 150 simulated candidates instead of 500, to keep the test fast) and applied to the
    # candidate changes of 10 fresh planted studies (seeds 1-10), each fitted by the dynamic model.
    # Under calibration the number of real candidates is a sum of independent Bernoulli(confidence)
    # (Poisson-binomial): mean sum(c), variance sum(c (1 - c)); bound 3 standard deviations plus 1
    # (a count is whole), overall and for confidence below and above 0.5 (common practice for a
    # seeded check).  Before the simulated ties took the observed events per tie (a Poisson world),
    # this failed: 96 candidates at confidence 0.99, 73 real.
    monkeypatch.setattr(calibration, "MIN_CANDIDATES", 150)
    study, _ = planted_study(tmp_path, seed=0, **GENERATOR)
    with study:
        study.fit(positions=3, draws=0, seed=0, options={"restarts": 1})
        fit_id = study.align(draws=4, seed=0)["fit"]
        steps = study.store.alignment_params(fit_id)["confidence_map"]
    settings = FitSettings(method="dynamic", positions=3, draws=0, seed=0, options={"restarts": 1})
    rel = (Relation("meets", False),)
    conf, real = [], []
    for seed in range(1, 11):
        snaps, _, true_moves = planted_dynamic(seed=seed, **GENERATOR)
        snapshots = [Snapshot(p, tuple(a), rel, tuple(m)) for p, a, m, _ in snaps]
        fits = fit_snapshots(snapshots, settings)
        found = _candidates(fits)
        conf.append(MoveCalibrator.apply_steps(steps, posterior_feature([(f.period, f.diagnostics) for f in fits],
                                                                        found)[:, 0]))
        want = set(zip(true_moves["actor"], true_moves["to_period"]))
        real.append(np.array([(a, t) in want for a, t in zip(found["actor"], found["to_period"])]))
    conf, real = np.concatenate(conf), np.concatenate(real)
    assert conf.size >= 40  # enough candidates for the bound to mean something
    for part in (np.ones(conf.size, bool), conf < 0.5, conf >= 0.5):
        c, y = conf[part], real[part]
        assert abs(y.sum() - c.sum()) <= 3 * np.sqrt(np.sum(c * (1 - c))) + 1, (part.sum(), y.sum(), c.sum())


def _candidates(fits) -> pd.DataFrame:
    from tracker.longitudinal.align import PeriodPositions, memberships
    from tracker.longitudinal.movement import moves
    from tracker.pipeline.tracking import identity_alignment

    pps = [PeriodPositions(f.period, f.actors, f.partition.labels, f.partition.n_positions, f.partition.isolates,
                           f.stats.density) for f in fits]
    return moves(memberships(pps, identity_alignment(pps)), [p.period for p in pps])
