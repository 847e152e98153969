"""Simulated studies for move confidence (tracker.pipeline.calibration): planting, held-out
densities, and the same confidences for any number of workers."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

from tests.helpers.planted_study import planted_study
from tracker.execution import configured
from tracker.pipeline.calibration import _Period, held_out_density, planted
from tracker.snapshot import Relation


def _period(label, actors, labels, assignment):
    n = len(actors)
    return _Period(label, tuple(actors), (Relation("r", False),), (sp.csr_array((n, n)),), np.array(labels), 3, 2,
                   np.array(assignment))


def test_a_move_not_kept_is_undone_until_the_next_kept_move():
    # Source: the definition in planted(), worked by hand: the actor stays in the track it
    # left, in that track's position of each later period.  assignment = position -> track.
    template = [_period("1", ["a", "b"], [0, 1], [1, 2, 0]),
                _period("2", ["a", "b"], [0, 0], [2, 1, 0]),   # a: track 1 -> 2 (a move); b stays in 2
                _period("3", ["a", "b"], [0, 0], [2, 1, 0])]
    moves = pd.DataFrame({"actor": ["a"], "from_period": ["1"], "to_period": ["2"]})
    labels, truth = planted(template, moves, np.array([False]))
    assert [lab.tolist() for lab in labels] == [[0, 1], [1, 0], [1, 0]]
    assert truth[truth["actor"] == "a"]["track"].tolist() == [1, 1, 1]
    labels, truth = planted(template, moves, np.array([True]))
    assert [lab.tolist() for lab in labels] == [[0, 1], [0, 0], [0, 0]]
    assert truth[truth["actor"] == "a"]["track"].tolist() == [1, 2, 2]


def test_held_out_density_uses_the_other_periods_ties():
    # Source: block density t_kl / p_kl (Wasserman & Faust 1994, sec. 10.2) counted by hand
    # on the other period's ties, with this period's positions.
    actors = ("a", "b", "c", "d")
    labels = np.array([0, 0, 1, 1])
    other = sp.csr_array(np.array([[0, 1, 1, 0], [1, 0, 0, 0], [1, 0, 0, 0], [0, 0, 0, 0]], dtype=float))
    dens = held_out_density(labels, actors, 2, [(actors, (other,))], 1)
    # block (0,0): a-b tied, 2 ordered pairs of 2; (0,1): a-c, 1 of 4; (1,1): none of 2.
    assert dens[0].tolist() == [[1.0, 0.25], [0.25, 0.0]]


# The default dynamic model, and a descriptive method with each period fitted alone.
@pytest.mark.parametrize("fit", [{}, {"method": "structural", "smoothing": 0}])
def test_move_confidence_is_the_same_for_any_number_of_workers(tmp_path, fit, pool_for_every_batch):
    # Source: the execution contract (tracker/execution.py): task seeds from SeedSequence,
    # results in task order, so workers never change the answer.
    study, _ = planted_study(tmp_path, n_actors=50, n_positions=3, n_periods=3, density_in=0.25,
                             density_out=0.04, movers=4, seed=7)
    with study:
        study.fit(positions=3, draws=0, **fit)
        with configured(workers=1):
            one = study.align(draws=2, seed=1)["moves"]["confidence"].to_numpy()
        with configured(workers=2):
            two = study.align(draws=2, seed=1, rebuild=True)["moves"]["confidence"].to_numpy()
    assert one.size > 0
    assert np.array_equal(one, two)
