"""Who moved where: trajectories, moves, transition tables and mobility per step.

Every function takes the same tidy table of memberships -- one row per actor
present in a period, columns ``period``, ``actor``, ``track`` and optionally
``confidence`` -- and the ordered list of periods.  Tracks are the persistent
positions of :func:`tracker.longitudinal.align.align`; track 0 is the isolates'
track (present, no tie).

Conventions (stated once, used everywhere here):

* An actor is *present* in a period when it has a row there.  Absence is not a
  track: an actor that has not entered yet, or has left, simply has no row.
* A *move* compares an actor's track with its track in the **last period where it
  was present**.  Consecutive presences separated by absent periods (a gap) are
  compared directly, and the move is recorded with ``from_period`` = the last
  period present, so a move is never invented or lost by a gap.
* By default the isolates' track counts as a track: losing every tie is a change
  of position.  Pass ``ignore_tracks=(0,)`` to treat isolated periods as absence
  and compare ordinary positions across silent years.

These are the movement summaries of longitudinal position analysis (per-actor
trajectories, transition matrices between aligned positions, mobility rate, entry
and exit); see the transition tables of Wasserman & Faust [1]_ and the dynamic
blockmodels of Matias & Miele [2]_.

References
----------
.. [1] Wasserman, S. & Faust, K. (1994). Social Network Analysis, ch. 10.
.. [2] Matias, C. & Miele, V. (2017). Statistical clustering of temporal networks
   through a dynamic stochastic block model. JRSS-B 79, 1119-1141.
"""

from __future__ import annotations

from typing import Iterable, Sequence

import numpy as np
import pandas as pd

from tracker.errors import UsageError

__all__ = ["trajectories", "moves", "transitions", "mobility", "stayers"]

POOLED = "all"


def trajectories(
    memberships: pd.DataFrame, periods: Sequence[str], *, ignore_tracks: Iterable[int] = ()
) -> pd.DataFrame:
    """Each actor's track in each period, as a wide table.

    Returns
    -------
    pandas.DataFrame
        Index ``actor`` (sorted); one column per period (in ``periods`` order) of
        nullable integers, ``<NA>`` where the actor is absent; then ``entry`` and
        ``exit``, the first and last period where the actor is present.

    Examples
    --------
    >>> import pandas as pd
    >>> m = pd.DataFrame({"period": ["1", "2", "2"], "actor": ["a", "a", "b"], "track": [1, 2, 2]})
    >>> trajectories(m, ["1", "2"])  # doctest: +NORMALIZE_WHITESPACE
              1  2 entry exit
    actor
    a         1  2     1    2
    b      <NA>  2     2    2
    """
    df, periods = _prepare(memberships, periods, ignore_tracks)
    wide = df.pivot(index="actor", columns="period", values="track")
    wide = wide.reindex(columns=periods).astype("Int64")
    wide.columns = pd.Index(periods, name=None)
    first = df.groupby("actor")["t"].min()
    last = df.groupby("actor")["t"].max()
    names = np.asarray(periods, dtype=object)
    wide["entry"] = names[first.reindex(wide.index).to_numpy()]
    wide["exit"] = names[last.reindex(wide.index).to_numpy()]
    return wide


def moves(
    memberships: pd.DataFrame, periods: Sequence[str], *, ignore_tracks: Iterable[int] = ()
) -> pd.DataFrame:
    """Every change of track between consecutive presences of an actor.

    Returns
    -------
    pandas.DataFrame
        Columns ``actor, from_period, to_period, from_track, to_track, gap`` (``gap``
        = number of periods the actor was absent in between, usually 0), plus
        ``from_confidence, to_confidence`` when memberships carry ``confidence``.
        Sorted by period, then actor.

    Examples
    --------
    >>> import pandas as pd
    >>> m = pd.DataFrame({"period": ["1", "3"], "actor": ["a", "a"], "track": [1, 2]})
    >>> moves(m, ["1", "2", "3"])
      actor from_period to_period  from_track  to_track  gap
    0     a           1         3           1         2    1
    """
    steps = _steps(memberships, periods, ignore_tracks)
    out = steps[steps["from_track"] != steps["to_track"]]
    return out.drop(columns=["t_from", "t_to"]).reset_index(drop=True)


