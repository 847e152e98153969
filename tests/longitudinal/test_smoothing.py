"""Tests of tracker.longitudinal.smoothing: the likelihood, the Viterbi step, and what
smoothing does to false and true moves on planted data."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.helpers.planted import block_density, planted_dynamic, standin_positions
from tracker.errors import UsageError
from tracker.longitudinal import (
    ISOLATES_TRACK,
    PeriodPositions,
    align,
    default_change_penalty,
    memberships,
    move_confidence,
    moves,
    smoothed_partitions,
    smoothed_refitter,
)
from tracker.longitudinal.smoothing import _Chain, _emissions, _mu, _prepared, _stats


@pytest.mark.parametrize("n_positions", [2, 3, 5])
@pytest.mark.parametrize("eta", [0.8, 0.9, 0.95])
def test_default_penalty_is_the_log_ratio_of_a_markov_transition_matrix(n_positions, eta):
    # Source: the transition model of dynamic SBMs (Matias & Miele 2017): stay with
    # probability eta, else move uniformly; the MAP cost of a change is log P_kk / P_kl.
    trans = np.full((n_positions, n_positions), (1 - eta) / (n_positions - 1))
    np.fill_diagonal(trans, eta)
    assert np.allclose(trans.sum(axis=1), 1.0)
    assert default_change_penalty(n_positions, eta) == pytest.approx(math.log(trans[0, 0] / trans[0, 1]))


@pytest.mark.parametrize("ties", ["binary", "counts"])
@pytest.mark.parametrize("directed", [False, True])
def test_emissions_equal_the_pairwise_log_likelihood(ties, directed):
    # Source: brute force over pairs of the Bernoulli / Poisson blockmodel log-likelihood
    # (Holland, Laskey & Leinhardt 1983; Karrer & Newman 2011) of actor i's ties if it
    # sat in position k, with the block rates held fixed.
    rng = np.random.default_rng(7)
    n, b = 11, 3
    counts = rng.poisson(0.6, (n, n)) * (rng.random((n, n)) < 0.5)
    np.fill_diagonal(counts, 0)
    if not directed:
        counts = np.triu(counts, 1)
        counts = counts + counts.T
    labels = rng.integers(0, b, n)
    labels[4] = -1  # an actor whose position is unknown: neither counted nor counting
    mats = _prepared([sp.csr_array(counts.astype(float))], ties)
    x = mats[0].toarray()
    stats = _stats(mats, labels, b)
    mu = _mu(stats[0][2], stats[0][3], None)
    got = _emissions(mats, stats, [directed], labels, None, ties)

    def pair(value, rate):
        if ties == "binary":
            return value * math.log(rate) + (1 - value) * math.log(1 - rate)
        return value * math.log(rate) - rate

    for i in range(n):
        for k in range(b):
            want = 0.0
            for j in range(n):
                if j == i or labels[j] < 0:
                    continue
                want += pair(x[i, j], mu[k, labels[j]])
                if directed:
                    want += pair(x[j, i], mu[labels[j], k])
            assert got[i, k] == pytest.approx(want, rel=1e-9, abs=1e-9)


def _sequence_score(seq, scores, penalty):
    return sum(scores[t][s] for t, s in enumerate(seq)) - penalty * sum(a != b for a, b in zip(seq, seq[1:]))


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 10_000), st.floats(0.0, 4.0), st.booleans())
def test_viterbi_reaches_the_brute_force_optimum(seed, penalty, freeze_first):
    # Source: brute force over every label sequence (itertools.product) of the objective
    # sum_t e_t(z_t) - c * #changes, with absent or tieless periods skipped.
    rng = np.random.default_rng(seed)
    b, n_t, pool = 3, 4, [f"a{i}" for i in range(5)]
    actors, tied, emissions = [], [], []
    for _ in range(n_t):
        present = [a for a in pool if rng.random() < 0.8] or pool[:1]
        actors.append(present)
        tied.append(rng.random(len(present)) < 0.85)
        emissions.append(rng.normal(0, 2, (len(present), b)))
    fixed = [np.where(tied[0], rng.integers(0, b, len(actors[0])), -1)] if freeze_first else []
    chain = _Chain(actors, None, tied=tied)
    labels = chain.viterbi(emissions, penalty, fixed)
    for a in pool:
        steps = [(t, actors[t].index(a)) for t in range(n_t) if a in actors[t] and tied[t][actors[t].index(a)]]
        if not steps:
            continue
        scores = [emissions[t][i] for t, i in steps]
        allowed = [
            [fixed[0][i]] if (t == 0 and fixed and fixed[0][i] >= 0) else range(b) for t, i in steps
        ]
        best = max(_sequence_score(seq, scores, penalty) for seq in itertools.product(*allowed))
        chosen = [labels[t][i] for t, i in steps]
        assert all(c in allow for c, allow in zip(chosen, allowed))
        assert _sequence_score(chosen, scores, penalty) == pytest.approx(best)


def test_a_one_period_blip_is_ignored_but_a_lasting_move_is_kept():
    # Source: the objective worked by hand with c = log(0.9 * 2 / 0.1) = 2.89 nats and
    # position 0 worth 2 nats a period: a blip to position 1 worth 4 nats scores
    # 8 + 4 - 2c = 6.2 < 8 (ignored); 3 nats a period for position 1 over the last three
    # periods scores 4 + 9 - c = 10.1 > 9 > 4 (kept).  Without a penalty the blip is taken.
    c = default_change_penalty(3)
    chain = _Chain([["a"]] * 5, None, tied=[np.array([True])] * 5)
    base = np.array([[2.0, 0.0, 0.0]])
    blip = [base, base, np.array([[0.0, 4.0, 0.0]]), base, base]
    lasting = [base, base] + [np.array([[0.0, 3.0, 0.0]])] * 3
    assert [lab[0] for lab in chain.viterbi(blip, c, [])] == [0, 0, 0, 0, 0]
    assert [lab[0] for lab in chain.viterbi(lasting, c, [])] == [0, 0, 1, 1, 1]
    assert [lab[0] for lab in chain.viterbi(blip, 0.0, [])] == [0, 0, 1, 0, 0]


def _evaluate(snaps, parts, true_moves):
    """Align a run, list its moves between ordinary positions, score them against the truth."""
    pps = [
        PeriodPositions.from_partition(period, actors, part, block_density(m, part))
        for (period, actors, m, _), part in zip(snaps, parts)
    ]
    al = align(pps)
    found = moves(memberships(pps, al), [s[0] for s in snaps], ignore_tracks=(ISOLATES_TRACK,))
    want = set(zip(true_moves["actor"], true_moves["to_period"]))
    hit = np.array([(a, p) in want for a, p in zip(found["actor"], found["to_period"])], dtype=bool)
    return al, found, hit


@pytest.mark.parametrize("seed", [1, 2])
def test_smoothing_and_confidence_remove_false_moves_at_low_density(seed):
    # Source: planted dynamic blockmodel (tests/helpers/planted.py) as ground truth:
    # about 11 ties per actor and period, 9 planted moves among 90 actors.
    snaps, _, true_moves = planted_dynamic(density_in=0.15, density_out=0.015, movers=9, seed=seed)
    periods = [s[0] for s in snaps]
    actors = [s[1] for s in snaps]
    mats = [s[2] for s in snaps]
    directed = snaps[0][3]
    alone = smoothed_partitions(
        mats, directed, actors, 3, change_penalty=0.0, image_pooling=0.0, init="periods", restarts=0,
        fit=standin_positions, seed=seed,
    )
    _, found0, hit0 = _evaluate(snaps, alone, true_moves)
    smooth = smoothed_partitions(mats, directed, actors, 3, fit=standin_positions, seed=seed)
    al, found1, hit1 = _evaluate(snaps, smooth, true_moves)
    fitter = smoothed_refitter(mats, directed, actors, periods, smooth, 3)
    conf = move_confidence(
        found1, fitter, matrices=dict(zip(periods, mats)), directed=directed,
        actors=dict(zip(periods, actors)), labels={p: part.labels for p, part in zip(periods, smooth)},
        assignment=al.assignment, draws=30, seed=0,
    )
    keep = conf >= 0.5
    n_true = len(true_moves)
    print(
        f"\nseed {seed}, {n_true} true moves: per-period fits {hit0.sum()} true / {(~hit0).sum()} false; "
        f"smoothed {hit1.sum()} true / {(~hit1).sum()} false; "
        f"smoothed + confidence>=0.5 {(hit1 & keep).sum()} true / {(~hit1 & keep).sum()} false"
    )
    assert (~hit0).sum() > 10 * n_true  # fitting periods alone invents many moves
    assert (~hit1 & keep).sum() <= 0.05 * (~hit0).sum()  # false moves drop sharply
    assert (hit1 & keep).sum() >= 0.6 * n_true  # true moves are kept


def test_moves_found_with_high_precision_and_recall_at_moderate_density():
    # Source: planted dynamic blockmodel as ground truth (about 20 ties per actor and
    # period), pooled over three planted studies.
    n_hit = n_found = n_true = 0
    for seed in (4, 5, 6):
        snaps, _, true_moves = planted_dynamic(density_in=0.3, density_out=0.03, movers=9, seed=seed)
        parts = smoothed_partitions(
            [s[2] for s in snaps], snaps[0][3], [s[1] for s in snaps], 3, fit=standin_positions
        )
        _, found, hit = _evaluate(snaps, parts, true_moves)
        n_hit, n_found, n_true = n_hit + hit.sum(), n_found + len(found), n_true + len(true_moves)
    precision, recall = n_hit / n_found, n_hit / n_true
    print(f"\nmoderate density smoothed: precision {precision:.2f}, recall {recall:.2f}")
    assert precision >= 0.8 and recall >= 0.8


def _small_study(seed=0, **kw):
    snaps, truth, true_moves = planted_dynamic(n_actors=45, n_periods=4, seed=seed, **kw)
    return [s[2] for s in snaps], snaps[0][3], [s[1] for s in snaps]


def test_same_seed_same_result_and_frozen_prefix_is_kept():
    # Source: the determinism rule and the documented contract of ``frozen``.
    mats, directed, actors = _small_study(density_in=0.2, density_out=0.02)
    one = smoothed_partitions(mats, directed, actors, 3, fit=standin_positions, seed=3)
    two = smoothed_partitions(mats, directed, actors, 3, fit=standin_positions, seed=3)
    assert all(np.array_equal(a.labels, b.labels) for a, b in zip(one, two))
    later = smoothed_partitions(
        mats, directed, actors, 3, fit=standin_positions, seed=11, init="periods", frozen=one[:2]
    )
    for a, b in zip(one[:2], later[:2]):
        assert np.array_equal(a.labels, b.labels)


def test_tieless_actors_get_the_isolates_position():
    # Source: the Partition convention (tracker/blockmodel/partition.py).
    mats, directed, actors = _small_study(density_in=0.2, density_out=0.02)
    mats = [list(m) for m in mats]
    coo = sp.coo_array(mats[1][0])
    keep = (coo.row != 0) & (coo.col != 0)  # actor 0 of period 2 loses every tie
    mats[1][0] = sp.csr_array((coo.data[keep], (coo.row[keep], coo.col[keep])), shape=coo.shape)
    parts = smoothed_partitions(mats, directed, actors, 3, fit=standin_positions)
    assert parts[1].isolates == 3 and parts[1].n_positions == 4
    assert parts[1].labels[0] == 3
    assert np.all(parts[1].labels[1:] < 3)
    assert parts[1].diagnostics["change_penalty"] == pytest.approx(default_change_penalty(3))


def test_usage_errors():
    mats, directed, actors = _small_study()
    with pytest.raises(UsageError):
        smoothed_partitions(mats, directed, actors[:-1], 3, fit=standin_positions)
    with pytest.raises(UsageError):
        smoothed_partitions(mats, directed, actors, 3, fit=standin_positions, init="random")
    with pytest.raises(UsageError):
        smoothed_partitions(mats, directed, actors, 3, fit=standin_positions, ties="weights")
    with pytest.raises(UsageError):
        smoothed_partitions(mats, directed, actors, 3, fit=standin_positions, change_penalty=-1)
    with pytest.raises(UsageError):
        default_change_penalty(3, 1.0)


def test_smoothed_fits_describes_each_period_with_the_smoothed_partition():
    # Source: the adapter's contract: the partitions of smoothed_partitions with the
    # same start (find_positions), described per period by fitting.fit_partition.
    from tracker.blockmodel.fitting import FitSettings
    from tracker.blockmodel.positions import find_positions
    from tracker.longitudinal import smoothed_fits
    from tracker.snapshot import Relation, Snapshot

    snaps, _, _ = planted_dynamic(n_actors=45, n_periods=3, density_in=0.4, density_out=0.04, seed=2)
    snapshots = [
        Snapshot(period, actors, (Relation("r0", False),), tuple(m)) for period, actors, m, _ in snaps
    ]
    settings = FitSettings(method="concor", positions=3, draws=0, smoothing=2.0)
    seen = []
    fits = smoothed_fits(snapshots, settings, progress=seen.append)
    parts = smoothed_partitions(
        [s.matrices for s in snapshots], [False], [s.actors for s in snapshots], 3, change_penalty=2.0,
        fit=lambda m, d, k, seed: find_positions(m, d, k, method="concor", seed=seed),
    )
    assert seen == [s.period for s in snapshots]
    for fit, part, snap in zip(fits, parts, snapshots):
        assert fit.period == snap.period and fit.actors == snap.actors
        assert np.array_equal(fit.partition.labels, part.labels)
        binary = [(m > 0).astype(float) for m in snap.matrices]
        assert np.allclose(fit.stats.density, block_density(binary, part))
