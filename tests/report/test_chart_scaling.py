"""Helpers that keep the charts fast at tens of thousands of actors give the answers of their plain definitions."""

from __future__ import annotations

import math

import numpy as np

import pandas as pd
from hypothesis import given
from hypothesis import strategies as st

from tests.report.test_charts import _values
from tracker.report import charts


def _who_by_definition(actors, limit=12):
    names = [str(a) for a in actors]
    if len(names) <= limit:
        return ", ".join(names)
    return ", ".join(names[:limit]) + f" and {len(names) - limit} more"


@given(st.lists(st.one_of(st.text(max_size=5), st.integers()), max_size=30), st.integers(1, 15))
def test_who_names_the_first_actors_then_counts_the_rest(actors, limit):
    assert charts._who(pd.Series(actors, dtype=object), limit) == _who_by_definition(actors, limit)


@given(st.lists(st.one_of(st.integers(0, 9), st.none(), st.just(math.nan)), max_size=40))
def test_distinct_tracks_are_the_sorted_distinct_present_tracks(tracks):
    want = sorted({int(t) for t in tracks if t is not None and not (isinstance(t, float) and math.isnan(t))})
    assert charts._distinct_tracks(tracks) == want
    assert charts._distinct_tracks(pd.Series(tracks, dtype="float64")) == want


def test_flow_band_tooltip_names_twelve_actors_and_counts_the_rest():
    periods = ["2001", "2002"]
    members = pd.DataFrame({"period": ["2001"] * 20 + ["2002"] * 20,
                            "actor": [f"a{i:02d}" for i in range(20)] * 2,
                            "track": [1] * 20 + [2] * 20})
    spec = charts.flow_chart(members, periods).to_dict()
    whos = {row["who"] for row in _values(spec) if isinstance(row.get("who"), str)}
    assert whos == {", ".join(f"a{i:02d}" for i in range(12)) + " and 8 more"}


def test_per_actor_charts_draw_fewer_actors_when_there_are_many_periods():
    # 200 actors over 50 periods: at most ACTOR_CELLS cells, so 6000 // 50 = 120 actors
    # (all of them move once, so the busiest are ranked by label: a000 ... a119).
    periods = [str(2000 + i) for i in range(50)]
    n = 200
    tracks = np.ones((50, n), dtype=int)
    tracks[25:, :] = 2
    m = pd.DataFrame({"period": np.repeat(periods, n), "actor": np.tile([f"a{i:03d}" for i in range(n)], 50),
                      "position": 1, "track": tracks.ravel(), "isolate": False, "confidence": 1.0})
    spec = charts.timeline_chart(m, periods).to_dict()
    values = [row for rows in spec.get("datasets", {}).values() for row in rows]
    assert {row["actor"] for row in values} == {f"a{i:03d}" for i in range(charts.ACTOR_CELLS // 50)}
    assert f"{charts.ACTOR_CELLS // 50:,} of {n:,} actors" in spec["title"]
    assert len(charts._limit_actors(m.assign(pidx=0), None)[0]["actor"].unique()) == n  # one period: all 200