def transitions(
    memberships: pd.DataFrame, periods: Sequence[str], *, ignore_tracks: Iterable[int] = ()
) -> pd.DataFrame:
    """Transition counts and row shares between tracks, per step and pooled.

    A step pairs each actor's consecutive presences (so a gap yields a step from
    the last period present); staying in a track is a transition too.

    Returns
    -------
    pandas.DataFrame
        Columns ``from_period, to_period, from_track, to_track, count, share`` where
        ``share = count / (actors in from_track at from_period seen next at
        to_period)`` (each row of a transition matrix sums to 1).  Per-step rows
        come first, in period order; then the pooled rows, with ``from_period`` and
        ``to_period`` equal to ``"all"``, summed over all steps.
    """
    steps = _steps(memberships, periods, ignore_tracks)
    keys = ["t_from", "t_to", "from_period", "to_period", "from_track", "to_track"]
    per = steps.groupby(keys, sort=True).size().rename("count").reset_index()
    per = per.drop(columns=["t_from", "t_to"])
    per["share"] = per["count"] / per.groupby(["from_period", "to_period", "from_track"])[
        "count"
    ].transform("sum")
    pooled = steps.groupby(["from_track", "to_track"], sort=True).size().rename("count").reset_index()
    pooled.insert(0, "to_period", POOLED)
    pooled.insert(0, "from_period", POOLED)
    pooled["share"] = pooled["count"] / pooled.groupby("from_track")["count"].transform("sum")
    out = pd.concat([per, pooled], ignore_index=True)
    out["count"] = out["count"].astype(np.int64)
    return out[["from_period", "to_period", "from_track", "to_track", "count", "share"]]


def mobility(
    memberships: pd.DataFrame, periods: Sequence[str], *, ignore_tracks: Iterable[int] = ()
) -> pd.DataFrame:
    r"""Mobility per step between adjacent periods.

    For each pair of adjacent periods (``from_period``, ``to_period``):

    * ``present_both``: actors present in both;
    * ``movers``: of those, actors whose track changed;
    * ``mobility_rate`` = movers / present_both (``nan`` when nobody is present in both);
    * ``entries``: present now, absent in the period before (first entries and returns);
    * ``exits``: present in the period before, absent now;
    * ``gap_moves``: moves that arrive now from an earlier period after a gap (they
      are in :func:`moves` but not in ``movers``).

    ``movers`` summed over steps plus ``gap_moves`` summed equals the number of moves.
    """
    df, periods = _prepare(memberships, periods, ignore_tracks)
    n_t = len(periods)
    cols = ["from_period", "to_period", "present_both", "movers", "mobility_rate", "entries", "exits", "gap_moves"]
    if n_t < 2:
        return pd.DataFrame(columns=cols)
    actors, a_idx = np.unique(df["actor"].to_numpy(dtype=object), return_inverse=True)
    track = np.full((actors.size, n_t), -1, dtype=np.int64)
    present = np.zeros((actors.size, n_t), dtype=bool)
    track[a_idx, df["t"].to_numpy()] = df["track"].to_numpy()
    present[a_idx, df["t"].to_numpy()] = True
    both = present[:, :-1] & present[:, 1:]
    moved = both & (track[:, :-1] != track[:, 1:])
    steps = _steps(memberships, periods, ignore_tracks)
    gap = steps[(steps["from_track"] != steps["to_track"]) & (steps["t_to"] - steps["t_from"] > 1)]
    gap_moves = np.bincount(gap["t_to"].to_numpy(dtype=np.int64), minlength=n_t)[1:]
    present_both = both.sum(axis=0)
    movers = moved.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        rate = np.where(present_both > 0, movers / np.maximum(present_both, 1), np.nan)
    return pd.DataFrame(
        {
            "from_period": list(periods[:-1]),
            "to_period": list(periods[1:]),
            "present_both": present_both.astype(np.int64),
            "movers": movers.astype(np.int64),
            "mobility_rate": rate,
            "entries": (present[:, 1:] & ~present[:, :-1]).sum(axis=0).astype(np.int64),
            "exits": (present[:, :-1] & ~present[:, 1:]).sum(axis=0).astype(np.int64),
            "gap_moves": gap_moves.astype(np.int64),
        },
        columns=cols,
    )


