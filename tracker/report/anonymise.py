"""Replace actor labels by stable codes (A001, A002, ...) in every report table.

Partnership surveys are often confidential: a report shown outside the team
should not name the members. The codes are stable: the same set of actor labels
and the same ``seed`` always give the same codes, so two reports of one study
can be compared. Codes are handed out in a seeded random order rather than in
alphabetical order, so that a code does not give away where a name sorts.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping

import numpy as np
import pandas as pd

__all__ = ["actor_codes", "anonymise_tables", "anonymise_text"]

#: Columns that hold actor labels in the tables of :mod:`tracker.api`.
ACTOR_COLUMNS = ("actor",)


def actor_codes(actors: Iterable[object], *, seed: int = 0) -> dict[str, str]:
    """Map each distinct actor label to a code ``A001``, ``A002``, ...

    Parameters
    ----------
    actors : iterable
        Actor labels (converted to ``str``; duplicates and missing values ignored).
    seed : int, default 0
        Seed of the permutation that decides which label gets which code.

    Returns
    -------
    dict
        ``{label: code}``; codes are zero-padded to at least three digits.

    Examples
    --------
    >>> codes = actor_codes(["north", "south", "east"], seed=1)
    >>> sorted(codes.values())
    ['A001', 'A002', 'A003']
    >>> codes == actor_codes(["east", "north", "south", "east"], seed=1)
    True
    """
    labels = sorted({str(a) for a in actors if not _missing(a)})
    order = np.random.default_rng(seed).permutation(len(labels))
    width = max(3, len(str(len(labels))))
    return {labels[i]: f"A{rank + 1:0{width}d}" for rank, i in enumerate(order)}


def anonymise_text(text: str, codes: Mapping[str, str]) -> str:
    """Replace every whole-word occurrence of an actor label in free text.

    Longer labels are replaced first so that "Harbour Board" is not half-replaced
    by a shorter label "Harbour". A label counts as a whole word when it is not
    glued to a letter, digit or underscore on either side.
    """
    if not codes or not text:
        return text
    pattern = _label_pattern(codes)
    return pattern.sub(lambda m: codes[m.group(0)], text)


def anonymise_tables(
    tables: Mapping[str, object], *, seed: int = 0
) -> tuple[dict[str, object], dict[str, str]]:
    """Return copies of the report tables with actor labels replaced by codes.

    Actor columns (``actor``) are mapped exactly; every other text column and
    every list of sentences is searched for whole-word labels (a track might be
    named after a member, a sentence might name one).

    Parameters
    ----------
    tables : mapping
        Name to DataFrame (or list of strings, e.g. ``structure_sentences``).
    seed : int, default 0
        Passed to :func:`actor_codes`.

    Returns
    -------
    (tables, codes)
        The new tables and the ``{label: code}`` map (keep it private).
    """
    actors: list[object] = []
    for value in tables.values():
        if isinstance(value, pd.DataFrame):
            for column in ACTOR_COLUMNS:
                if column in value.columns:
                    actors.extend(value[column].tolist())
    codes = actor_codes(actors, seed=seed)
    out: dict[str, object] = {}
    for name, value in tables.items():
        if isinstance(value, pd.DataFrame):
            frame = value.copy()
            for column in frame.columns:
                if column in ACTOR_COLUMNS:
                    frame[column] = [
                        v if _missing(v) else codes.get(str(v), str(v)) for v in frame[column]
                    ]
                elif _is_text(frame[column]):
                    frame[column] = [
                        anonymise_text(v, codes) if isinstance(v, str) else v
                        for v in frame[column]
                    ]
            out[name] = frame
        elif isinstance(value, str):
            out[name] = anonymise_text(value, codes)
        elif isinstance(value, (list, tuple)):
            out[name] = [anonymise_text(v, codes) if isinstance(v, str) else v for v in value]
        else:
            out[name] = value
    return out, codes


def _label_pattern(codes: Mapping[str, str]) -> re.Pattern[str]:
    labels = sorted(codes, key=len, reverse=True)
    alternatives = "|".join(re.escape(label) for label in labels)
    return re.compile(rf"(?<!\w)(?:{alternatives})(?!\w)")


def _is_text(series: pd.Series) -> bool:
    return series.dtype == object or pd.api.types.is_string_dtype(series)


def _missing(value: object) -> bool:
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False
