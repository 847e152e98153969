"""Cutting dates into periods.

A study uses one *period scheme*:

``year``      one period per calendar year, labelled ``2019``
``quarter``   calendar quarters, labelled ``2019Q3`` (pandas' ``Period`` labels)
``month``     calendar months, labelled ``2019-07``
``Ny``        windows of N calendar years, labelled ``2018-2019``; windows start
              at years ``origin + k*N`` (origin 0 by default, so 2-year windows
              start at even years), so a later import cuts the same windows
``column``    the period is read from a column of the file, as given

Every period has a ``sort_key`` (an integer that orders periods in time) and,
for dated schemes, inclusive ISO ``start`` and ``end`` dates.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from tracker.errors import UsageError

__all__ = ["PeriodScheme", "parse_scheme", "parse_dates", "column_sort_keys"]

#: Dates outside these years are almost surely typing errors (3019 for 2019).
MIN_YEAR, MAX_YEAR = 1000, 2999

_WINDOW = re.compile(r"^(\d+)y$")


@dataclass(frozen=True)
class PeriodScheme:
    """How a study cuts time into periods."""

    kind: str  # "year", "quarter", "month", "window" or "column"
    years: int = 1  # window length for kind == "window"
    origin: int = 0  # windows start at years origin + k * years

    @property
    def name(self) -> str:
        if self.kind == "window":
            return f"{self.years}y" + (f"@{self.origin}" if self.origin else "")
        return self.kind

    @property
    def dated(self) -> bool:
        return self.kind != "column"

    def assign(self, dates: pd.Series, year_only: np.ndarray) -> pd.DataFrame:
        """Periods of parsed dates.

        Parameters
        ----------
        dates : Series of datetime64
            Parsed event dates (no missing values).
        year_only : bool array
            True where the date was given as a bare year (so it has no month).

        Returns
        -------
        DataFrame with columns ``label``, ``sort_key``, ``start``, ``end`` (ISO).
        """
        dates = pd.DatetimeIndex(dates)
        year = dates.year.to_numpy()
        if self.kind == "year":
            sort_key = year
            label = year.astype(str)
            start_year, end_year = year, year
            start_md, end_md = "-01-01", "-12-31"
            starts = pd.Series(start_year.astype(str)) + start_md
            ends = pd.Series(end_year.astype(str)) + end_md
        elif self.kind == "window":
            first = self.origin + np.floor_divide(year - self.origin, self.years) * self.years
            last = first + self.years - 1
            sort_key = first
            label = pd.Series(first.astype(str)) + "-" + pd.Series(last.astype(str))
            starts = pd.Series(first.astype(str)) + "-01-01"
            ends = pd.Series(last.astype(str)) + "-12-31"
        elif self.kind in ("quarter", "month"):
            if np.any(year_only):
                raise UsageError(
                    f"some dates are bare years, which cannot be cut into {self.kind}s; "
                    "use --period year (or Ny) for this file"
                )
            freq = "Q" if self.kind == "quarter" else "M"
            periods = dates.to_period(freq)
            label = periods.astype(str)
            sort_key = periods.asi8  # pandas' ordinal: consecutive integers in time
            starts = pd.Series(periods.start_time.strftime("%Y-%m-%d"))
            ends = pd.Series(periods.end_time.strftime("%Y-%m-%d"))
        else:  # pragma: no cover - guarded by parse_scheme
            raise ValueError(self.kind)
        return pd.DataFrame(
            {
                "label": np.asarray(label, dtype=object),
                "sort_key": np.asarray(sort_key, dtype=np.int64),
                "start": np.asarray(starts, dtype=object),
                "end": np.asarray(ends, dtype=object),
            }
        )


def parse_scheme(text: str, origin: int = 0) -> PeriodScheme:
    """Read ``--period``: ``year``, ``quarter``, ``month`` or ``Ny`` (N-year windows)."""
    value = str(text).strip().lower()
    if value in ("year", "quarter", "month", "column"):
        return PeriodScheme(value)
    match = _WINDOW.match(value)
    if match and int(match.group(1)) >= 1:
        n = int(match.group(1))
        return PeriodScheme("year") if n == 1 else PeriodScheme("window", n, origin)
    raise UsageError(f"unknown period {text!r}; use year, quarter, month or Ny for N-year windows (e.g. 2y)")


def parse_scheme_name(name: str) -> PeriodScheme:
    """The inverse of :attr:`PeriodScheme.name` (as stored in a study's settings)."""
    base, _, origin = name.partition("@")
    return parse_scheme(base, int(origin) if origin else 0)


def parse_dates(values: pd.Series, date_format=None) -> tuple[pd.Series, np.ndarray, np.ndarray]:
    """Parse event dates: ISO dates (and date-times), bare years, or explicit formats.

    ``date_format`` is None (ISO dates and bare years), one strftime format, or
    several tried in turn: each value takes the first format that reads it.
    The name ``iso`` among them stands for the default (ISO or bare year).

    Returns
    -------
    dates : Series of datetime64 (NaT where unreadable)
    year_only : bool array, True where the value was a bare year
    bad : bool array, True where the value could not be read
    """
    text = values.astype(str).str.strip()
    bare = text.str.fullmatch(r"\d{4}").to_numpy(dtype=bool)
    formats = [date_format] if isinstance(date_format, str) else list(date_format or [None])
    dates = pd.Series(pd.NaT, index=values.index, dtype="datetime64[s]")
    year_only = np.zeros(len(text), dtype=bool)
    left = np.ones(len(text), dtype=bool)
    for fmt in formats:
        if not left.any():
            break
        part = text[left]
        if fmt is None or str(fmt).lower() == "iso":
            parsed, part_year = _default_dates(part, bare[left])
        else:
            try:
                parsed = _naive(pd.to_datetime(part, format=fmt, errors="coerce")).astype("datetime64[s]")
            except (OverflowError, ValueError, TypeError) as exc:
                raise UsageError(f"--date-format {fmt!r} cannot be used ({exc}); give a strftime format such as %d/%m/%Y") from None
            has_day = any(code in fmt for code in ("%m", "%d", "%b", "%B", "%j"))
            part_year = np.zeros(len(part), dtype=bool) if has_day else bare[left]
        got = parsed.notna().to_numpy()
        at = np.flatnonzero(left)[got]
        dates.iloc[at] = parsed[got].to_numpy()
        year_only[at] = part_year[got]
        left[at] = False
    years = dates.dt.year
    bad = (dates.isna() | (years < MIN_YEAR) | (years > MAX_YEAR)).to_numpy()
    return dates, year_only, bad


def _default_dates(text: pd.Series, year_only: np.ndarray) -> tuple[pd.Series, np.ndarray]:
    """ISO dates and date-times, and bare years (``year_only``)."""
    dates = pd.Series(pd.NaT, index=text.index, dtype="datetime64[s]")
    if year_only.any():
        dates[year_only] = pd.to_datetime(text[year_only], format="%Y", errors="coerce").astype("datetime64[s]")
    rest = ~year_only
    if rest.any():
        dates[rest] = _iso(text[rest])
    return dates, year_only


def _iso(text: pd.Series) -> pd.Series:
    """ISO dates and date-times; NaT where unreadable (including out-of-range years).

    A UTC offset (``2019-12-31T23:00:00+05:00``) is dropped and the local date
    kept: the date written in the file is the date the event happened there.
    """
    try:
        parsed = _naive(pd.to_datetime(text, format="ISO8601", errors="coerce"))
    except (OverflowError, ValueError, TypeError):
        # Offsets that differ from row to row spoil the vectorised call: drop
        # them (the local time stays), and go row by row if that is not enough.
        try:
            parsed = pd.to_datetime(text.str.replace(_OFFSET, r"\1", regex=True), format="ISO8601", errors="coerce")
        except (OverflowError, ValueError, TypeError):
            return pd.Series([_iso_one(v) for v in text], index=text.index, dtype="datetime64[s]")
    dates = parsed.astype("datetime64[s]")
    if np.datetime_data(parsed.dtype)[0] == "ns":
        # pandas gives a column one resolution: one value with nanoseconds
        # makes every date outside 1677-2262 NaT.  Read those again one by one
        # (only the ones shaped like ISO dates, so a file of other dates fails fast).
        failed = dates.isna().to_numpy() & text.str.match(r"\d{4}-\d\d").to_numpy(dtype=bool)
        if failed.any():
            dates[failed] = np.array([_iso_one(v) for v in text[failed]], dtype="datetime64[s]")
    return dates


def _iso_one(value: str):
    try:
        stamp = pd.to_datetime(_LONG_FRACTION.sub(r"\1", value), format="ISO8601")
        if pd.isna(stamp):
            return np.datetime64("NaT", "s")
        if stamp.tzinfo is not None:
            stamp = stamp.tz_localize(None)
        return stamp.to_datetime64().astype("datetime64[s]")
    except (OverflowError, ValueError, TypeError):
        return np.datetime64("NaT", "s")


#: A UTC offset after a time of day (``...T10:00:00+05:00``, ``...10:00Z``).
_OFFSET = r"(\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?)\s*(?:[Zz]|[+-]\d{2}(?::?\d{2})?)$"

#: Fractions of a second beyond microseconds force nanosecond timestamps,
#: which end in 2262; they mean nothing for the date of an event.
_LONG_FRACTION = re.compile(r"([.,]\d{6})\d+")


def _naive(dates: pd.Series) -> pd.Series:
    """Drop a time zone, keeping the local wall time."""
    if isinstance(dates.dtype, pd.DatetimeTZDtype):
        return dates.dt.tz_localize(None)
    return dates


def column_sort_keys(labels, existing: dict[str, int]) -> dict[str, int]:
    """Sort keys for period labels read from a column.

    A label sorts by the first whole number in it (``1``, ``2019``, ``wave 3``,
    ``2019-2020``), so numbered waves come out in time order; labels without
    any number sort after every other period, in the order they first appear.
    ``existing`` maps labels already in the study to their keys.
    """
    keys: dict[str, int] = {}
    next_key = max([*existing.values(), 10**9], default=10**9) + 1
    for label in pd.unique(pd.Series(labels, dtype=object)):
        if label in existing or label in keys:
            continue
        match = _NUMBER.search(str(label))
        if match and len(match.group(0)) <= 9:
            keys[label] = int(match.group(0))
        else:
            keys[label] = next_key
            next_key += 1
    return keys


_NUMBER = re.compile(r"\d+")
