"""Validating a roster: who exists when, and their attributes.

A roster tells "did not exist yet" (absent) apart from "present but without
ties" (isolated).  Each row names an actor and, optionally, the first and last
period in which it is present (inclusive; empty means open-ended).  Other
columns are kept as the actor's attributes.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

from tracker.ingest.block import normalise_names
from tracker.ingest.events import MAX_LABEL, _first_bad, _no_nul
from tracker.ingest.periods import PeriodScheme, column_sort_keys, parse_dates

__all__ = ["validate_roster", "bound_key"]


def validate_roster(
    frame: pd.DataFrame,
    *,
    actor: str,
    first: str | None,
    last: str | None,
    scheme: PeriodScheme | None,
    file: str,
) -> pd.DataFrame:
    """Validate roster rows.

    Returns a frame with columns ``row, actor, first, last, attributes`` where
    ``first``/``last`` are normalised bounds (ISO dates for dated studies, period
    labels otherwise; ``None`` when open) and ``attributes`` is a JSON object.
    """
    labels = frame[actor].astype(str).str.strip()
    _first_bad(labels == "", labels, file, actor, "has no actor label", "fill it in or drop the row")
    _first_bad(labels.str.len() > MAX_LABEL, labels, file, actor, f"has an actor label longer than {MAX_LABEL} characters", "shorten the label")
    _no_nul(labels, file, actor, "actor")
    labels = normalise_names(labels)
    _first_bad(labels.str.len() > MAX_LABEL, labels, file, actor, f"has an actor label longer than {MAX_LABEL} characters", "shorten the label")
    dup = labels.duplicated().to_numpy()
    _first_bad(dup, labels, file, actor, "names an actor a second time", "keep one row per actor")
    out = pd.DataFrame({"row": frame.index.to_numpy(), "actor": labels.to_numpy(dtype=object)})
    for name, column, end in (("first", first, False), ("last", last, True)):
        if column is None:
            out[name] = None
            continue
        raw = frame[column].astype(str).str.strip()
        if scheme is None or scheme.dated:
            present = raw != ""
            dates, year_only, bad = parse_dates(raw.where(present, "2000"))
            _first_bad(bad & present.to_numpy(), raw, file, column, "is not a year or an ISO date", "use a year (2019) or a date (2019-03-31); leave empty for open-ended")
            iso = np.where(
                year_only,
                dates.dt.strftime("%Y") + ("-12-31" if end else "-01-01"),
                dates.dt.strftime("%Y-%m-%d"),
            )
            out[name] = np.where(present, iso, None)
        else:
            out[name] = raw.where(raw != "", None).to_numpy(dtype=object)
    if first is not None and last is not None:
        both = out["first"].notna() & out["last"].notna()
        if scheme is None or scheme.dated:
            wrong = both & (out["first"].astype(str) > out["last"].astype(str))
        else:
            keys = column_sort_keys(pd.concat([out["first"].dropna(), out["last"].dropna()]), {})
            wrong = both & (out["first"].map(keys) > out["last"].map(keys))
        _first_bad(wrong.to_numpy(), frame[first].astype(str), file, first, "comes after the last period of that actor", "swap the first and last columns or fix the value")
    extra = [c for c in frame.columns if c not in {actor, first, last}]
    out["attributes"] = [
        json.dumps({c: v for c, v in zip(extra, values) if v != ""}, ensure_ascii=False) if extra else None
        for values in frame[extra].itertuples(index=False, name=None)
    ] if extra else None
    return out


def bound_key(value: str | None, scheme: PeriodScheme, keys: dict[str, int]) -> int | None:
    """Sort key of a period-label bound in a study whose periods come from a column."""
    if value is None:
        return None
    if value in keys:
        return keys[value]
    return column_sort_keys([value], keys)[value]
