"""Tracks of a model whose positions keep their meaning (fixed_position_tracks).

The life cycle follows Greene, Doyle & Cunningham (2010, ASONAM): a community
unobserved for more than ``d`` steps dies, and a later community with no
members in common is born anew; a track is born in the first period it holds
an actor.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.errors import UsageError
from tracker.longitudinal import PeriodPositions, memberships, moves
from tracker.longitudinal.align import fixed_position_tracks


def _periods(rows, n_positions=3):
    """rows[t] = {actor: position} for period t (absent actors left out)."""
    return [PeriodPositions(str(2000 + t), tuple(row), np.array(list(row.values()), dtype=np.int64), n_positions)
            for t, row in enumerate(rows)]


def test_a_stray_actor_years_before_does_not_date_the_birth():
    # source: Greene et al. 2010 (death after an unobserved gap, birth of a new community
    # without common members); position 2 holds "x" in 2000 only, then "f" founds it in 2003
    rows = [{"a": 0, "b": 1, "x": 2}, {"a": 0, "b": 1, "x": 1}, {"a": 0, "b": 1, "x": 1},
            {"a": 0, "b": 1, "x": 1, "f": 2}, {"a": 0, "b": 2, "x": 1, "f": 2}]
    al = fixed_position_tracks(_periods(rows))
    late = al.assignment["2004"][2]
    assert al.assignment["2000"][2] != late
    assert al.tracks[late].first_period == "2003"
    assert al.tracks[al.assignment["2000"][2]].ended == "2001"
    assert al.tracks[1].first_period == "2000" and al.tracks[1].last_period == "2004"  # position 0 continues
    found = moves(memberships(_periods(rows), al), [str(2000 + t) for t in range(5)])
    # x's move out of the old track is kept at 2001; b's move into the new track at 2004
    assert set(zip(found["actor"], found["to_period"])) == {("x", "2001"), ("b", "2004")}


def test_an_actor_back_across_the_gap_keeps_the_track():
    # source: Greene et al. 2010 match a front to a later community by common members;
    # "x" is in position 2 before and after 2001, when the position is empty
    rows = [{"a": 0, "x": 2}, {"a": 0}, {"a": 0, "x": 2}]
    al = fixed_position_tracks(_periods(rows))
    assert al.assignment["2000"][2] == al.assignment["2002"][2] == 3
    found = moves(memberships(_periods(rows), al), ["2000", "2001", "2002"])
    assert found.empty  # an absence is not a move


def test_max_gap_lets_a_track_survive_an_empty_period():
    # source: Greene et al. 2010, the death parameter d
    rows = [{"a": 0, "x": 2}, {"a": 0, "x": 0}, {"a": 0, "x": 0, "y": 2}]
    assert fixed_position_tracks(_periods(rows), max_gap=0).assignment["2002"][2] != 3
    assert fixed_position_tracks(_periods(rows), max_gap=1).assignment["2002"][2] == 3
    with pytest.raises(UsageError):
        fixed_position_tracks(_periods(rows), max_gap=-1)


@settings(max_examples=40, deadline=None)
@given(st.lists(st.lists(st.integers(-1, 2), min_size=4, max_size=4), min_size=2, max_size=5),
       st.integers(0, 2))
def test_tracks_are_born_where_their_position_first_holds_actors(grid, max_gap):
    # source: brute force of the definitions (common practice): each track's first period is
    # the first period it holds an actor, every occupied position has a track, and a
    # position's track changes only after an empty run longer than max_gap with no member
    # in common across it
    rows = [{f"a{i}": k for i, k in enumerate(row) if k >= 0} for row in grid]
    periods = _periods(rows)
    al = fixed_position_tracks(periods, max_gap=max_gap)
    for tid, info in al.tracks.items():
        held = [p.period for p in periods if (al.assignment[p.period][p.labels] == tid).any()]
        assert held and held[0] == info.first_period and held[-1] == info.last_period
    for k in range(3):
        runs = [(t, {a for a, v in row.items() if v == k}) for t, row in enumerate(rows)]
        runs = [(t, m) for t, m in runs if m]
        for (s, before), (t, after) in itertools.pairwise(runs):
            same = al.assignment[periods[s].period][k] == al.assignment[periods[t].period][k]
            assert same == (t - s - 1 <= max_gap or bool(before & after))
