"""Evolutionary fitting (tracker.longitudinal.smoothing): each method's own objective plus a
change penalty; penalty 0 is exactly the unsmoothed method; smoothing removes false moves."""

from __future__ import annotations

import numpy as np
import pytest

from tests.helpers.planted import block_density, planted_dynamic
from tracker.blockmodel.evolution import penalised, per_actor_scale
from tracker.blockmodel.fitting import FitSettings, fit_snapshot
from tracker.blockmodel.positions import find_positions
from tracker.errors import UsageError
from tracker.longitudinal import (
    DEFAULT_PENALTY, ISOLATES_TRACK, PeriodPositions, align, evolutionary_partitions, memberships, moves, smoothed_fits,
    smoothing_penalty,
)
from tracker.snapshot import Relation, Snapshot

CASES = [("structural", {}), ("structural", {"measure": "correlation"}), ("concor", {}),
         ("optimize", {"restarts": 3})]


@pytest.mark.parametrize("method,options", CASES)
def test_penalty_zero_gives_exactly_the_unsmoothed_fit(method, options):
    # Source: the definition (Chakrabarti, Kumar & Tomkins 2006): with no history cost the
    # evolutionary objective is the snapshot objective, so each period's partition must be
    # the method's own per-period partition, label for label.
    snaps, _, _ = planted_dynamic(60, 3, 4, 0.3, 0.05, 6, seed=2)
    mats, directed = [s[2] for s in snaps], snaps[0][3]
    parts = evolutionary_partitions(mats, directed, [s[1] for s in snaps], 3, method=method,
                                    change_penalty=0.0, seed=5, **options)
    for m, part in zip(mats, parts):
        alone = find_positions(m, directed, 3, method=method, seed=5, **options)
        assert np.array_equal(part.labels, alone.labels)
        assert part.diagnostics["smoothing"]["penalty"] == 0.0


def test_penalty_zero_through_the_fit_adapter_equals_per_period_fits():
    # Source: as above, through smoothed_fits and fit_snapshot (the stored path).
    snaps, _, _ = planted_dynamic(50, 3, 3, 0.3, 0.05, 5, seed=3)
    rel = (Relation("r0", False),)
    snapshots = [Snapshot(p, a, rel, tuple(m)) for p, a, m, _ in snaps]
    settings = FitSettings(method="concor", positions=3, draws=0, smoothing=0.0)
    with_adapter = smoothed_fits(snapshots, settings)
    for snap, fit in zip(snapshots, with_adapter):
        assert np.array_equal(fit.partition.labels, fit_snapshot(snap, settings).partition.labels)


def test_methods_without_an_objective_refuse_a_penalty_and_auto_records_none():
    # Source: the product rule "each setting is honoured or refused with a usage error".
    for method in ("regular", "sbm"):
        with pytest.raises(UsageError, match="cannot be honoured"):
            smoothing_penalty(method, 1.0)
        assert smoothing_penalty(method, "auto") == 0.0
        assert smoothing_penalty(method, 0.0) == 0.0
    assert smoothing_penalty("structural", "auto") == DEFAULT_PENALTY == 0.5
    with pytest.raises(UsageError):
        smoothing_penalty("structural", -1.0)


def test_per_actor_scale_is_wards_within_sum_of_squares_per_actor():
    # Source: brute force of Ward's (1963) criterion, sum over positions of squared
    # distances to the position's centroid, divided by the number of actors.
    rng = np.random.default_rng(0)
    x = rng.normal(size=(12, 4))
    labels = rng.integers(0, 3, 12)
    d2 = ((x[:, None, :] - x[None, :, :]) ** 2).sum(axis=2)
    want = sum(((x[labels == k] - x[labels == k].mean(axis=0)) ** 2).sum() for k in np.unique(labels)) / 12
    assert per_actor_scale(d2, labels) == pytest.approx(want)


def test_penalised_adds_the_cost_only_to_pairs_apart_before():
    # Source: the membership form of the history cost (Chi et al. 2007), written out.
    d = np.ones((4, 4)) - np.eye(4)
    out = penalised(d, np.array([0, 0, 1, -1]), 2.0)
    assert out.tolist() == [[0, 1, 3, 1], [1, 0, 3, 1], [3, 3, 0, 1], [1, 1, 1, 0]]


def _false_moves(snaps, parts, true_moves):
    pps = [PeriodPositions.from_partition(p, a, part, block_density(m, part))
           for (p, a, m, _), part in zip(snaps, parts)]
    found = moves(memberships(pps, align(pps)), [s[0] for s in snaps], ignore_tracks=(ISOLATES_TRACK,))
    want = set(zip(true_moves["actor"], true_moves["to_period"]))
    return sum((a, p) not in want for a, p in zip(found["actor"], found["to_period"]))


@pytest.mark.parametrize("method", ["structural", "concor"])
@pytest.mark.parametrize("seed", [0, 1])
def test_smoothing_removes_most_false_moves_on_noisy_planted_data(method, seed):
    # Source: planted dynamic blockmodel (tests/helpers/planted.py; 90 actors, 3 positions,
    # 9 planted moves) as ground truth.  Measured: unsmoothed fits leave 130-180 false moves
    # per study, c = 1 0-55.  Bound: at most half as many.
    snaps, _, true_moves = planted_dynamic(90, 3, 6, 0.4, 0.04, 9, seed=seed)
    mats, acts, directed = [s[2] for s in snaps], [s[1] for s in snaps], snaps[0][3]
    alone = evolutionary_partitions(mats, directed, acts, 3, method=method, change_penalty=0.0)
    smooth = evolutionary_partitions(mats, directed, acts, 3, method=method, change_penalty=1.0)
    assert _false_moves(snaps, smooth, true_moves) <= 0.5 * _false_moves(snaps, alone, true_moves)
