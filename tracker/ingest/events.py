"""Validating and normalising event rows.

An *event* is one dated (or period-labelled) interaction from a source actor to
a target actor in a relation, with a weight (1 when the file has no weight
column).  :func:`validate_events` turns one chunk of text columns into a clean
frame, or raises :class:`InputError` at the first bad row, naming the file, the
data row, the column, the value and the fix.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from tracker.errors import InputError, UsageError
from tracker.ingest.periods import PeriodScheme, parse_dates

__all__ = ["EventMapping", "validate_events", "MAX_LABEL", "MAX_WEIGHT"]

MAX_LABEL = 1000  # characters in an actor or relation label
MAX_WEIGHT = 1e12  # larger weights are almost surely data errors and overflow sums


@dataclass(frozen=True)
class EventMapping:
    """Which columns of a file hold what, and how to read them.

    Exactly one of ``date`` and ``period_column`` is set; exactly one of
    ``relation`` (a column) and ``relation_name`` (a fixed name) is set.
    """

    source: str
    target: str
    date: str | None = None
    period_column: str | None = None
    period: str = "year"
    period_origin: int = 0
    relation: str | None = None
    relation_name: str | None = None
    weight: str | None = None
    undirected: bool = False
    date_format: str | None = None
    delimiter: str | None = None

    def __post_init__(self) -> None:
        if (self.date is None) == (self.period_column is None):
            raise UsageError("give either --date COLUMN (with --period) or --period-column COLUMN")
        if self.relation is not None and self.relation_name is not None:
            raise UsageError("give either --relation COLUMN or --relation-name NAME, not both")
        if self.source == self.target:
            raise UsageError("--source and --target must be different columns")

    def columns(self) -> dict[str, str | None]:
        """Option name -> mapped column, for header checks."""
        return {
            "--source": self.source,
            "--target": self.target,
            "--date": self.date,
            "--period-column": self.period_column,
            "--relation": self.relation,
            "--weight": self.weight,
        }

    def fixed_relation(self) -> str:
        return self.relation_name or "tie"

    def as_dict(self) -> dict:
        return asdict(self)


def validate_events(
    frame: pd.DataFrame, mapping: EventMapping, scheme: PeriodScheme, file: str
) -> tuple[pd.DataFrame, int]:
    """Validate one chunk of raw rows.

    Parameters
    ----------
    frame : DataFrame of text, indexed by data row number
    mapping : EventMapping
    scheme : PeriodScheme
        The study's period scheme (``column`` when periods come from a column).
    file : str
        File name for messages.

    Returns
    -------
    events : DataFrame
        Columns ``row, source, target, relation, occurred, period, sort_key,
        start, end, weight``; self-ties removed.
    self_ties : int
        Number of rows dropped because source and target are the same actor.
    """
    rows = frame.index.to_numpy()
    source = _labels(frame, mapping.source, file, "actor")
    target = _labels(frame, mapping.target, file, "actor")
    if mapping.relation is not None:
        relation = _labels(frame, mapping.relation, file, "relation")
    else:
        relation = pd.Series(mapping.fixed_relation(), index=frame.index, dtype=object)

    if mapping.weight is not None:
        weight = _weights(frame, mapping.weight, file)
    else:
        weight = pd.Series(1.0, index=frame.index)

    if mapping.date is not None:
        raw = frame[mapping.date].astype(str).str.strip()
        _first_bad(raw == "", raw, file, mapping.date, "has no date", "fill in the date or drop the row")
        dates, year_only, bad = parse_dates(raw, mapping.date_format)
        fmt_hint = f"match --date-format {mapping.date_format!r}" if mapping.date_format else "use an ISO date (2019-03-31), a bare year (2019), or pass --date-format (e.g. %d/%m/%Y)"
        _first_bad(bad, raw, file, mapping.date, "is not a date that can be read (or is out of range)", fmt_hint)
        try:
            periods = scheme.assign(dates, year_only)
        except UsageError as exc:
            raise InputError(str(exc), file=file, column=mapping.date) from None
        occurred = np.where(year_only, dates.dt.strftime("%Y"), dates.dt.strftime("%Y-%m-%d"))
    else:
        raw = frame[mapping.period_column].astype(str).str.strip()
        _first_bad(raw == "", raw, file, mapping.period_column, "has no period", "fill in the period or drop the row")
        _first_bad(raw.str.len() > 100, raw, file, mapping.period_column, "is too long for a period label", "use labels of at most 100 characters")
        _no_nul(raw, file, mapping.period_column, "period")
        periods = pd.DataFrame({"label": raw.to_numpy(dtype=object), "sort_key": 0, "start": None, "end": None})
        occurred = np.full(len(frame), None, dtype=object)

    events = pd.DataFrame(
        {
            "row": rows,
            "source": source.to_numpy(dtype=object),
            "target": target.to_numpy(dtype=object),
            "relation": relation.to_numpy(dtype=object),
            "occurred": occurred,
            "period": periods["label"].to_numpy(dtype=object),
            "sort_key": periods["sort_key"].to_numpy(),
            "start": periods["start"].to_numpy(dtype=object),
            "end": periods["end"].to_numpy(dtype=object),
            "weight": weight.to_numpy(dtype=np.float64),
        }
    )
    self_tie = (events["source"] == events["target"]).to_numpy()
    return events[~self_tie].reset_index(drop=True), int(self_tie.sum())


def _labels(frame: pd.DataFrame, column: str, file: str, what: str) -> pd.Series:
    values = frame[column].astype(str).str.strip()
    _first_bad(values == "", values, file, column, f"has no {what} label", "fill it in or drop the row")
    _no_nul(values, file, column, what)
    _first_bad(
        values.str.len() > MAX_LABEL, values, file, column,
        f"has {'an' if what[0] in 'aeiou' else 'a'} {what} label longer than {MAX_LABEL} characters", "shorten the label",
    )
    return values


def _no_nul(values: pd.Series, file: str, column: str, what: str) -> None:
    # A NUL character is a sign of a damaged or binary file, and it would cut
    # the label short in C libraries and terminals that show it.
    _first_bad(
        values.str.contains("\x00", regex=False).to_numpy(dtype=bool), values, file, column,
        f"has a NUL character in the {what} label (a damaged or binary file?)", "remove it, or export the data again as CSV text",
    )


def _weights(frame: pd.DataFrame, column: str, file: str) -> pd.Series:
    raw = frame[column].astype(str).str.strip()
    _first_bad(raw == "", raw, file, column, "has no weight", "fill in a number (0 for an observed absence of a tie) or drop the row")
    numbers = pd.to_numeric(raw, errors="coerce")
    _first_bad(numbers.isna().to_numpy(), raw, file, column, "is not a number", "use a plain number with a decimal point, such as 1 or 2.5")
    values = numbers.to_numpy(dtype=np.float64)
    _first_bad(~np.isfinite(values), raw, file, column, "is not a finite number", "use a plain number such as 1 or 2.5")
    _first_bad(values < 0, raw, file, column, "is negative", "weights count or rate ties and must be 0 or more")
    _first_bad(values > MAX_WEIGHT, raw, file, column, f"is larger than {MAX_WEIGHT:.0e}", "check the value, or rescale the column")
    return pd.Series(values, index=frame.index)


def _first_bad(mask, values: pd.Series, file: str, column: str, problem: str, fix: str) -> None:
    mask = np.asarray(mask, dtype=bool)
    if mask.any():
        position = int(np.argmax(mask))
        raise InputError(
            problem,
            file=file,
            row=int(values.index[position]),
            column=column,
            value=values.iloc[position],
            fix=fix,
        )