def stayers(
    memberships: pd.DataFrame,
    periods: Sequence[str],
    *,
    min_periods: int = 2,
    ignore_tracks: Iterable[int] = (),
) -> pd.DataFrame:
    """Actors present in at least ``min_periods`` periods who never moved.

    Returns
    -------
    pandas.DataFrame
        Columns ``actor, track, n_periods, entry, exit``, sorted by actor.
    """
    df, periods = _prepare(memberships, periods, ignore_tracks)
    g = df.groupby("actor")
    summary = pd.DataFrame(
        {
            "track": g["track"].first(),
            "n_tracks": g["track"].nunique(),
            "n_periods": g.size(),
            "t_entry": g["t"].min(),
            "t_exit": g["t"].max(),
        }
    )
    keep = summary[(summary["n_tracks"] == 1) & (summary["n_periods"] >= min_periods)]
    names = np.asarray(periods, dtype=object)
    return pd.DataFrame(
        {
            "actor": keep.index.to_numpy(dtype=object),
            "track": keep["track"].to_numpy(dtype=np.int64),
            "n_periods": keep["n_periods"].to_numpy(dtype=np.int64),
            "entry": names[keep["t_entry"].to_numpy(dtype=np.int64)],
            "exit": names[keep["t_exit"].to_numpy(dtype=np.int64)],
        }
    )


def _prepare(memberships: pd.DataFrame, periods: Sequence[str], ignore_tracks: Iterable[int]):
    """Validate once; add the period's index ``t``; drop ignored tracks."""
    periods = [str(p) for p in periods]
    if len(set(periods)) != len(periods):
        raise UsageError("a period is listed twice; give each period once, in time order")
    missing = {"period", "actor", "track"} - set(memberships.columns)
    if missing:
        raise UsageError(f"memberships lack column(s) {sorted(missing)}; give period, actor and track")
    cols = ["period", "actor", "track"] + (["confidence"] if "confidence" in memberships else [])
    df = memberships[cols].copy()
    df["period"] = df["period"].astype(str)
    order = {p: i for i, p in enumerate(periods)}
    df["t"] = df["period"].map(order)
    if df["t"].isna().any():
        bad = df.loc[df["t"].isna(), "period"].iloc[0]
        raise UsageError(f"memberships name period {bad!r}, which is not in the period list; add it")
    if df.duplicated(["period", "actor"]).any():
        row = df[df.duplicated(["period", "actor"])].iloc[0]
        raise UsageError(
            f"actor {row['actor']!r} has two tracks in period {row['period']}; give one row per actor and period"
        )
    if df["track"].isna().any():
        raise UsageError("memberships have a row without a track; drop absent actors instead")
    df["t"] = df["t"].astype(np.int64)
    df["track"] = df["track"].astype(np.int64)
    ignore = list(ignore_tracks)
    if ignore:
        df = df[~df["track"].isin(ignore)]
    return df.sort_values(["actor", "t"], kind="stable").reset_index(drop=True), periods


def _steps(memberships, periods, ignore_tracks) -> pd.DataFrame:
    """Each actor's consecutive presences as (from, to) pairs, in period order."""
    df, periods = _prepare(memberships, periods, ignore_tracks)
    prev = df.groupby("actor", sort=False).shift(1)
    has = prev["t"].notna().to_numpy()
    cur = df[has]
    prv = prev[has]
    names = np.asarray(periods, dtype=object)
    t_from = prv["t"].to_numpy(dtype=np.int64)
    t_to = cur["t"].to_numpy(dtype=np.int64)
    out = pd.DataFrame(
        {
            "actor": cur["actor"].to_numpy(dtype=object),
            "from_period": names[t_from],
            "to_period": names[t_to],
            "from_track": prv["track"].to_numpy(dtype=np.int64),
            "to_track": cur["track"].to_numpy(dtype=np.int64),
            "gap": t_to - t_from - 1,
            "t_from": t_from,
            "t_to": t_to,
        }
    )
    if "confidence" in df:
        out["from_confidence"] = prv["confidence"].to_numpy(dtype=np.float64)
        out["to_confidence"] = cur["confidence"].to_numpy(dtype=np.float64)
    return out.sort_values(["t_to", "actor"], kind="stable").reset_index(drop=True)
