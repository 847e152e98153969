"""Plain-language sentences about what changed between periods.

The sentences are built only from the report tables (memberships, moves,
tracks), never from the raw data, so they say exactly what the charts show:
which tracks appeared, split, merged or ended, which actors joined which track
and when, who entered or left the study, and how much movement there was.
Moves whose confidence is below a threshold are called uncertain, not hidden.

Sentences are plain text; the HTML report escapes them.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import pandas as pd

__all__ = ["LOW_CONFIDENCE", "describe_changes", "is_low_confidence", "moves_from_memberships"]

#: Moves below this confidence are reported as uncertain: less likely than not
#: to be real (for a posterior probability) or surviving fewer than half of the
#: resamples (for a resampling rate). Common practice for a default; callers
#: may pass another.
LOW_CONFIDENCE = 0.5

_NAMES_SHOWN = 8


def is_low_confidence(confidence: object, threshold: float = LOW_CONFIDENCE) -> bool:
    """True when ``confidence`` is a number below ``threshold`` (missing is not low).

    >>> is_low_confidence(0.3), is_low_confidence(0.9), is_low_confidence(float("nan"))
    (True, False, False)
    """
    try:
        value = float(confidence)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return False
    return value == value and value < threshold


def describe_changes(
    tables: Mapping[str, pd.DataFrame],
    periods: Sequence[object],
    *,
    low_confidence: float = LOW_CONFIDENCE,
) -> list[str]:
    """Sentences that tell a reader what changed, in time order.

    Parameters
    ----------
    tables : mapping
        Uses ``memberships`` (period, actor, track), ``moves`` (actor,
        from_period, to_period, from_track, to_track, confidence) and ``tracks``
        (track, name, first_period, last_period and optionally ``kind`` --
        birth, split, merge, continuation, death -- and ``parent``, the track(s)
        it came from, as text). Missing tables are skipped; when ``moves`` is
        missing, moves are read off the memberships of consecutive periods.
    periods : sequence
        Period labels in time order.
    low_confidence : float
        Moves with a confidence below this are called uncertain.

    Returns
    -------
    list of str

    Examples
    --------
    >>> m = pd.DataFrame({"period": ["1", "1", "2", "2"], "actor": ["a", "b", "a", "b"],
    ...                   "track": [1, 1, 1, 2]})
    >>> describe_changes({"memberships": m}, ["1", "2"])[-2]
    'Between 1 and 2, b moved into T2 (from T1).'
    """
    periods = [str(p) for p in periods]
    order = {p: i for i, p in enumerate(periods)}
    memberships = _frame(tables, "memberships")
    tracks = _frame(tables, "tracks")
    names = _track_names(tracks)
    sentences: list[str] = []

    if memberships is not None and len(memberships):
        memberships = memberships.assign(period=memberships["period"].astype(str),
                                         actor=memberships["actor"].astype(str))
        memberships = memberships[memberships["period"].isin(order)]
        n_actors = memberships["actor"].nunique()
        span = f"from {periods[0]} to {periods[-1]}" if periods else ""
        sentences.append(
            f"The study follows {n_actors} actor{_s(n_actors)} over {len(periods)} "
            f"period{_s(len(periods))}, {span}."
        )

    if tracks is not None and len(tracks):
        sentences.extend(_track_sentences(tracks, periods, names))

    moves = _frame(tables, "moves")
    if moves is None and memberships is not None:
        moves = moves_from_memberships(memberships, periods)
    events: list[tuple[int, int, str]] = []  # (period index, kind rank, sentence)
    if memberships is not None and len(memberships):
        events.extend(_presence_sentences(memberships, periods, names))
    if moves is not None and len(moves):
        moves = moves.assign(
            from_period=moves["from_period"].astype(str), to_period=moves["to_period"].astype(str)
        )
        moves = moves[moves["to_period"].isin(order)]
        events.extend(_move_sentences(moves, periods, names, low_confidence))
    events.sort(key=lambda e: (e[0], e[1]))
    sentences.extend(text for _, _, text in events)

    if moves is not None:
        sentences.append(_mobility_sentence(moves, periods, low_confidence))
    return sentences


# --------------------------------------------------------------------------- parts


def _track_sentences(tracks: pd.DataFrame, periods: list[str], names: dict[int, str]) -> list[str]:
    out = []
    steady = []
    first_period = periods[0] if periods else None
    last_period = periods[-1] if periods else None
    rows = tracks.assign(track=tracks["track"].astype(int)).sort_values("track", kind="stable")
    for row in rows.to_dict("records"):
        track = row["track"]
        if track == 0:
            continue
        label = _track_text(track, names, long=True)
        kind = str(row.get("kind") or "").strip().lower()
        parent = str(row.get("parent") or row.get("parents") or "").strip()
        first = _text(row.get("first_period"))
        last = _text(row.get("last_period"))
        parts = []
        if kind.startswith("split"):
            parts.append(f"appears in {first}, split off from {parent or 'an earlier track'}")
        elif kind.startswith("merge"):
            parts.append(f"appears in {first}, formed by merging {parent or 'earlier tracks'}")
        elif first and first != first_period:
            parts.append(f"is born in {first}")
        if last and last != last_period:
            parts.append(f"is last seen in {last}")
        if parts:
            out.append(f"Track {label} " + " and ".join(parts) + ".")
        else:
            steady.append(label)
    if steady:
        verb = "runs" if len(steady) == 1 else "run"
        out.insert(0, f"Track{_s(len(steady))} {_join(steady)} {verb} through the whole study.")
    return out


def _presence_sentences(
    memberships: pd.DataFrame, periods: list[str], names: dict[int, str]
) -> list[tuple[int, int, str]]:
    order = {p: i for i, p in enumerate(periods)}
    m = memberships.assign(pidx=memberships["period"].map(order))
    m = m.sort_values(["pidx", "actor"], kind="stable")
    first = m.groupby("actor", as_index=False).first()
    last = m.groupby("actor", as_index=False).last()
    out = []
    entered = first[first["pidx"] > 0]
    for (pidx, track), group in entered.groupby(["pidx", "track"], sort=True):
        who = group["actor"].tolist()
        verb = "enters" if len(who) == 1 else "enter"
        out.append((int(pidx), 0, f"In {periods[pidx]}, {_names(who)} {verb} the study, in "
                                  f"{_track_text(track, names)}."))
    left = last[last["pidx"] < len(periods) - 1]
    for pidx, group in left.groupby("pidx", sort=True):
        who = group["actor"].tolist()
        verb = "is" if len(who) == 1 else "are"
        out.append((int(pidx) + 1, 2, f"After {periods[pidx]}, {_names(who)} {verb} no longer "
                                      f"present."))
    return out


def _move_sentences(
    moves: pd.DataFrame, periods: list[str], names: dict[int, str], threshold: float
) -> list[tuple[int, int, str]]:
    order = {p: i for i, p in enumerate(periods)}
    mv = moves.assign(
        pidx=moves["to_period"].map(order),
        actor=moves["actor"].astype(str),
        to_track=moves["to_track"].astype(int),
    )
    if "confidence" not in mv:
        mv["confidence"] = float("nan")
    out = []
    for (pidx, from_period, to_track), group in mv.groupby(
        ["pidx", "from_period", "to_track"], sort=True
    ):
        group = group.sort_values("actor", kind="stable")
        who = group["actor"].tolist()
        sources = sorted({int(t) for t in group["from_track"].dropna()})
        source_text = _join([_track_text(t, names) for t in sources])
        where = _track_text(to_track, names)
        if to_track == 0:
            text = f"Between {from_period} and {periods[pidx]}, {_names(who)} lost all ties"
            text += f" (was in {source_text})." if sources else "."
        else:
            text = f"Between {from_period} and {periods[pidx]}, {_names(who)} moved into {where}"
            text += f" (from {source_text})." if sources else "."
        shaky = group[[is_low_confidence(c, threshold) for c in group["confidence"]]]
        if len(group) == 1 and len(shaky) == 1:
            text += (f" The move has low confidence ({float(shaky['confidence'].iloc[0]):.2f})"
                     " and may be noise.")
        elif len(shaky) == len(group) > _NAMES_SHOWN:
            # Naming thousands of actors makes a page nobody reads (and megabytes).
            text += (f" All {len(group):,} of these moves have low confidence (at most "
                     f"{float(shaky['confidence'].max()):.2f}) and may be noise.")
        elif len(shaky):
            named = shaky.iloc[:_NAMES_SHOWN]
            details = [f"{a} ({float(c):.2f})" for a, c in zip(named["actor"], named["confidence"])]
            text += f" Low confidence, possibly noise: {_names(details, total=len(shaky))}."
        out.append((int(pidx), 1, text))
    return out


def _mobility_sentence(moves: pd.DataFrame, periods: list[str], threshold: float) -> str:
    if len(moves) == 0:
        return "No actor changed track between consecutive periods."
    steps = max(len(periods) - 1, 1)
    actors = moves["actor"].astype(str).nunique()
    per_step = moves.groupby(["from_period", "to_period"], sort=False).size()
    (busy_from, busy_to), busiest = per_step.idxmax(), int(per_step.max())
    text = (
        f"Across {steps} step{_s(steps)} there {'was' if len(moves) == 1 else 'were'} "
        f"{len(moves)} move{_s(len(moves))} by {actors} actor{_s(actors)}; the most change "
        f"came between {busy_from} and {busy_to} ({busiest} move{_s(busiest)})."
    )
    if "confidence" in moves:
        low = sum(is_low_confidence(c, threshold) for c in moves["confidence"])
        if low:
            text += (f" {low} of the moves {'has' if low == 1 else 'have'} a confidence below "
                     f"{threshold:g} and may be noise.")
    return text


def moves_from_memberships(memberships: pd.DataFrame, periods: Sequence[object]) -> pd.DataFrame:
    """Changes of track between consecutive periods, read off the memberships.

    Used when no ``moves`` table is given; the moves have no confidence.
    """
    periods = [str(p) for p in periods]
    memberships = memberships.assign(period=memberships["period"].astype(str))
    memberships = memberships[memberships["period"].isin(periods)]
    order = {p: i for i, p in enumerate(periods)}
    m = memberships.assign(pidx=memberships["period"].map(order))[["actor", "pidx", "track"]]
    nxt = m.assign(pidx=m["pidx"] - 1)
    both = m.merge(nxt, on=["actor", "pidx"], suffixes=("_from", "_to"))
    both = both[both["track_from"] != both["track_to"]]
    return pd.DataFrame(
        {
            "actor": both["actor"],
            "from_period": [periods[i] for i in both["pidx"]],
            "to_period": [periods[i + 1] for i in both["pidx"]],
            "from_track": both["track_from"].astype(int),
            "to_track": both["track_to"].astype(int),
        }
    )


# --------------------------------------------------------------------------- helpers


def _frame(tables: Mapping[str, object], name: str) -> pd.DataFrame | None:
    value = tables.get(name)
    return value if isinstance(value, pd.DataFrame) else None


def _track_names(tracks: pd.DataFrame | None) -> dict[int, str]:
    if tracks is None or "name" not in tracks:
        return {}
    return {
        int(t): str(n)
        for t, n in zip(tracks["track"], tracks["name"])
        if isinstance(n, str) and n.strip()
    }


def _track_text(track: object, names: dict[int, str], *, long: bool = False) -> str:
    number = int(track)  # type: ignore[arg-type]
    if number == 0:
        return "the no-tie group"
    if number in names and names[number] != f"T{number}":
        return f"{names[number]} (T{number})" if long else names[number]
    return f"T{number}"


def _names(actors: Sequence[str], total: int | None = None) -> str:
    """The first names, then a count of the rest; ``total`` when only the first were passed."""
    actors = list(actors)
    total = len(actors) if total is None else total
    if total <= _NAMES_SHOWN:
        return _join(actors)
    rest = total - _NAMES_SHOWN
    return ", ".join(actors[:_NAMES_SHOWN]) + f" and {rest:,} other{_s(rest)}"


def _join(items: Sequence[str]) -> str:
    items = list(items)
    if len(items) <= 1:
        return "".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def _s(count: int) -> str:
    return "" if count == 1 else "s"


def _text(value: object) -> str:
    if value is None:
        return ""
    try:
        if pd.isna(value):
            return ""
    except (TypeError, ValueError):
        pass
    return str(value)
