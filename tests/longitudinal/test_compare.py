"""compare_fits against definitions: the adjusted Rand index by pair counts, placements by brute-force matching."""

from __future__ import annotations

from itertools import permutations

import numpy as np
import pandas as pd
from hypothesis import given, settings, strategies as st
from scipy.special import comb

from tracker.longitudinal.carry import carry_names
from tracker.longitudinal.compare import compare_fits


def _ari(a, b) -> float:
    """Hubert & Arabie (1985), eq. 5, from the contingency table."""
    table = pd.crosstab(np.asarray(a), np.asarray(b)).to_numpy()
    index = comb(table, 2).sum()
    rows, cols = comb(table.sum(1), 2).sum(), comb(table.sum(0), 2).sum()
    expected = rows * cols / comb(table.sum(), 2)
    if (rows + cols) / 2 == expected:
        return 1.0
    return (index - expected) / ((rows + cols) / 2 - expected)


def _fewest_moved(a, b) -> int:
    """Brute force: actors not kept in place by the best one-to-one relabelling of a's positions."""
    ua, ub = sorted(set(a)), sorted(set(b))
    best = 0
    pad = ub + [None] * max(0, len(ua) - len(ub))
    for perm in permutations(pad, len(ua)):
        m = dict(zip(ua, perm))
        best = max(best, sum(m[x] == y for x, y in zip(a, b)))
    return len(a) - best


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 4), st.integers(1, 4)), min_size=3, max_size=14))
def test_agreement_matches_definitions(pairs):
    a, b = [p[0] for p in pairs], [p[1] for p in pairs]
    actors = [f"x{i}" for i in range(len(pairs))]
    ma = pd.DataFrame({"period": "1", "actor": actors, "position": a})
    mb = pd.DataFrame({"period": "1", "actor": actors, "position": b})
    out = compare_fits(ma, mb)
    row = out["periods"].iloc[0]
    assert row["ari"] == np.float64(row["ari"]) and abs(row["ari"] - _ari(a, b)) < 1e-9
    assert row["placed_differently"] == _fewest_moved(a, b) == len(out["actors"])


def test_moves_found_by_one_fit_only():
    key = ["actor", "from_period", "to_period"]
    ma = pd.DataFrame({"period": ["1", "2"], "actor": ["a", "a"], "position": [1, 2]})
    moves_a = pd.DataFrame([["a", "1", "2"], ["b", "1", "2"]], columns=key)
    moves_b = pd.DataFrame([["b", "1", "2"], ["c", "2", "3"]], columns=key)
    moves = compare_fits(ma, ma, moves_a, moves_b)["moves"]
    assert moves[key + ["found_in"]].values.tolist() == [["a", "1", "2", "A only"], ["c", "2", "3", "B only"]]


def test_names_follow_the_actors_across_recut_periods():
    old_periods = pd.DataFrame({"label": ["2016", "2017"], "start": ["2016-01-01", "2017-01-01"],
                                "end": ["2016-12-31", "2017-12-31"]})
    new_periods = pd.DataFrame({"label": ["2016-2017"], "start": ["2016-01-01"], "end": ["2017-12-31"]})
    old = pd.DataFrame({"period": ["2016"] * 4 + ["2017"] * 4, "actor": list("abcd") * 2,
                        "track": [1, 1, 2, 2, 1, 1, 2, 2]})
    new = pd.DataFrame({"period": ["2016-2017"] * 4, "actor": list("abcd"), "track": [5, 5, 7, 7]})
    carried, lost = carry_names(old, new, {1: "core", 2: "edge"}, old_periods, new_periods)
    assert carried == {5: "core", 7: "edge"} and lost == []
    carried, lost = carry_names(old, new.iloc[:2], {1: "core", 2: "edge"}, old_periods, new_periods)
    assert carried == {5: "core"} and lost == ["edge"]
