"""Tests of tracker.structures.change: the table of best structures and its sentences.

The fits come from perfect images built from the definitions of the ideal images
(Wasserman & Faust 1994, sec. 10.3), so the expected ideal and roles are known.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from tracker.errors import UsageError
from tracker.structures.change import describe_changes, structures_over_time
from tracker.structures.ideal import closest_ideal


def star(n_pos: int, centre: int) -> np.ndarray:
    """Core-periphery image with a core of one position (definition)."""
    image = np.zeros((n_pos, n_pos), dtype=int)
    image[centre, :] = image[:, centre] = 1
    return image


def best(image):
    return closest_ideal(image)[0]


TRACKS = {p: {0: "Track A", 1: "Track B", 2: "Track C"} for p in ("2013", "2014", "2015", "2016")}


def test_table_columns_roles_and_changes():
    rows = [
        ("2014", "cooperation", best(star(3, 0))),
        ("2014", "aid", best(np.eye(3, dtype=int))),
        ("2015", "cooperation", best(np.eye(3, dtype=int))),
        ("2016", "cooperation", best(np.eye(3, dtype=int))),
        ("2016", "aid", best(star(3, 2))),  # aid absent in 2015: compared with 2014
    ]
    table = structures_over_time(rows, labels=TRACKS)
    assert list(table.columns) == [
        "period", "relation", "ideal", "variant", "mismatches", "fit", "p_value", "roles", "parts", "changed",
    ]
    assert list(zip(table["period"], table["relation"])) == [
        ("2014", "cooperation"), ("2014", "aid"), ("2015", "cooperation"),
        ("2016", "cooperation"), ("2016", "aid"),
    ]
    assert table["ideal"].tolist() == [
        "core-periphery", "cohesive-subgroups", "cohesive-subgroups", "cohesive-subgroups", "core-periphery",
    ]
    # changed: the ideal differs from the previous period of the same relation
    assert table["changed"].tolist() == [False, False, True, False, True]
    assert table["roles"].iloc[0] == "core: Track A; periphery: Track B, Track C"
    assert table["parts"].iloc[4] == {"core": ("Track C",), "periphery": ("Track A", "Track B")}
    assert table["p_value"].isna().all()
    assert (table["fit"] == 1.0).all() and (table["mismatches"] == 0).all()


def test_sentences_name_the_core_by_track():
    image_2015 = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 0]])  # one mismatch against subgroups
    rows = [
        {"period": "2013", "relation": "cooperation", "fit": best(star(3, 0))},
        {"period": "2014", "relation": "cooperation", "fit": best(star(3, 1))},
        {"period": "2015", "relation": "cooperation", "fit": best(image_2015)},
    ]
    table = structures_over_time(rows, labels=TRACKS)
    lines = describe_changes(table)
    assert lines == [
        "In 2013 the cooperation structure was closest to core-periphery (fit 1.00); the core is Track A.",
        "From 2013 to 2014 the cooperation structure stayed core-periphery (fit 1.00 -> 1.00); "
        "the core changed from Track A to Track B.",
        "From 2014 to 2015 the cooperation structure changed from core-periphery to cohesive-subgroups "
        "(fit 1.00 -> 0.89).",
    ]


def test_sentences_for_unchanged_centre_top_and_chance():
    out_star = np.zeros((3, 3), dtype=int)
    out_star[1, :] = 1  # centralized, ties come from position 1 (definition)
    hierarchy = np.zeros((4, 4), dtype=int)
    hierarchy[[1, 2, 3], [0, 1, 2]] = 1  # 1->0, 2->1, 3->2: position 0 at the top
    fit_h = replace(best(hierarchy), p_value=0.4)
    rows = [
        ("2013", "aid", best(out_star)),
        ("2014", "aid", best(out_star)),
        ("2013", "trade", best(hierarchy)),
        ("2014", "trade", fit_h),
    ]
    lines = describe_changes(structures_over_time(rows, labels=TRACKS))
    assert lines == [
        "In 2013 the aid structure was closest to centralized (fit 1.00); "
        "the centre is Track B (ties come from it).",
        "From 2013 to 2014 the aid structure stayed centralized (fit 1.00 -> 1.00).",
        "In 2013 the trade structure was closest to hierarchy (fit 1.00); the top position is Track A.",
        "From 2013 to 2014 the trade structure stayed hierarchy (fit 1.00 -> 1.00).",
    ]
    # the p-value appears in the opening sentence and flags chance-level structures
    rows = [("2014", "trade", fit_h), ("2015", "trade", best(np.eye(4, dtype=int)))]
    lines = describe_changes(structures_over_time(rows))
    assert lines[0] == (
        "In 2014 the trade structure was closest to hierarchy (fit 1.00, p = 0.400); "
        "the top position is position 0; it is no clearer than random ties of the same density (p = 0.40)."
    )


def test_period_order_can_be_given():
    rows = [("2015", "aid", best(np.eye(2, dtype=int))), ("2014", "aid", best(star(2, 0)))]
    table = structures_over_time(rows, periods=["2014", "2015"])
    assert table["period"].tolist() == ["2014", "2015"]
    assert table["changed"].tolist() == [False, True]


def test_usage_errors():
    fit = best(np.eye(2, dtype=int))
    with pytest.raises(UsageError):
        structures_over_time([("2014", "aid", fit), ("2014", "aid", fit)])
    with pytest.raises(UsageError):
        structures_over_time([("2014", "aid", fit)], periods=["2015"])
    with pytest.raises(UsageError):
        structures_over_time([("2014", "aid", "core-periphery")])
    with pytest.raises(UsageError):
        structures_over_time([{"period": "2014", "fit": fit}])


def test_empty_rows_give_an_empty_table():
    table = structures_over_time([])
    assert table.empty and "changed" in table.columns
    assert describe_changes(table) == []
