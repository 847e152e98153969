"""Validating and normalising event rows.

An *event* is one dated (or period-labelled) interaction from a source actor to
a target actor in a relation, with a weight (1 when the file has no weight
column).  :class:`EventMapping` says which columns hold what; the checks run
in :mod:`tracker.ingest.block`.  :func:`_first_bad` and :func:`_no_nul` serve
the roster's checks.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from tracker.errors import InputError, UsageError

__all__ = ["EventMapping", "MAX_LABEL", "MAX_WEIGHT"]

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
    date_format: str | tuple[str, ...] | None = None  # several formats are tried in turn
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


def _no_nul(values: pd.Series, file: str, column: str, what: str) -> None:
    # A NUL character is a sign of a damaged or binary file, and it would cut
    # the label short in C libraries and terminals that show it.
    _first_bad(
        values.str.contains("\x00", regex=False).to_numpy(dtype=bool), values, file, column,
        f"has a NUL character in the {what} label (a damaged or binary file?)", "remove it, or export the data again as CSV text",
    )


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
