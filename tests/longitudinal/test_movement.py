"""Tests of tracker.longitudinal.movement against brute force and pandas.crosstab."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.errors import UsageError
from tracker.longitudinal import mobility, moves, stayers, trajectories, transitions

PERIODS = ["2001", "2002", "2003", "2004", "2005"]


@st.composite
def memberships_tables(draw):
    """Random memberships: 1-8 actors, each present in some periods, tracks 0-3."""
    rows = []
    for i in range(draw(st.integers(1, 8))):
        for p in PERIODS:
            if draw(st.booleans()):
                rows.append((p, f"a{i}", draw(st.integers(0, 3))))
    rows = rows or [("2001", "a0", 1)]
    return pd.DataFrame(rows, columns=["period", "actor", "track"])


def _pairs_by_loop(mem):
    """Consecutive presences of each actor, by plain loops (definition)."""
    where = {(r.actor, r.period): r.track for r in mem.itertuples()}
    out = []
    for actor in sorted(set(mem["actor"])):
        seen = [(p, where[(actor, p)]) for p in PERIODS if (actor, p) in where]
        for (p0, k0), (p1, k1) in zip(seen[:-1], seen[1:]):
            out.append((actor, p0, p1, k0, k1))
    return out


@settings(max_examples=40, deadline=None)
@given(memberships_tables())
def test_moves_match_brute_force(mem):
    # Source: definition (change of track between consecutive presences), by loops.
    want = sorted((a, p0, p1, k0, k1) for a, p0, p1, k0, k1 in _pairs_by_loop(mem) if k0 != k1)
    got = moves(mem, PERIODS)
    assert sorted(
        zip(got["actor"], got["from_period"], got["to_period"], got["from_track"], got["to_track"])
    ) == want
    gaps = {(a, p1): PERIODS.index(p1) - PERIODS.index(p0) - 1 for a, p0, p1, _, _ in want}
    assert all(gaps[(a, p)] == g for a, p, g in zip(got["actor"], got["to_period"], got["gap"]))


def test_a_gap_is_bridged_to_the_last_period_present():
    # Source: hand-built case; the documented gap rule.
    mem = pd.DataFrame(
        {"period": ["2001", "2004", "2001", "2002"], "actor": ["a", "a", "b", "b"], "track": [1, 2, 3, 3]}
    )
    got = moves(mem, PERIODS)
    assert got[["actor", "from_period", "to_period", "from_track", "to_track", "gap"]].values.tolist() == [
        ["a", "2001", "2004", 1, 2, 2]
    ]


@settings(max_examples=15, deadline=None)
@given(memberships_tables())
def test_transitions_match_crosstab_and_rows_sum_to_one(mem):
    # Source: pandas.crosstab of the consecutive-presence pairs (built by loops) as the
    # reference for the counts; row shares of a transition matrix sum to 1 (definition).
    pairs = pd.DataFrame(_pairs_by_loop(mem), columns=["actor", "p0", "p1", "k0", "k1"])
    got = transitions(mem, PERIODS)
    per = got[got["from_period"] != "all"]
    pooled = got[got["from_period"] == "all"]
    if pairs.empty:
        assert got.empty
        return
    ref = pd.crosstab([pairs["p0"], pairs["p1"], pairs["k0"]], pairs["k1"])
    for row in per.itertuples():
        assert row.count == ref.loc[(row.from_period, row.to_period, row.from_track), row.to_track]
    assert per["count"].sum() == len(pairs)
    ref_pooled = pd.crosstab(pairs["k0"], pairs["k1"])
    for row in pooled.itertuples():
        assert row.count == ref_pooled.loc[row.from_track, row.to_track]
    assert pooled["count"].sum() == len(pairs)
    sums = per.groupby(["from_period", "to_period", "from_track"])["share"].sum()
    assert np.allclose(sums, 1.0)
    assert np.allclose(pooled.groupby("from_track")["share"].sum(), 1.0)
    moved = got[(got["from_period"] != "all") & (got["from_track"] != got["to_track"])]["count"].sum()
    assert moved == len(moves(mem, PERIODS))


@settings(max_examples=30, deadline=None)
@given(memberships_tables())
def test_mobility_matches_brute_force(mem):
    # Source: definitions of present-in-both, movers, entries and exits, by loops.
    where = {(r.actor, r.period): r.track for r in mem.itertuples()}
    actors = set(mem["actor"])
    got = mobility(mem, PERIODS)
    assert got["from_period"].tolist() == PERIODS[:-1]
    for row, (p0, p1) in zip(got.itertuples(), zip(PERIODS[:-1], PERIODS[1:])):
        both = [a for a in actors if (a, p0) in where and (a, p1) in where]
        movers = [a for a in both if where[(a, p0)] != where[(a, p1)]]
        assert row.present_both == len(both)
        assert row.movers == len(movers)
        assert row.entries == sum((a, p1) in where and (a, p0) not in where for a in actors)
        assert row.exits == sum((a, p0) in where and (a, p1) not in where for a in actors)
        if both:
            assert row.mobility_rate == pytest.approx(len(movers) / len(both))
        else:
            assert np.isnan(row.mobility_rate)
    assert got["movers"].sum() + got["gap_moves"].sum() == len(moves(mem, PERIODS))


@settings(max_examples=25, deadline=None)
@given(memberships_tables())
def test_trajectories_and_stayers_match_brute_force(mem):
    # Source: definitions, by loops over actors.
    where = {(r.actor, r.period): r.track for r in mem.itertuples()}
    wide = trajectories(mem, PERIODS)
    still = stayers(mem, PERIODS)
    for actor in sorted(set(mem["actor"])):
        seen = [p for p in PERIODS if (actor, p) in where]
        for p in PERIODS:
            value = wide.loc[actor, p]
            assert (pd.isna(value) and p not in seen) or value == where.get((actor, p))
        assert wide.loc[actor, "entry"] == seen[0] and wide.loc[actor, "exit"] == seen[-1]
        tracks = {where[(actor, p)] for p in seen}
        assert (actor in set(still["actor"])) == (len(seen) >= 2 and len(tracks) == 1)


def test_ignoring_the_isolates_track_treats_silent_years_as_absence():
    # Source: hand-built case; the documented ignore_tracks rule.
    mem = pd.DataFrame({"period": PERIODS[:3], "actor": ["a"] * 3, "track": [2, 0, 2]})
    assert len(moves(mem, PERIODS)) == 2
    assert len(moves(mem, PERIODS, ignore_tracks=(0,))) == 0
    assert stayers(mem, PERIODS, ignore_tracks=(0,))["actor"].tolist() == ["a"]


def test_confidence_travels_with_moves():
    mem = pd.DataFrame(
        {"period": ["2001", "2002"], "actor": ["a", "a"], "track": [1, 2], "confidence": [0.9, 0.6]}
    )
    got = moves(mem, PERIODS)
    assert got[["from_confidence", "to_confidence"]].values.tolist() == [[0.9, 0.6]]


def test_usage_errors():
    mem = pd.DataFrame({"period": ["1999"], "actor": ["a"], "track": [1]})
    with pytest.raises(UsageError):
        moves(mem, PERIODS)
    twice = pd.DataFrame({"period": ["2001", "2001"], "actor": ["a", "a"], "track": [1, 2]})
    with pytest.raises(UsageError):
        transitions(twice, PERIODS)
    with pytest.raises(UsageError):
        mobility(pd.DataFrame({"period": ["2001"], "actor": ["a"]}), PERIODS)
