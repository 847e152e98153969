"""Checking a study for damage and for stored results that no longer match the data.

:func:`check_study` looks at a study the way a careful user would after a
crash, a disk problem, or an edit by another program (any SQLite client can
write to a study):

1. the database file itself (SQLite ``PRAGMA integrity_check``; other back
   ends: that a connection works);
2. rows that point at missing rows (every foreign key of the schema, found by
   walking the table models, so tables added by later revisions are covered);
3. actors whose own label is not an alias (a later import would fail on them),
   events from an actor to itself, impossible weights, events filed under a
   period whose dates do not contain them;
4. ties against the raw events: the ties of every period, relation and pair are
   recomputed with one GROUP BY (value = sum of weights, n_events = count;
   an undirected pair once, smaller actor id first; a pair whose weights sum
   to 0 has no tie) and compared with the stored ones;
5. stored fits against their memberships and blocks: one current fit at most,
   positions within ``1..n_positions``, the isolate flag, memberships for
   exactly the actors present in the period, and block ties, possible ties,
   densities, means and maxima recomputed with
   :func:`tracker.blockmodel.blocks.block_stats` from the period's snapshot.

Each finding is one :class:`Problem` with a one-line ``detail`` (counts and the
first examples) and a one-line ``fix``.  Nothing here writes, except
:func:`repair_ties`, which rebuilds the ties (derived data) from the raw events.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable

import numpy as np
import pandas as pd
from sqlalchemy import and_, case, exists, func, inspect, literal, or_, select, text
from sqlalchemy.engine import Engine

from tracker.store.database import write_transaction
from tracker.store.models import (
    Actor, ActorAlias, Base, Batch, Block, Event, Fit, FitPeriod, Membership, Period, RelationRow, Setting, Tie,
)

__all__ = ["Problem", "check_study", "repair_ties", "REPAIR_TIES_HINT"]

#: What a user runs to rebuild ties from the raw events (see :func:`repair_ties`).
REPAIR_TIES_HINT = "rebuild every tie from the raw events with roletrail check --repair"

#: Relative tolerance when comparing stored sums with recomputed ones
#: (SQL sums of doubles may add in another order).
_RTOL = 1e-9

_EXAMPLES = 3  # examples named in one problem's detail


@dataclass(frozen=True)
class Problem:
    """One finding of :func:`check_study`.

    Attributes
    ----------
    what : str
        Short name of the kind of problem (``"integrity"``, ``"orphans"``,
        ``"ties"``, ``"fit"`` ...).
    detail : str
        One line: what is wrong, how many rows, the first examples.
    fix : str
        One line: what to do about it.
    """

    what: str
    detail: str
    fix: str

    def __str__(self) -> str:
        return f"{self.what}: {self.detail}; fix: {self.fix}"


def check_study(engine: Engine, *, max_fit_periods: int | None = 50) -> list[Problem]:
    """Check a study; an empty list means nothing was found.

    Parameters
    ----------
    engine : sqlalchemy.engine.Engine
        An engine on a study at the head schema revision.
    max_fit_periods : int or None
        Recompute the blocks of at most this many stored fit periods (evenly
        spread over every fit's periods, so the choice is the same each run);
        ``None`` checks them all.  The cheap checks always cover every row.

    Returns
    -------
    list of Problem
    """
    problems = _database(engine)
    if problems:
        return problems  # the other checks would only repeat the damage
    with engine.connect() as conn:
        # One read transaction: every check sees the same state of the study.
        names = set(inspect(conn).get_table_names())
        problems += _orphans(conn, names)
        problems += _actors(conn)
        problems += _events(conn)
        problems += _ties(conn)
        if {"fits", "fit_periods", "memberships", "blocks"} <= names:
            problems += _fits(conn)
    if {"fits", "fit_periods", "memberships", "blocks"} <= names:
        problems += _fit_blocks(engine, max_fit_periods)
    return problems


def repair_ties(engine: Engine) -> int:
    """Rebuild the ties of every period from the raw events, in one transaction.

    Ties are derived data (see :meth:`tracker.store.repository.Store._rebuild_ties`),
    so this loses nothing.  Returns the number of ties stored afterwards.
    """
    from tracker.store.repository import Store

    store = Store(engine)
    with write_transaction(engine) as conn:
        ids = list(conn.execute(select(Period.id)).scalars())
        # Ties of periods that no longer exist cannot be rebuilt: drop them.
        conn.execute(Tie.__table__.delete().where(~exists().where(Period.id == Tie.period_id)))
        store._rebuild_ties(conn, ids)
        return int(conn.execute(select(func.count()).select_from(Tie)).scalar_one())


# ---------------------------------------------------------------------- database
def _database(engine: Engine) -> list[Problem]:
    try:
        with engine.connect() as conn:
            if engine.dialect.name != "sqlite":
                conn.execute(text("SELECT 1"))
                return []
            rows = [r[0] for r in conn.exec_driver_sql("PRAGMA integrity_check").all()]
    except Exception as exc:  # noqa: BLE001 - any failure to read is the finding
        first = (str(getattr(exc, "orig", None) or exc).splitlines() or [type(exc).__name__])[0]
        return [Problem(
            "database", f"the study cannot be read ({first})",
            "check --db (or ROLETRAIL_DB) and that the file is a roletrail study; restore it from a backup if it is damaged",
        )]
    if rows == ["ok"]:
        return []
    shown = " | ".join(rows[:_EXAMPLES]) + (f" (and {len(rows) - _EXAMPLES} more)" if len(rows) > _EXAMPLES else "")
    return [Problem(
        "integrity", f"SQLite reports damage: {shown}",
        "restore the study from a backup, or save what can be read with the sqlite3 tool's .recover command "
        "into a new file and check that one",
    )]


# ---------------------------------------------------------------------- orphans
def _orphans(conn, names: set[str]) -> list[Problem]:
    """Rows whose foreign key names a row that does not exist (every key of the schema)."""
    keys = [
        (table.name, fk.parent.name, fk.column.table.name, fk.column.name)
        for table in Base.metadata.sorted_tables if table.name in names
        for fk in sorted(table.foreign_keys, key=lambda k: k.parent.name) if fk.column.table.name in names
    ]
    if not keys:
        return []
    # One statement for every key (identifiers come from the models, quoted by
    # the dialect): a study with many tables is checked in one pass.
    q = conn.dialect.identifier_preparer.quote
    parts = [
        f"SELECT {i} AS k, COUNT(*) AS n, MIN(c.{q(col)}) AS first FROM {q(child)} c "
        f"WHERE c.{q(col)} IS NOT NULL AND NOT EXISTS (SELECT 1 FROM {q(parent)} p WHERE p.{q(pcol)} = c.{q(col)})"
        for i, (child, col, parent, pcol) in enumerate(keys)
    ]
    problems = []
    for i, count, first in conn.execute(text(" UNION ALL ".join(parts))).all():
        if not count:
            continue
        child, col, parent, pcol = keys[i]
        problems.append(Problem(
            "orphans",
            f"{count} rows of {child} point at missing rows of {parent} ({col} = {first} and others)" if count > 1 else
            f"1 row of {child} points at a missing row of {parent} ({col} = {first})",
            f"restore the missing {parent} rows from a backup, or delete the orphans: "
            f"DELETE FROM {child} WHERE {col} NOT IN (SELECT {pcol} FROM {parent})"
            + ("; then " + REPAIR_TIES_HINT if child == "events" else ""),
        ))
    return problems


# ---------------------------------------------------------------------- actors and events
def _actors(conn) -> list[Problem]:
    own = select(ActorAlias.actor_id).where(ActorAlias.alias == Actor.label).correlate(Actor).scalar_subquery()
    rows = conn.execute(select(Actor.id, Actor.label, own.label("owner")).where(or_(own.is_(None), own != Actor.id))).all()
    problems = []
    unnamed = [r for r in rows if r.owner is None]
    taken = [r for r in rows if r.owner is not None]
    if unnamed:
        problems.append(Problem(
            "actors",
            f"{len(unnamed)} actors have no alias row under their own label ({_names(r.label for r in unnamed)}); "
            "a later import naming them would fail",
            "add the rows: INSERT INTO actor_aliases (alias, actor_id) SELECT label, id FROM actors "
            "WHERE label NOT IN (SELECT alias FROM actor_aliases)",
        ))
    if taken:
        r = taken[0]
        problems.append(Problem(
            "actors",
            f"{len(taken)} actors' labels are aliases of other actors (label {r.label!r} of actor {r.id} "
            f"names actor {r.owner})",
            "merge them: roletrail alias LABEL OTHER-ACTOR, or point the alias back at its actor",
        ))
    return problems


def _events(conn) -> list[Problem]:
    problems = []
    selfies = conn.execute(select(func.count()).select_from(Event).where(Event.source_id == Event.target_id)).scalar_one()
    if selfies:
        problems.append(Problem(
            "events", f"{selfies} events go from an actor to itself (imports drop such rows)",
            "delete them: DELETE FROM events WHERE source_id = target_id; then " + REPAIR_TIES_HINT,
        ))
    # Each batch stored as many events as it says it loaded (rows of a file count 1
    # each; a folder import's rows count the events they sum, events.n_events).
    counted = (
        select(Batch.id, Batch.rows_loaded, func.coalesce(func.sum(Event.n_events), 0))
        .outerjoin(Event, Event.batch_id == Batch.id).where(Batch.kind == "events").group_by(Batch.id, Batch.rows_loaded)
    )
    short = [(b, loaded, n) for b, loaded, n in conn.execute(counted) if int(n) != int(loaded)]
    if short:
        shown = ", ".join(f"batch {b}: {n} of {loaded}" for b, loaded, n in short[:3])
        problems.append(Problem(
            "events", f"{len(short)} imports hold another number of events than they loaded ({shown})",
            "re-import those files with --replace",
        ))
    bad_weight = or_(Event.weight.is_(None), Event.weight < 0, Event.weight > 1e308, Event.weight < -1e308)
    nonpositive_count = or_(Event.n_events.is_(None), Event.n_events < 1)
    count_bad = conn.execute(select(func.count()).select_from(Event).where(nonpositive_count)).scalar_one()
    if count_bad:
        problems.append(Problem(
            "events", f"{count_bad} stored events stand for fewer than one event (n_events < 1)",
            "re-import the batches that hold them with --replace",
        ))
    count, first = conn.execute(select(func.count(), func.min(Event.id)).where(bad_weight)).one()
    if count:
        problems.append(Problem(
            "events", f"{count} events have a missing, negative or infinite weight (first: event id {first})",
            "correct the source file and re-import it with --replace",
        ))
    # Dated periods hold the events whose dates fall within them; a bare-year
    # date stands for its first day (year and window periods only).
    day = case((func.length(Event.occurred) == 4, Event.occurred + literal("-01-01")), else_=Event.occurred)
    outside = and_(
        Event.occurred.is_not(None), Period.start.is_not(None), Period.end.is_not(None),
        or_(day < Period.start, day > Period.end),
    )
    rows = conn.execute(
        select(Event.id, Event.occurred, Period.label).join(Period, Period.id == Event.period_id).where(outside).limit(_EXAMPLES)
    ).all()
    if rows:
        count = conn.execute(
            select(func.count()).select_from(Event).join(Period, Period.id == Event.period_id).where(outside)
        ).scalar_one()
        shown = ", ".join(f"event {r.id} of {r.occurred} in period {r.label}" for r in rows)
        scheme = conn.execute(select(Setting.value).where(Setting.key == "period_scheme")).scalar_one_or_none() or "year"
        problems.append(Problem(
            "events", f"{count} events are filed under a period that does not contain their date ({shown})",
            f"re-cut the periods: roletrail recut --period {scheme.split('@')[0]}",
        ))
    return problems


# ---------------------------------------------------------------------- ties
def _ties(conn) -> list[Problem]:
    keep_order = or_(RelationRow.directed.is_(True), Event.source_id < Event.target_id)
    src = case((keep_order, Event.source_id), else_=Event.target_id)
    dst = case((keep_order, Event.target_id), else_=Event.source_id)
    key = ["period_id", "relation_id", "source_id", "target_id"]
    expected = _frame(
        conn.execute(
            select(Event.period_id, Event.relation_id, src, dst, func.sum(Event.weight), func.sum(Event.n_events))
            .join(RelationRow, RelationRow.id == Event.relation_id)
            .where(Event.source_id != Event.target_id)
            .group_by(Event.period_id, Event.relation_id, src, dst)
        ),
        [*key, "value", "n_events"],
    )
    expected = expected[expected["value"].astype(float) > 0]
    stored = _frame(
        conn.execute(
            select(Tie.period_id, Tie.relation_id, Tie.source_id, Tie.target_id, Tie.value, Tie.n_events, RelationRow.directed)
            .outerjoin(RelationRow, RelationRow.id == Tie.relation_id)
        ),
        [*key, "value", "n_events", "directed"],
    )
    problems = []
    labels = _Labels(conn)

    def example(frame: pd.DataFrame) -> str:
        return _examples(labels.tie(r) for r in frame.head(_EXAMPLES).itertuples(index=False))

    value = stored["value"].astype(float)
    nonpositive = stored[~(value > 0)]
    if len(nonpositive):
        problems.append(Problem(
            "ties", f"{len(nonpositive)} ties have a value of 0 or less, or none ({example(nonpositive)}); "
            "a pair whose weights sum to 0 has no tie", REPAIR_TIES_HINT,
        ))
    flipped = stored[(stored["directed"] == False) & (stored["source_id"] > stored["target_id"])]  # noqa: E712
    if len(flipped):
        problems.append(Problem(
            "ties", f"{len(flipped)} ties of undirected relations are stored with the larger actor id first "
            f"({example(flipped)}); each pair is stored once, smaller id first", REPAIR_TIES_HINT,
        ))
    selfies = stored[stored["source_id"] == stored["target_id"]]
    if len(selfies):
        problems.append(Problem(
            "ties", f"{len(selfies)} ties go from an actor to itself ({example(selfies)})", REPAIR_TIES_HINT,
        ))
    both = expected.merge(stored.drop(columns="directed"), on=key, how="outer", suffixes=("", "_stored"), indicator=True)
    missing = both[both["_merge"] == "left_only"]
    if len(missing):
        problems.append(Problem(
            "ties", f"{len(missing)} pairs have events but no tie ({example(missing)})", REPAIR_TIES_HINT,
        ))
    extra = both[(both["_merge"] == "right_only") & (both["value_stored"].astype(float) > 0)]
    extra = extra[~extra.set_index(key).index.isin(flipped.set_index(key).index)] if len(flipped) else extra
    if len(extra):
        problems.append(Problem(
            "ties", f"{len(extra)} ties have no events behind them ({example(extra)})", REPAIR_TIES_HINT,
        ))
    matched = both[both["_merge"] == "both"]
    a, b = matched["value"].astype(float).to_numpy(), matched["value_stored"].astype(float).to_numpy()
    off = ~np.isclose(a, b, rtol=_RTOL, atol=0.0) | (matched["n_events"].to_numpy() != matched["n_events_stored"].to_numpy())
    if off.any():
        wrong = matched[off]
        first = wrong.iloc[0]
        problems.append(Problem(
            "ties", f"{int(off.sum())} ties disagree with their events ({example(wrong)}: stored value "
            f"{first['value_stored']:g} from {int(first['n_events_stored'])} events, the events give "
            f"{first['value']:g} from {int(first['n_events'])})", REPAIR_TIES_HINT,
        ))
    return problems


# ---------------------------------------------------------------------- fits
def _fits(conn) -> list[Problem]:
    problems = []
    current = conn.execute(select(Fit.id).where(Fit.current.is_(True)).order_by(Fit.id)).scalars().all()
    if len(current) > 1:
        problems.append(Problem(
            "fit", f"{len(current)} fits are marked current (fits {', '.join(map(str, current))})",
            f"choose one: roletrail use-fit {current[-1]}",
        ))
    fp = FitPeriod
    bad_fp = conn.execute(
        select(fp.fit_id, Period.label).join(Period, Period.id == fp.period_id).where(
            or_(fp.n_positions < 1, and_(fp.isolates_position.is_not(None),
                                          or_(fp.isolates_position < 1, fp.isolates_position > fp.n_positions)))
        )
    ).all()
    if bad_fp:
        problems.append(Problem(
            "fit", f"{len(bad_fp)} fit periods have an impossible number of positions or isolates' position "
            f"({_examples(f'fit {r.fit_id}, period {r.label}' for r in bad_fp)})", _REFIT,
        ))
    for model, what, lo, hi in (
        (Membership, "memberships", Membership.position, Membership.position),
        (Block, "block rows", Block.from_position, Block.to_position),
    ):
        joined = select(model.fit_id, Period.label).join(
            fp, and_(fp.fit_id == model.fit_id, fp.period_id == model.period_id)
        ).join(Period, Period.id == model.period_id)
        rows = conn.execute(
            joined.where(or_(lo < 1, lo > fp.n_positions, hi < 1, hi > fp.n_positions)).distinct()
        ).all()
        if rows:
            problems.append(Problem(
                "fit", f"{what} of {len(rows)} fit periods use positions outside 1..positions "
                f"({_examples(f'fit {r.fit_id}, period {r.label}' for r in rows)})", _REFIT,
            ))
        no_result = ~exists().where(and_(fp.fit_id == model.fit_id, fp.period_id == model.period_id))
        count = conn.execute(select(func.count()).select_from(model).where(no_result)).scalar_one()
        if count:
            problems.append(Problem(
                "fit", f"{count} {what} belong to fit periods that have no result row",
                f"delete them: DELETE FROM {model.__tablename__} WHERE NOT EXISTS (SELECT 1 FROM fit_periods f "
                f"WHERE f.fit_id = {model.__tablename__}.fit_id AND f.period_id = {model.__tablename__}.period_id)",
            ))
    flag = case((and_(fp.isolates_position.is_not(None), Membership.position == fp.isolates_position), True), else_=False)
    rows = conn.execute(
        select(Membership.fit_id, Period.label).join(fp, and_(fp.fit_id == Membership.fit_id, fp.period_id == Membership.period_id))
        .join(Period, Period.id == Membership.period_id).where(Membership.isolate != flag).distinct()
    ).all()
    if rows:
        problems.append(Problem(
            "fit", f"the isolate flags of {len(rows)} fit periods disagree with the isolates' position "
            f"({_examples(f'fit {r.fit_id}, period {r.label}' for r in rows)})", _REFIT,
        ))
    return problems


_REFIT = "fit those periods again with the same settings (roletrail fits shows them; roletrail fit --periods ...)"


def _fit_blocks(engine: Engine, max_fit_periods: int | None) -> list[Problem]:
    """Memberships against presence, and blocks recomputed from the snapshot."""
    from tracker.blockmodel.blocks import block_stats
    from tracker.blockmodel.partition import Partition
    from tracker.store.repository import Store

    store = Store(engine)
    with engine.connect() as conn:
        todo = conn.execute(
            select(FitPeriod.fit_id, FitPeriod.period_id, Period.label, FitPeriod.n_positions)
            .join(Period, Period.id == FitPeriod.period_id).order_by(FitPeriod.fit_id, Period.sort_key)
        ).all()
    if max_fit_periods is not None and len(todo) > max_fit_periods:
        pick = np.unique(np.linspace(0, len(todo) - 1, max(max_fit_periods, 1)).round().astype(int))
        todo = [todo[i] for i in pick]
    findings: dict[str, list[str]] = {"unreadable": [], "absent": [], "unplaced": [], "blocks": [], "block_rows": []}
    for fit_id, period_id, label, n_positions in todo:
        where = f"fit {fit_id}, period {label}"
        with engine.connect() as conn:
            members = dict(conn.execute(
                select(Actor.label, Membership.position).join(Actor, Actor.id == Membership.actor_id)
                .where(Membership.fit_id == fit_id, Membership.period_id == period_id)
            ).all())
            blocks = pd.DataFrame(conn.execute(
                select(RelationRow.name, Block.from_position, Block.to_position, Block.ties, Block.possible,
                       Block.density, Block.mean_value, Block.max_value)
                .join(RelationRow, RelationRow.id == Block.relation_id)
                .where(Block.fit_id == fit_id, Block.period_id == period_id)
            ).all(), columns=["relation", "k", "l", "ties", "possible", "density", "mean_value", "max_value"])
        relations = sorted(blocks["relation"].unique())
        try:
            snap = store.snapshot(label, relations or None)
        except Exception as exc:  # noqa: BLE001 - damage reported above (orphans, ties) breaks snapshots
            findings["unreadable"].append(f"{where}: {type(exc).__name__}")
            continue
        present = set(snap.actors)
        unplaced = [a for a in snap.actors if a not in members]
        absent = [a for a in members if a not in present]
        if unplaced:
            findings["unplaced"].append(f"{where}: {len(unplaced)} actors, first {unplaced[0]!r}")
        if absent:
            findings["absent"].append(f"{where}: {len(absent)} actors, first {absent[0]!r}")
        if unplaced or not len(blocks):
            continue
        if len(blocks) != len(relations) * n_positions * n_positions:
            findings["block_rows"].append(f"{where}: {len(blocks)} rows for {len(relations)} relations and {n_positions} positions")
            continue
        labels = np.array([members[a] - 1 for a in snap.actors], dtype=np.int64)
        if labels.size and (labels.min() < 0 or labels.max() >= n_positions):
            continue  # reported by _fits
        stats = block_stats(snap.matrices, snap.directed, Partition(labels, int(n_positions)))
        blocks = blocks.sort_values(["relation", "k", "l"])
        order = {name: r for r, name in enumerate(r.name for r in snap.relations)}
        r_idx = blocks["relation"].map(order).to_numpy()
        k_idx, l_idx = blocks["k"].to_numpy() - 1, blocks["l"].to_numpy() - 1
        want = {
            "ties": stats.ties[r_idx, k_idx, l_idx], "possible": stats.possible[r_idx, k_idx, l_idx],
            "density": stats.density[r_idx, k_idx, l_idx], "mean_value": stats.mean_value[r_idx, k_idx, l_idx],
            "max_value": stats.maximum[r_idx, k_idx, l_idx],
        }
        for column, values in want.items():
            got = blocks[column].astype(float).to_numpy()
            bad = ~np.isclose(got, values.astype(float), rtol=_RTOL, atol=1e-12)
            if bad.any():
                i = int(bad.argmax())
                findings["blocks"].append(
                    f"{where}, {blocks['relation'].iloc[i]} block {k_idx[i] + 1}->{l_idx[i] + 1}: "
                    f"{column} stored {got[i]:g}, recomputed {values[i]:g}"
                )
                break
    problems = []
    texts = {
        "unreadable": ("fitted periods cannot be read as networks", "repair the problems listed before this one first"),
        "unplaced": ("actors present in fitted periods have no position (data imported after the fit?)", _REFIT),
        "absent": ("fitted periods place actors that are not present in them", _REFIT),
        "block_rows": ("fitted periods have a block table of the wrong size", _REFIT),
        "blocks": ("fitted periods have blocks that do not match their memberships and ties", _REFIT),
    }
    for key, found in findings.items():
        if found:
            what, fix = texts[key]
            problems.append(Problem("fit", f"{len(found)} {what}: {_examples(found)}", fix))
    return problems


# ---------------------------------------------------------------------- helpers
class _Labels:
    """Actor, relation and period labels for messages, read once."""

    def __init__(self, conn) -> None:
        self.actors = dict(conn.execute(select(Actor.id, Actor.label)).all())
        self.relations = dict(conn.execute(select(RelationRow.id, RelationRow.name)).all())
        self.periods = dict(conn.execute(select(Period.id, Period.label)).all())

    def tie(self, row) -> str:
        period = self.periods.get(row.period_id, f"#{row.period_id}")
        relation = self.relations.get(row.relation_id, f"#{row.relation_id}")
        source = self.actors.get(row.source_id, f"#{row.source_id}")
        target = self.actors.get(row.target_id, f"#{row.target_id}")
        return f"{period} {relation} {source!r}->{target!r}"


def _frame(result, columns: list[str]) -> pd.DataFrame:
    """A query result as a frame (rows turned into plain tuples first: much faster for large results)."""
    rows = [tuple(r) for r in result]
    if not rows:  # typed, so that merging with a non-empty frame works
        return pd.DataFrame({c: pd.Series(dtype="int64") for c in columns})
    return pd.DataFrame(rows, columns=columns)


def _names(labels: Iterable[str]) -> str:
    return _examples(repr(label) for label in labels)


def _examples(items: Iterable[str]) -> str:
    items = list(items)
    shown = "; ".join(str(i) for i in items[:_EXAMPLES])
    return " ".join((shown + (f"; and {len(items) - _EXAMPLES} more" if len(items) > _EXAMPLES else "")).split())
