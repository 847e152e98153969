"""Tests of tracker.longitudinal.confidence: event resampling and move confidence."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from scipy.stats import multinomial

from tests.helpers.planted import block_density, planted_dynamic, standin_positions
from tracker.errors import UsageError
from tracker.longitudinal import (
    PeriodPositions,
    align,
    memberships,
    move_confidence,
    moves,
    resample_matrices,
    smoothed_partitions,
    smoothed_refitter,
)


def _counts(directed, seed=0, n=8):
    rng = np.random.default_rng(seed)
    x = rng.poisson(1.0, (n, n)) * (rng.random((n, n)) < 0.4)
    np.fill_diagonal(x, 0)
    if not directed:
        x = np.triu(x, 1)
        x = x + x.T
    return sp.csr_array(x.astype(float))


@pytest.mark.parametrize("directed", [False, True])
def test_resampling_keeps_events_support_and_symmetry(directed):
    # Source: definition of the replicate (same number of events, drawn from observed ties).
    mat = _counts(directed)
    total = mat.sum() if directed else mat.sum() / 2
    rng = np.random.default_rng(1)
    for _ in range(20):
        new = resample_matrices([mat], [directed], rng)[0]
        assert (new.sum() if directed else new.sum() / 2) == pytest.approx(round(total))
        assert np.all(new.diagonal() == 0)
        assert np.all((new.toarray() > 0) <= (mat.toarray() > 0))
        if not directed:
            assert abs(new - new.T).sum() == 0


def test_resampling_mean_matches_the_multinomial_mean():
    # Source: scipy.stats.multinomial(E, p).mean() as the reference for E[x*] = E p.
    mat = _counts(False, seed=2)
    coo = sp.coo_array(mat)
    upper = coo.row < coo.col
    vals = coo.data[upper]
    events = int(round(vals.sum()))
    ref = multinomial(events, vals / vals.sum()).mean()
    rng = np.random.default_rng(5)
    draws = 2000
    acc = np.zeros(mat.shape)
    for _ in range(draws):
        acc += resample_matrices([mat], [False], rng)[0].toarray()
    mean = (acc / draws)[coo.row[upper], coo.col[upper]]
    sd = np.sqrt(events * (vals / vals.sum()) * (1 - vals / vals.sum()) / draws)
    assert np.all(np.abs(mean - ref) < 5 * sd + 1e-12)


def test_resampling_is_seeded():
    mat = _counts(True, seed=3)
    a = resample_matrices([mat], [True], np.random.default_rng(9))[0]
    b = resample_matrices([mat], [True], np.random.default_rng(9))[0]
    assert abs(a - b).sum() == 0
    with pytest.raises(UsageError):
        resample_matrices([mat], [True, False], np.random.default_rng(0))


def _toy_study():
    """Two periods, two positions, actor 'm' moves from the first group to the second."""
    p1 = ("2001", ("a", "b", "c", "m", "d", "e", "f"), np.array([0, 0, 0, 0, 1, 1, 1]))
    p2 = ("2002", ("a", "b", "c", "m", "d", "e", "f"), np.array([0, 0, 0, 1, 1, 1, 1]))
    mats, pps = {}, []
    for period, actors, labels in (p1, p2):
        same = (labels[:, None] == labels[None, :]).astype(float)
        np.fill_diagonal(same, 0)
        mats[period] = [sp.csr_array(same)]
        pps.append(PeriodPositions(period, actors, labels, 2))
    al = align(pps)
    mv = moves(memberships(pps, al), ["2001", "2002"])
    return pps, al, mv, mats


def test_confidence_is_one_when_every_refit_reproduces_the_positions():
    # Source: hand-built case.  The refit returns the original partition under a new
    # numbering each time; the Hungarian matching must undo it, so every move is reproduced.
    pps, al, mv, mats = _toy_study()
    assert mv[["actor", "from_track", "to_track"]].values.tolist() == [["m", 1, 2]]
    labels = {pp.period: pp.labels for pp in pps}
    rng = np.random.default_rng(0)

    def relabelled(period, matrices):
        return rng.permutation(2)[labels[period]]

    kw = dict(matrices=mats, directed=[False], actors={pp.period: pp.actors for pp in pps},
              labels=labels, assignment=al.assignment, draws=10, seed=0)
    assert move_confidence(mv, relabelled, **kw).tolist() == [1.0]
    fake = mv.assign(to_track=1)  # a move that the positions do not support
    assert move_confidence(fake, relabelled, **kw).tolist() == [0.0]
    # A refit that puts 'm' back in its old group every time never reproduces the move.
    stay = {p: labels["2001"] for p in labels}
    assert move_confidence(mv, lambda p, m: stay[p], **kw).tolist() == [0.0]


def test_confidence_separates_planted_moves_from_fabricated_ones():
    # Source: planted dynamic blockmodel as ground truth.  Planted moves should survive
    # resampling; "moves" fabricated for actors who never moved should not.
    snaps, truth, true_moves = planted_dynamic(density_in=0.3, density_out=0.03, movers=6, seed=8)
    periods = [s[0] for s in snaps]
    actors = [s[1] for s in snaps]
    mats = [s[2] for s in snaps]
    parts = smoothed_partitions(mats, snaps[0][3], actors, 3, fit=standin_positions)
    pps = [
        PeriodPositions.from_partition(p, a, part, block_density(m, part))
        for p, a, m, part in zip(periods, actors, mats, parts)
    ]
    al = align(pps)
    mem = memberships(pps, al)
    found = moves(mem, periods, ignore_tracks=(0,))
    want = set(zip(true_moves["actor"], true_moves["to_period"]))
    real = found[[(a, p) in want for a, p in zip(found["actor"], found["to_period"])]]
    stayers = sorted(set(actors[0]) - set(true_moves["actor"]))[:6]
    rows = []
    for actor in stayers:
        here = mem[(mem["actor"] == actor) & mem["period"].isin(periods[2:4])].sort_values("period")
        k0, k1 = here["track"].tolist()
        rows.append((actor, periods[2], periods[3], k0, 1 + k1 % 3))  # to a track it is not in
    fabricated = pd.DataFrame(rows, columns=["actor", "from_period", "to_period", "from_track", "to_track"])
    fitter = smoothed_refitter(mats, snaps[0][3], actors, periods, parts, 3)
    kw = dict(matrices=dict(zip(periods, mats)), directed=snaps[0][3], actors=dict(zip(periods, actors)),
              labels={p: part.labels for p, part in zip(periods, parts)}, assignment=al.assignment,
              draws=20, seed=0)
    conf_real = move_confidence(real, fitter, **kw)
    conf_fake = move_confidence(fabricated, fitter, **kw)
    print(f"\nconfidence of planted moves {np.round(conf_real, 2)}; of fabricated {np.round(conf_fake, 2)}")
    assert len(real) >= 5
    assert conf_real.mean() >= 0.8
    assert conf_fake.max() <= 0.2
    again = move_confidence(real, fitter, **kw)
    assert np.array_equal(conf_real, again)  # seeded


def test_confidence_input_errors():
    pps, al, mv, mats = _toy_study()
    kw = dict(matrices=mats, directed=[False], actors={pp.period: pp.actors for pp in pps},
              labels={pp.period: pp.labels for pp in pps}, assignment=al.assignment)
    assert move_confidence(mv.iloc[:0], lambda p, m: None, **kw).size == 0
    with pytest.raises(UsageError):
        move_confidence(mv.assign(actor="zz"), lambda p, m: kw["labels"][p], **kw)
    with pytest.raises(UsageError):
        move_confidence(mv, lambda p, m: kw["labels"][p], draws=0, **kw)
