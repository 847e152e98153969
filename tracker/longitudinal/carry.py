"""Carrying track names from an old alignment to a new one, by who is in them when.

After the data change under a fit (periods re-cut, two actors merged) the
fit is redone and aligned again; the new tracks have new numbers.  A name
the analyst gave ("coordinating core") belongs to the new track that holds
most of the same actors at the same times.

The weight between old track ``s`` and new track ``t`` is the number of
(actor, old period, new period) triples where the actor is in ``s`` in the
old period, in ``t`` in the new period, and the two periods overlap in time
(or carry the same label when a period has no dates).  Names go by a
maximum-weight one-to-one matching of old to new tracks (Hungarian method,
Kuhn 1955; :func:`tracker.longitudinal.align.max_weight_matching`); an old
track that shares no one with any new track keeps its name nowhere, and the
caller reports it.  The no-ties track (0) is never renamed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracker.longitudinal.align import max_weight_matching

__all__ = ["carry_names"]


def _spans(periods: pd.DataFrame) -> pd.DataFrame:
    out = periods[["label", "start", "end"]].copy()
    out["start"] = pd.to_datetime(out["start"], errors="coerce")
    out["end"] = pd.to_datetime(out["end"], errors="coerce")
    return out


def carry_names(old: pd.DataFrame, new: pd.DataFrame, names: dict[int, str],
                old_periods: pd.DataFrame, new_periods: pd.DataFrame) -> tuple[dict[int, str], list[str]]:
    """New track -> name, and the names that found no new track.

    Parameters
    ----------
    old, new : DataFrame
        ``period, actor, track`` of the old and the new alignment.
    names : dict
        Old track -> name (only named tracks).
    old_periods, new_periods : DataFrame
        ``label, start, end`` of the periods each alignment uses (ISO dates or None).
    """
    if not names:
        return {}, []
    old = old[old["track"].notna() & (old["track"] > 0) & old["track"].isin(list(names))]
    new = new[new["track"].notna() & (new["track"] > 0)]
    pairs = old.merge(new, on="actor", suffixes=("_old", "_new"))
    if not pairs.empty:
        a, b = _spans(old_periods).set_index("label"), _spans(new_periods).set_index("label")
        s0, e0 = a["start"].reindex(pairs["period_old"]).to_numpy(), a["end"].reindex(pairs["period_old"]).to_numpy()
        s1, e1 = b["start"].reindex(pairs["period_new"]).to_numpy(), b["end"].reindex(pairs["period_new"]).to_numpy()
        dated = ~(pd.isna(s0) | pd.isna(e0) | pd.isna(s1) | pd.isna(e1))
        overlap = np.zeros(len(pairs), dtype=bool)
        overlap[dated] = (s0[dated] <= e1[dated]) & (s1[dated] <= e0[dated])
        same = pairs["period_old"].astype(str).to_numpy() == pairs["period_new"].astype(str).to_numpy()
        overlap[~dated] = same[~dated]
        pairs = pairs[overlap]
    carried: dict[int, str] = {}
    if not pairs.empty:
        table = pairs.groupby(["track_old", "track_new"]).size().unstack(fill_value=0)
        weights = table.to_numpy()
        rows, cols = max_weight_matching(weights)
        for r, c in zip(rows, cols):
            if weights[r, c] > 0:
                carried[int(table.columns[c])] = names[int(table.index[r])]
    lost = [name for track, name in names.items() if name not in carried.values()]
    return carried, lost
