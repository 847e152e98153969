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
        "q_value", "fit_q_value", "significant", "structure",
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


def clear(fit, p=0.005):
    return replace(fit, p_value=p)


def test_summary_lists_clear_periods_changes_and_the_rest():
    image_2015 = np.array([[1, 0, 0], [0, 1, 0], [0, 0, 0]])  # one mismatch against subgroups
    rows = [
        {"period": "2013", "relation": "cooperation", "fit": clear(best(star(3, 0)))},
        {"period": "2014", "relation": "cooperation", "fit": clear(best(star(3, 0)))},
        {"period": "2015", "relation": "cooperation", "fit": clear(best(image_2015), 0.4)},
        {"period": "2016", "relation": "cooperation", "fit": clear(best(np.eye(3, dtype=int)))},
    ]
    table = structures_over_time(rows, labels=TRACKS)
    assert table["significant"].tolist() == [True, True, False, True]
    assert table["structure"].tolist() == ["core-periphery", "core-periphery", "no clear structure",
                                           "cohesive-subgroups"]
    # a change only between clear structures: 2014 -> 2016, not through the unclear 2015
    assert table["changed"].tolist() == [False, False, False, True]
    assert describe_changes(table) == [
        "The cooperation structure is clear in 3 of 4 periods: core-periphery in 2013-2014 (core: Track A); "
        "cohesive-subgroups in 2016.",
        "From 2014 to 2016 the cooperation structure changed from core-periphery to cohesive-subgroups.",
        "In 2015 the cooperation ties show no clear structure (the positions or the closest ideal are no "
        "clearer than random ties at the 0.05 level).",
    ]


def test_fit_test_q_values_veto_a_clear_ideal():
    rows = [("2013", "aid", clear(best(star(3, 0)))), ("2014", "aid", clear(best(np.eye(3, dtype=int))))]
    table = structures_over_time(rows, fit_q_values={"2013": 0.01, "2014": 0.3})
    assert table["significant"].tolist() == [True, False]
    assert table["changed"].tolist() == [False, False]  # a change needs both periods clear
    assert table["fit_q_value"].tolist() == [0.01, 0.3]
    lines = describe_changes(table)
    assert lines[0] == ("Fit test: the positions are clearer than in random networks with as many ties in "
                        "1 of 2 periods (q <= 0.05); not in 2014.")
    assert len(lines) == 3 and "changed" not in " ".join(lines)


def test_q_values_are_benjamini_hochberg_over_the_table():
    from scipy.stats import false_discovery_control

    p = [0.01, 0.04, 0.03]
    rows = [(str(2010 + i), "aid", clear(best(np.eye(2, dtype=int)), v)) for i, v in enumerate(p)]
    table = structures_over_time(rows)
    assert np.allclose(table["q_value"], false_discovery_control(p, method="bh"))  # reference: scipy


def test_untested_structures_are_named_as_untested():
    out_star = np.zeros((3, 3), dtype=int)
    out_star[1, :] = 1  # centralized, ties come from position 1 (definition)
    rows = [("2013", "aid", best(out_star)), ("2014", "aid", best(out_star))]
    table = structures_over_time(rows, labels=TRACKS)
    assert table["significant"].tolist() == [None, None]
    assert describe_changes(table) == [
        "Untested (no draws), the aid structure is closest to: centralized in 2013-2014 "
        "(centre: Track B (ties come from it)).",
    ]


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
