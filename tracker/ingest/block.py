"""Validating event rows column by column on Arrow arrays.

:func:`validate_block` checks one table of mapped text columns (as read by
:mod:`tracker.ingest.columns`) and returns an :class:`EventBlock`: integer
codes into small tables of distinct values (actors, relations, periods,
dates) plus the weights.  Every check runs once per *distinct* value of a
column (a file of a million events has a few thousand distinct labels and
dates) and reaches the rows through the codes, so the work grows with the
rows only through numpy indexing.

Names are normalised: Unicode NFC (so a composed and a decomposed "é" are
one letter; Unicode Standard Annex #15), surrounding whitespace trimmed and
inner runs of whitespace collapsed to one space.

In strict mode the first bad row raises :class:`InputError` naming the file,
row, column, value and fix, as :func:`tracker.ingest.events.validate_events`
does, with the same checks in the same order.  With ``collect=True`` every
bad row is recorded (first reason per row) and left out of the block.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from tracker.errors import InputError, UsageError
from tracker.ingest.events import MAX_LABEL, MAX_WEIGHT, EventMapping
from tracker.ingest.periods import PeriodScheme, parse_dates

__all__ = ["EventBlock", "Rejected", "validate_block", "normalise_names"]

_SPACE = r"\s+"


@dataclass
class Rejected:
    """One bad row left out of an import (``--errors report``)."""

    row: int
    column: str
    value: str
    problem: str
    fix: str


@dataclass
class EventBlock:
    """Validated events as codes into tables of distinct values.

    ``actors[source[i]]`` is the source label of event i (normalised),
    ``relations[relation[i]]`` its relation, ``periods.iloc[period[i]]`` its
    period (``label, sort_key, start, end``), ``dates[date[i]]`` its ISO date
    or year (None when periods come from a column).  ``n_events`` is None
    when each row is one event, else the count each row stands for.
    """

    rows: np.ndarray
    actors: np.ndarray
    source: np.ndarray
    target: np.ndarray
    relations: np.ndarray
    relation: np.ndarray
    periods: pd.DataFrame
    period: np.ndarray
    dates: np.ndarray
    date: np.ndarray
    weight: np.ndarray
    n_events: np.ndarray | None = None
    self_ties: int = 0
    rejected: list[Rejected] = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.rows)

    @property
    def events(self) -> int:
        """Events the rows stand for."""
        return len(self.rows) if self.n_events is None else int(self.n_events.sum())


def normalise_names(values: pd.Series) -> pd.Series:
    """NFC, trimmed, inner whitespace collapsed to one space (Unicode Standard Annex #15 for NFC)."""
    return values.astype(str).str.normalize("NFC").str.replace(_SPACE, " ", regex=True).str.strip()


class _Checks:
    """Bad-row bookkeeping: raise for the first bad row of the table (after every check), or collect every bad row."""

    def __init__(self, rows: np.ndarray, file: str, collect: bool) -> None:
        self.rows = rows
        self.file = file
        self.collect = collect
        self.bad = np.zeros(len(rows), dtype=bool)
        self.rejected: list[Rejected] = []
        self.first: InputError | None = None  # strict mode: the bad row that comes first in the file

    def raise_first(self) -> None:
        if self.first is not None:
            raise self.first

    def flag(self, mask: np.ndarray, shown, column: str, problem: str, fix: str) -> None:
        """Rows where ``mask`` holds are bad; ``shown(i)`` is the value at row position i."""
        mask = np.asarray(mask, dtype=bool) & ~self.bad
        if not mask.any():
            return
        if not self.collect:
            at = int(np.argmax(mask))
            if self.first is None or self.rows[at] < self.first.row:
                self.first = InputError(problem, file=self.file, row=int(self.rows[at]), column=column, value=shown(at), fix=fix)
            return
        for at in np.flatnonzero(mask).tolist():
            self.rejected.append(Rejected(int(self.rows[at]), column, str(shown(at)), problem, fix))
        self.bad |= mask


def _distinct(column: pa.ChunkedArray) -> tuple[np.ndarray, pd.Series]:
    """Codes (int64 per row) and the distinct raw texts of a text column."""
    if not pa.types.is_dictionary(column.type):
        column = pc.dictionary_encode(column)
    column = column.unify_dictionaries() if hasattr(column, "unify_dictionaries") else column
    array = column.combine_chunks() if isinstance(column, pa.ChunkedArray) else column
    if isinstance(array, pa.ChunkedArray):  # pragma: no cover - older pyarrow
        array = pa.concat_arrays(array.chunks)
    codes = array.indices.to_numpy(zero_copy_only=False).astype(np.int64, copy=False)
    values = pd.Series(array.dictionary.to_pylist(), dtype=object).fillna("")
    return codes, values


def _labels(table: pa.Table, column: str, checks: _Checks, what: str) -> tuple[np.ndarray, pd.Series]:
    """Codes and normalised distinct labels of a label column, with the label checks."""
    codes, raw = _distinct(table[column])
    stripped = raw.str.strip()

    def shown(at: int) -> str:
        return stripped.iloc[codes[at]]

    def check(bad_values: np.ndarray, problem: str, fix: str) -> None:
        if bad_values.any():
            checks.flag(bad_values[codes], shown, column, problem, fix)

    check((stripped == "").to_numpy(), f"has no {what} label", "fill it in or drop the row")
    # A NUL character is a sign of a damaged or binary file.
    check(stripped.str.contains("\x00", regex=False).to_numpy(dtype=bool),
          f"has a NUL character in the {what} label (a damaged or binary file?)", "remove it, or export the data again as CSV text")
    names = normalise_names(raw)
    check((names.str.len() > MAX_LABEL).to_numpy(),
          f"has {'an' if what[0] in 'aeiou' else 'a'} {what} label longer than {MAX_LABEL} characters", "shorten the label")
    return codes, names


def _weights(table: pa.Table, column: str, checks: _Checks) -> np.ndarray:
    codes, raw = _distinct(table[column])
    text = raw.str.strip()
    numbers = pd.to_numeric(text, errors="coerce").to_numpy(dtype=np.float64)

    def shown(at: int) -> str:
        return text.iloc[codes[at]]

    with np.errstate(invalid="ignore"):
        for bad, problem, fix in (
            (text == "", "has no weight", "fill in a number (0 for an observed absence of a tie) or drop the row"),
            (np.isnan(numbers), "is not a number", "use a plain number with a decimal point, such as 1 or 2.5"),
            (~np.isfinite(numbers), "is not a finite number", "use a plain number such as 1 or 2.5"),
            (numbers < 0, "is negative", "weights count or rate ties and must be 0 or more"),
            (numbers > MAX_WEIGHT, f"is larger than {MAX_WEIGHT:.0e}", "check the value, or rescale the column"),
        ):
            bad = np.asarray(bad, dtype=bool)
            if bad.any():
                checks.flag(bad[codes], shown, column, problem, fix)
    return numbers[codes]


def _dated_periods(table: pa.Table, mapping: EventMapping, scheme: PeriodScheme, checks: _Checks):
    column = mapping.date
    codes, raw = _distinct(table[column])
    text = raw.str.strip()

    def shown(at: int) -> str:
        return text.iloc[codes[at]]

    empty = (text == "").to_numpy()
    checks.flag(empty[codes], shown, column, "has no date", "fill in the date or drop the row")
    dates, year_only, bad = parse_dates(text.where(~empty, "2000"), mapping.date_format)
    formats = mapping.date_format
    if formats:
        listed = [formats] if isinstance(formats, str) else list(formats)
        fix = "match " + " or ".join(f"--date-format {f!r}" for f in listed)
    else:
        fix = "use an ISO date (2019-03-31), a bare year (2019), or pass --date-format (e.g. %d/%m/%Y)"
    bad = bad & ~empty
    checks.flag(bad[codes], shown, column, "is not a date that can be read (or is out of range)", fix)
    usable = ~(bad | empty)
    dates = dates.where(usable, pd.Timestamp("2000-01-01"))
    year_only = year_only & usable
    try:
        periods = scheme.assign(dates, year_only)
    except UsageError as exc:
        if not checks.collect:
            raise InputError(str(exc), file=checks.file, column=column) from None
        # quarters or months of bare years: those rows are the bad ones
        checks.flag(year_only[codes], shown, column, "is a bare year, which cannot be cut into " + scheme.kind + "s",
                    "give the full date, or use --period year (or Ny)")
        year_only = np.zeros_like(year_only)
        periods = scheme.assign(dates, year_only)
    occurred = np.where(year_only, dates.dt.strftime("%Y"), dates.dt.strftime("%Y-%m-%d")).astype(object)
    return codes, periods, occurred


def _column_periods(table: pa.Table, column: str, checks: _Checks):
    codes, raw = _distinct(table[column])
    text = raw.str.strip()

    def shown(at: int) -> str:
        return text.iloc[codes[at]]

    for bad, problem, fix in (
        (text == "", "has no period", "fill in the period or drop the row"),
        (text.str.len() > 100, "is too long for a period label", "use labels of at most 100 characters"),
        (text.str.contains("\x00", regex=False), "has a NUL character in the period label (a damaged or binary file?)",
         "remove it, or export the data again as CSV text"),
    ):
        bad = np.asarray(bad, dtype=bool)
        if bad.any():
            checks.flag(bad[codes], shown, column, problem, fix)
    periods = pd.DataFrame({"label": text.to_numpy(dtype=object), "sort_key": 0, "start": None, "end": None})
    return codes, periods, np.full(len(text), None, dtype=object)


def _merge_codes(first: pd.Series, second: pd.Series, codes_a: np.ndarray, codes_b: np.ndarray):
    """One table of distinct values for two coded columns (labels equal after normalising share a code)."""
    together = pd.concat([first, second], ignore_index=True)
    new, uniques = pd.factorize(together)
    return new[: len(first)][codes_a], new[len(first):][codes_b], np.asarray(uniques, dtype=object)


def _compact(codes: np.ndarray, values) -> tuple[np.ndarray, np.ndarray]:
    """Codes into the distinct values that are equal after normalising."""
    new, uniques = pd.factorize(pd.Series(values, dtype=object))
    return new[codes], np.asarray(uniques, dtype=object)


def validate_block(table: pa.Table, first_row, mapping: EventMapping, scheme: PeriodScheme, file: str,
                   *, collect: bool = False) -> EventBlock:
    """Validate one table of mapped text columns (rows numbered from ``first_row``, or by an array of numbers).

    Returns an :class:`EventBlock` without self-ties (counted) and, with
    ``collect``, without the bad rows (listed in ``rejected``).
    """
    n = table.num_rows
    if isinstance(first_row, np.ndarray):
        rows = first_row.astype(np.int64, copy=False)
    else:
        rows = np.arange(first_row, first_row + n, dtype=np.int64)
    checks = _Checks(rows, file, collect)
    src_codes, src_names = _labels(table, mapping.source, checks, "actor")
    dst_codes, dst_names = _labels(table, mapping.target, checks, "actor")
    if mapping.relation is not None:
        rel_codes, rel_names = _labels(table, mapping.relation, checks, "relation")
        relation, relations = _compact(rel_codes, rel_names)
    else:
        relation, relations = np.zeros(n, dtype=np.int64), np.array([mapping.fixed_relation()], dtype=object)
    weight = _weights(table, mapping.weight, checks) if mapping.weight is not None else np.ones(n, dtype=np.float64)
    if mapping.date is not None:
        date_codes, periods, occurred = _dated_periods(table, mapping, scheme, checks)
    else:
        date_codes, periods, occurred = _column_periods(table, mapping.period_column, checks)
    period, labels = pd.factorize(periods["label"])
    periods = periods.iloc[pd.Series(range(len(period))).groupby(period).first().to_numpy()].reset_index(drop=True)
    checks.raise_first()
    source, target, actors = _merge_codes(src_names, dst_names, src_codes, dst_codes)
    keep = ~checks.bad
    self_tie = (source == target) & keep
    keep &= ~self_tie
    return EventBlock(
        rows=rows[keep], actors=actors, source=source[keep], target=target[keep],
        relations=relations, relation=relation[keep], periods=periods, period=period[date_codes][keep],
        dates=occurred, date=date_codes[keep], weight=weight[keep], self_ties=int(self_tie.sum()),
        rejected=checks.rejected,
    )
