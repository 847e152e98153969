"""Comparing two fits of the same study: how far do their positions and moves agree?

An analyst checks robustness by fitting again with other settings (method,
number of positions, smoothing) and asking what changed.  For each period
both fits cover:

* agreement of the two partitions by the adjusted Rand index (Hubert &
  Arabie 1985, "Comparing partitions", *Journal of Classification* 2:193-218),
  computed by :func:`sklearn.metrics.adjusted_rand_score` over the actors
  present in both;
* the actors placed differently: positions of fit B are matched one to one
  to positions of fit A by the largest number of shared actors (maximum-weight
  matching, Hungarian method; Kuhn 1955), and an actor whose B position is not
  the match of its A position is listed;
* moves (an actor changing track between two periods) found by one fit and
  not the other, keyed by actor and the two periods (track numbers are each
  fit's own and are not compared).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.metrics import adjusted_rand_score

from tracker.longitudinal.align import max_weight_matching

__all__ = ["compare_fits"]


def compare_fits(members_a: pd.DataFrame, members_b: pd.DataFrame,
                 moves_a: pd.DataFrame | None = None, moves_b: pd.DataFrame | None = None) -> dict:
    """Agreement of two fits.

    Parameters
    ----------
    members_a, members_b : DataFrame
        ``period, actor, position`` of each fit (:meth:`tracker.api.Study.memberships`).
    moves_a, moves_b : DataFrame, optional
        ``actor, from_period, to_period, from_track, to_track`` of each aligned fit.

    Returns
    -------
    dict
        ``periods``: ``period, actors, ari, placed_differently, share_differently``
        (periods fitted by both, in ``members_a``'s order);
        ``actors``: ``period, actor, position_a, position_b, matched_b`` (the B
        position that corresponds to ``position_a``; empty when none does);
        ``moves``: ``actor, from_period, to_period, found_in`` (``"A only"`` or
        ``"B only"``), or None when either fit has no moves table.
    """
    a = members_a[["period", "actor", "position"]]
    b = members_b[["period", "actor", "position"]]
    both = a.merge(b, on=["period", "actor"], suffixes=("_a", "_b"))
    order = list(dict.fromkeys(a["period"]))
    rows, differ = [], []
    for period in [p for p in order if p in set(both["period"])]:
        part = both[both["period"] == period]
        pa, pb = part["position_a"].to_numpy(), part["position_b"].to_numpy()
        ua, ia = np.unique(pa, return_inverse=True)
        ub, ib = np.unique(pb, return_inverse=True)
        table = np.zeros((ua.size, ub.size), dtype=np.int64)
        np.add.at(table, (ia, ib), 1)
        r, c = max_weight_matching(table)
        match = np.full(ua.size, -1)
        match[r] = c
        matched = match[ia]
        wrong = matched != ib
        ari = float(adjusted_rand_score(pa, pb)) if part.shape[0] > 1 else float("nan")
        rows.append({"period": period, "actors": int(part.shape[0]), "ari": ari,
                     "placed_differently": int(wrong.sum()),
                     "share_differently": float(wrong.mean()) if wrong.size else float("nan")})
        if wrong.any():
            sub = part[wrong]
            differ.append(pd.DataFrame({
                "period": period, "actor": sub["actor"].to_numpy(),
                "position_a": sub["position_a"].to_numpy(), "position_b": sub["position_b"].to_numpy(),
                "matched_b": pd.array([int(ub[m]) if m >= 0 else None for m in matched[wrong]], dtype="Int64"),
            }))
    periods = pd.DataFrame(rows, columns=["period", "actors", "ari", "placed_differently", "share_differently"])
    actors = (pd.concat(differ, ignore_index=True) if differ
              else pd.DataFrame(columns=["period", "actor", "position_a", "position_b", "matched_b"]))
    moves = None
    if moves_a is not None and moves_b is not None:
        key = ["actor", "from_period", "to_period"]
        ka, kb = moves_a[key].drop_duplicates(), moves_b[key].drop_duplicates()
        joined = ka.merge(kb, on=key, how="outer", indicator=True)
        joined = joined[joined["_merge"] != "both"]
        joined["found_in"] = joined["_merge"].map({"left_only": "A only", "right_only": "B only"}).astype(str)
        rank = {p: i for i, p in enumerate(order)}
        joined["_t"] = joined["to_period"].map(rank)
        moves = joined.sort_values(["_t", "actor"]).drop(columns=["_merge", "_t"]).reset_index(drop=True)
    return {"periods": periods, "actors": actors, "moves": moves}
