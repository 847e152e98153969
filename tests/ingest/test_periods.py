"""Period bucketing checked against pandas' own period arithmetic."""

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.errors import UsageError
from tracker.ingest.periods import column_sort_keys, parse_dates, parse_scheme

dates = st.dates(min_value=pd.Timestamp("1800-01-01").date(), max_value=pd.Timestamp("2200-12-31").date())


@settings(max_examples=60, deadline=None)
@given(st.lists(dates, min_size=1, max_size=40))
def test_year_quarter_month_match_pandas_periods(values):
    # Reference: pandas.Period with freq Y / Q / M (labels and ordinals).
    series = pd.Series(pd.to_datetime(values))
    year_only = np.zeros(len(series), dtype=bool)
    for name, freq in (("year", "Y"), ("quarter", "Q"), ("month", "M")):
        got = parse_scheme(name).assign(series, year_only)
        expected = [pd.Period(v, freq=freq) for v in values]
        assert got["label"].tolist() == [str(p) for p in expected]
        assert got["start"].tolist() == [p.start_time.strftime("%Y-%m-%d") for p in expected]
        assert got["end"].tolist() == [p.end_time.strftime("%Y-%m-%d") for p in expected]
        # sort keys order periods as pandas orders them
        order = np.argsort(got["sort_key"].to_numpy(), kind="stable")
        assert [expected[i] for i in order] == sorted(expected)


@settings(max_examples=60, deadline=None)
@given(st.lists(dates, min_size=1, max_size=30), st.integers(2, 7), st.integers(-3, 3000))
def test_multi_year_windows_match_floor_arithmetic(values, n, origin):
    # Reference: a window of N years starting at origin + k N holds year y when
    # k = floor((y - origin) / N) (common practice for fixed windows).
    series = pd.Series(pd.to_datetime(values))
    got = parse_scheme(f"{n}y", origin).assign(series, np.zeros(len(values), dtype=bool))
    for value, label, key in zip(values, got["label"], got["sort_key"]):
        first = origin + ((value.year - origin) // n) * n
        assert label == f"{first}-{first + n - 1}"
        assert key == first
        assert first <= value.year <= first + n - 1


def test_one_year_window_is_year_and_unknown_scheme_is_refused():
    assert parse_scheme("1y").kind == "year"
    with pytest.raises(UsageError, match="unknown period"):
        parse_scheme("fortnight")


def test_parse_dates_iso_years_and_format():
    values = pd.Series(["2019-03-31", "2020", "2021-07-04T10:00:00", "not a date", "31/12/2019"])
    parsed, year_only, bad = parse_dates(values)
    assert year_only.tolist() == [False, True, False, False, False]
    assert bad.tolist() == [False, False, False, True, True]
    assert parsed[1] == pd.Timestamp("2020-01-01")
    parsed, _, bad = parse_dates(pd.Series(["31/12/2019", "2019-12-31"]), "%d/%m/%Y")
    assert parsed[0] == pd.Timestamp("2019-12-31") and bad.tolist() == [False, True]


def test_dates_out_of_range_are_bad():
    # years outside 1000-2999 are taken as typing errors (3019 for 2019)
    _, _, bad = parse_dates(pd.Series(["3019-12-31", "0201-01-01", "2019-01-01", "99999-01-01"]))
    assert bad.tolist() == [True, True, False, True]


def test_bare_years_cannot_become_quarters():
    with pytest.raises(UsageError, match="bare years"):
        parse_scheme("quarter").assign(pd.Series(pd.to_datetime(["2019-01-01"])), np.array([True]))


def test_column_labels_sort_by_their_number_then_appearance():
    keys = column_sort_keys(["wave 10", "wave 2", "baseline", "wave 1", "follow-up"], {})
    ordered = sorted(keys, key=keys.get)
    assert ordered == ["wave 1", "wave 2", "wave 10", "baseline", "follow-up"]
