"""Every query roletrail makes: the one place that speaks SQL.

The :class:`Store` wraps an SQLAlchemy engine.  Each method that writes runs in
one transaction, so a failure (bad row, crash, concurrent writer) leaves the
study as it was.  Methods return plain Python objects, numpy arrays, pandas
frames or :class:`tracker.snapshot.Snapshot` objects; no SQL escapes this module.
"""

from __future__ import annotations

import itertools
import json
from contextlib import contextmanager
from datetime import datetime, timezone
from typing import Iterable, Iterator, Sequence

import numpy as np
import pandas as pd
from sqlalchemy import and_, case, delete, func, insert, literal, or_, select, update
from sqlalchemy.engine import Connection, Engine
from sqlalchemy.ext.compiler import compiles
from sqlalchemy.sql.elements import ColumnElement
from sqlalchemy.sql.visitors import InternalTraversal

from tracker.errors import StoreError, UsageError
from tracker.ingest.periods import PeriodScheme, column_sort_keys, parse_scheme_name
from tracker.snapshot import Relation, Snapshot, build_snapshot
from tracker.store.database import write_transaction
from tracker.store.models import (
    Actor, ActorAlias, AlignmentRow, Batch, Block, Event, Fit, FitPeriod, Membership, Move, Period, RelationRow,
    Setting, Tie, Track, TrackLink, TrackPosition,
)

__all__ = ["Store", "ImportReport"]

_IN_CHUNK = 500  # bound on parameters in one IN (...) list


def _now() -> datetime:
    return datetime.now(timezone.utc).replace(tzinfo=None, microsecond=0)


class ImportReport(dict):
    """What an import did: batch id, rows read and loaded, self-ties dropped, new actors..."""


class Store:
    """A study database.

    Parameters
    ----------
    engine : sqlalchemy.engine.Engine
        An engine whose schema is at the head revision (see
        :func:`tracker.store.database.upgrade`).
    """

    def __init__(self, engine: Engine) -> None:
        self.engine = engine

    @contextmanager
    def _write(self) -> Iterator[Connection]:
        """One write transaction, after any other process's write to the study (see ``lock_for_writing``)."""
        with write_transaction(self.engine) as conn:
            yield conn

    # ------------------------------------------------------------------ settings
    def setting(self, key: str, conn: Connection | None = None) -> str | None:
        stmt = select(Setting.value).where(Setting.key == key)
        if conn is not None:
            return conn.execute(stmt).scalar_one_or_none()
        with self.engine.connect() as c:
            return c.execute(stmt).scalar_one_or_none()

    def _set_setting(self, conn: Connection, key: str, value: str) -> None:
        if conn.execute(select(Setting.key).where(Setting.key == key)).first():
            conn.execute(update(Setting).where(Setting.key == key).values(value=value))
        else:
            conn.execute(insert(Setting).values(key=key, value=value))

    def period_scheme(self, conn: Connection | None = None) -> PeriodScheme | None:
        """The study's period scheme, or None before the first import."""
        name = self.setting("period_scheme", conn)
        return None if name is None else parse_scheme_name(name)

    # ------------------------------------------------------------------ imports
    def import_events(
        self,
        *,
        file_name: str,
        content_hash: str,
        mapping: dict,
        scheme: PeriodScheme,
        directed: bool,
        chunks: Iterable[tuple[pd.DataFrame, int]],
        replace: bool = False,
    ) -> ImportReport:
        """Load validated event chunks as one batch, in one transaction.

        ``chunks`` yields ``(events, self_ties_dropped)`` as made by
        :func:`tracker.ingest.events.validate_events`; an exception raised while
        iterating rolls everything back.  Ties of every period the batch touches
        are rebuilt from the raw events.
        """
        with self._write() as conn:
            self._check_scheme(conn, scheme)
            earlier = self._earlier_batches(conn, "events", content_hash, file_name, replace)
            touched: set[int] = set()
            if earlier:
                touched |= self._batch_periods(conn, earlier)
                conn.execute(delete(Event).where(Event.batch_id.in_(earlier)))
                conn.execute(delete(Batch).where(Batch.id.in_(earlier)))
            batch_id = conn.execute(
                insert(Batch).values(
                    kind="events", file_name=file_name, content_hash=content_hash,
                    mapping=json.dumps(mapping, sort_keys=True), rows_read=0, rows_loaded=0,
                    self_ties_dropped=0, imported_at=_now(),
                )
            ).inserted_primary_key[0]
            aliases = self._aliases(conn)
            periods = {label: pid for pid, label in conn.execute(select(Period.id, Period.label))}
            period_keys = dict(conn.execute(select(Period.label, Period.sort_key)).all())
            relations = {name: (rid, d) for rid, name, d in conn.execute(select(RelationRow.id, RelationRow.name, RelationRow.directed))}
            actors_before = len(set(aliases.values()))
            loaded = dropped = read = 0
            for events, self_ties in chunks:
                dropped += self_ties
                read += len(events) + self_ties
                if events.empty:
                    continue
                source = self._resolve_actors(conn, aliases, events["source"])
                target = self._resolve_actors(conn, aliases, events["target"])
                relation = self._resolve_relations(conn, relations, events["relation"], directed)
                period = self._resolve_periods(conn, periods, period_keys, events, scheme)
                touched |= set(np.unique(period).tolist())
                self._insert_events(conn, batch_id, events, source, target, relation, period)
                loaded += len(events)
            if read == 0:
                raise StoreError(f"{file_name}: has a header but no data rows; nothing was imported")
            conn.execute(
                update(Batch).where(Batch.id == batch_id).values(
                    rows_read=read, rows_loaded=loaded, self_ties_dropped=dropped
                )
            )
            self._rebuild_ties(conn, touched)
            self._drop_empty_periods(conn)
            return ImportReport(
                batch=batch_id, file=file_name, rows_read=read, rows_loaded=loaded,
                self_ties_dropped=dropped, new_actors=len(set(aliases.values())) - actors_before,
                periods=len(touched), replaced=list(earlier),
            )

    def import_roster(
        self, *, file_name: str, content_hash: str, mapping: dict, roster: pd.DataFrame, replace: bool = False
    ) -> ImportReport:
        """Load a validated roster (see :func:`tracker.ingest.roster.validate_roster`)."""
        with self._write() as conn:
            earlier = self._earlier_batches(conn, "roster", content_hash, file_name, replace)
            if earlier:
                conn.execute(delete(Batch).where(Batch.id.in_(earlier)))
            batch_id = conn.execute(
                insert(Batch).values(
                    kind="roster", file_name=file_name, content_hash=content_hash,
                    mapping=json.dumps(mapping, sort_keys=True), rows_read=len(roster),
                    rows_loaded=len(roster), self_ties_dropped=0, imported_at=_now(),
                )
            ).inserted_primary_key[0]
            aliases = self._aliases(conn)
            before = len(set(aliases.values()))
            ids = self._resolve_actors(conn, aliases, roster["actor"])
            attrs = roster["attributes"] if "attributes" in roster else pd.Series([None] * len(roster))
            conn.execute(
                update(Actor).where(Actor.id == _bind("aid")).values(
                    in_roster=True, first_period=_bind("first"), last_period=_bind("last"), attributes=_bind("attrs")
                ),
                [
                    {"aid": int(a), "first": f, "last": l, "attrs": t}
                    for a, f, l, t in zip(ids, roster["first"], roster["last"], attrs)
                ],
            )
            return ImportReport(batch=batch_id, file=file_name, rows_read=len(roster), rows_loaded=len(roster),
                                new_actors=len(set(aliases.values())) - before, replaced=list(earlier))

    def _check_scheme(self, conn: Connection, scheme: PeriodScheme) -> None:
        current = self.period_scheme(conn)
        if current is None:
            self._set_setting(conn, "period_scheme", scheme.name)
        elif current.name != scheme.name:
            how = "--period-column" if current.kind == "column" else f"--period {current.name.split('@')[0]}"
            raise UsageError(
                f"this study cuts periods by {current.name}, not {scheme.name}; import with {how}, "
                "or re-cut the study's periods first (roletrail recut)"
            )

    def _earlier_batches(self, conn, kind: str, content_hash: str, file_name: str, replace: bool) -> list[int]:
        same = conn.execute(
            select(Batch.id, Batch.file_name, Batch.imported_at).where(Batch.kind == kind, Batch.content_hash == content_hash)
        ).all()
        if same and not replace:
            b = same[0]
            raise StoreError(
                f"{file_name}: the same content was already imported as batch {b.id} ({b.file_name}, {b.imported_at:%Y-%m-%d %H:%M}); "
                "nothing was imported. Use --replace to import it again in place of that batch"
            )
        if same:
            return [b.id for b in same]
        if replace:
            named = conn.execute(
                select(Batch.id).where(Batch.kind == kind, Batch.file_name == file_name).order_by(Batch.id.desc()).limit(1)
            ).scalars().all()
            return list(named)
        return []

    def _batch_periods(self, conn, batch_ids: Sequence[int]) -> set[int]:
        return set(conn.execute(select(Event.period_id).where(Event.batch_id.in_(batch_ids)).distinct()).scalars())

    def _aliases(self, conn) -> dict[str, int]:
        return dict(conn.execute(select(ActorAlias.alias, ActorAlias.actor_id)).all())

    def _resolve_actors(self, conn, aliases: dict[str, int], labels: pd.Series) -> np.ndarray:
        new = [label for label in pd.unique(labels) if label not in aliases]
        for start in range(0, len(new), _IN_CHUNK):
            part = new[start : start + _IN_CHUNK]
            conn.execute(insert(Actor), [{"label": label, "in_roster": False} for label in part])
            ids = dict(conn.execute(select(Actor.label, Actor.id).where(Actor.label.in_(part))).all())
            conn.execute(insert(ActorAlias), [{"alias": label, "actor_id": ids[label]} for label in part])
            aliases.update(ids)
        return labels.map(aliases).to_numpy(dtype=np.int64)

    def _resolve_relations(self, conn, relations: dict, names: pd.Series, directed: bool) -> np.ndarray:
        for name in pd.unique(names):
            if name in relations:
                if bool(relations[name][1]) != directed:
                    stored = "directed" if relations[name][1] else "undirected"
                    raise UsageError(
                        f"relation {name!r} is {stored} in this study; "
                        + ("drop --undirected" if stored == "directed" else "add --undirected")
                        + " or import under another relation name"
                    )
                continue
            rid = conn.execute(insert(RelationRow).values(name=name, directed=directed)).inserted_primary_key[0]
            relations[name] = (rid, directed)
        return names.map({k: v[0] for k, v in relations.items()}).to_numpy(dtype=np.int64)

    def _resolve_periods(self, conn, periods: dict, keys: dict, events: pd.DataFrame, scheme: PeriodScheme) -> np.ndarray:
        found = events.drop_duplicates("period")
        new = found[~found["period"].isin(periods)]
        if len(new):
            if scheme.dated:
                rows = [
                    {"label": r.period, "sort_key": int(r.sort_key), "start": r.start, "end": r.end}
                    for r in new.itertuples(index=False)
                ]
            else:
                sort = column_sort_keys(new["period"], keys)
                rows = [{"label": label, "sort_key": sort[label], "start": None, "end": None} for label in new["period"]]
            conn.execute(insert(Period), rows)
            for row in rows:
                keys[row["label"]] = row["sort_key"]
            labels = [r["label"] for r in rows]
            for start in range(0, len(labels), _IN_CHUNK):
                part = labels[start : start + _IN_CHUNK]
                periods.update(dict(conn.execute(select(Period.label, Period.id).where(Period.label.in_(part))).all()))
        return events["period"].map(periods).to_numpy(dtype=np.int64)

    def _insert_events(self, conn, batch_id, events, source, target, relation, period) -> None:
        occurred = events["occurred"].to_numpy(dtype=object)
        columns = (
            np.full(len(events), batch_id).tolist(),
            events["row"].astype(np.int64).tolist(),
            source.tolist(),
            target.tolist(),
            relation.tolist(),
            [None if o is None else str(o) for o in occurred],
            period.tolist(),
            events["weight"].astype(float).tolist(),
        )
        if conn.dialect.name == "sqlite":
            # The driver's executemany on tuples is several times faster than
            # building a dict per row; the statement is fixed and parameterised.
            conn.exec_driver_sql(
                "INSERT INTO events (batch_id, row, source_id, target_id, relation_id, occurred, period_id, weight) "
                "VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
                list(zip(*columns)),
            )
        elif conn.dialect.name == "postgresql":
            _copy_rows(conn, "events", _EVENT_COLUMNS, zip(*columns))
        else:
            conn.execute(insert(Event), [dict(zip(_EVENT_COLUMNS, values)) for values in zip(*columns)])

    def _rebuild_ties(self, conn, period_ids: Iterable[int]) -> None:
        """Recompute the ties of some periods from their raw events.

        value = sum of weights, n_events = number of events; undirected
        relations store each unordered pair once (smaller actor id first).
        A pair whose weights sum to 0 is observed but has no tie.
        """
        ids = sorted(period_ids)
        for start in range(0, len(ids), _IN_CHUNK):
            part = ids[start : start + _IN_CHUNK]
            conn.execute(delete(Tie).where(Tie.period_id.in_(part)))
            keep_order = or_(RelationRow.directed.is_(True), Event.source_id < Event.target_id)
            src = case((keep_order, Event.source_id), else_=Event.target_id)
            dst = case((keep_order, Event.target_id), else_=Event.source_id)
            grouped = (
                select(Event.period_id, Event.relation_id, src, dst, func.sum(Event.weight), func.count())
                .join(RelationRow, RelationRow.id == Event.relation_id)
                .where(Event.period_id.in_(part))
                .group_by(Event.period_id, Event.relation_id, src, dst)
                .having(func.sum(Event.weight) > 0)
            )
            conn.execute(
                insert(Tie).from_select(
                    ["period_id", "relation_id", "source_id", "target_id", "value", "n_events"], grouped
                )
            )

    def _drop_empty_periods(self, conn) -> None:
        used = select(Event.period_id).distinct()
        conn.execute(delete(Period).where(Period.id.not_in(used)))

    # ------------------------------------------------------------------ reading
    def periods(self) -> pd.DataFrame:
        """Periods in time order: columns id, label, sort_key, start, end."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Period.id, Period.label, Period.sort_key, Period.start, Period.end).order_by(Period.sort_key, _code_points(Period.label))
            ).all()
        return pd.DataFrame(rows, columns=["id", "label", "sort_key", "start", "end"])

    def period_labels(self) -> list[str]:
        return self.periods()["label"].tolist()

    def relations(self) -> list[Relation]:
        with self.engine.connect() as conn:
            rows = conn.execute(select(RelationRow.name, RelationRow.directed).order_by(_code_points(RelationRow.name))).all()
        return [Relation(name, bool(d)) for name, d in rows]

    def batches(self) -> pd.DataFrame:
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Batch.id, Batch.kind, Batch.file_name, Batch.rows_read, Batch.rows_loaded,
                       Batch.self_ties_dropped, Batch.imported_at, Batch.content_hash).order_by(Batch.id)
            ).all()
        return pd.DataFrame(rows, columns=["batch", "kind", "file", "rows_read", "rows_loaded", "self_ties_dropped", "imported_at", "sha256"])

    def counts(self) -> dict[str, int]:
        """Row counts of the main tables (for summaries and checks)."""
        with self.engine.connect() as conn:
            return {
                name: conn.execute(select(func.count()).select_from(model)).scalar_one()
                for name, model in (("actors", Actor), ("relations", RelationRow), ("periods", Period),
                                    ("events", Event), ("ties", Tie), ("batches", Batch))
            }

    def snapshot(self, period: str, relations: Sequence[str] | None = None) -> Snapshot:
        """The ties of one period as sparse matrices over the actors present.

        Presence: an actor is present in a period when it takes part in any
        event of that period (any relation), or when a roster says it exists
        then.  Actors are ordered by label.
        """
        with self.engine.connect() as conn:
            return self._snapshot(conn, period, relations)

    def snapshots(self, periods: Sequence[str] | None = None, relations: Sequence[str] | None = None) -> Iterator[Snapshot]:
        """Snapshots of several periods (all by default), in time order, read in one transaction.

        Actors, periods and relations are read once (not once per period), so
        a study of many periods costs one query per period for its ties (and
        one for its events of weight 0, when the study has any).
        """
        labels = self.period_labels() if periods is None else list(periods)
        with self.engine.connect() as conn:
            order = _driver_rows(conn, select(Actor.id, Actor.label).order_by(_code_points(Actor.label)))
            order_ids = np.fromiter((r[0] for r in order), dtype=np.int64, count=len(order))
            rank = np.full(int(order_ids.max(initial=0)) + 1, -1, dtype=np.int64)
            rank[order_ids] = np.arange(len(order_ids))  # actor id -> place in label order
            context = {
                "order": (order_ids, np.array([r[1] for r in order], dtype=object), rank),
                "periods": {r.label: r for r in conn.execute(select(Period.label, Period.id, Period.sort_key, Period.start, Period.end))},
                "relations": conn.execute(select(RelationRow.id, RelationRow.name, RelationRow.directed)
                                          .order_by(_code_points(RelationRow.name))).all(),
                "roster": conn.execute(select(Actor.id).where(Actor.in_roster.is_(True)).limit(1)).first() is not None,
                "zero": conn.execute(select(Event.id).where(Event.weight <= 0).limit(1)).first() is not None,
            }
            for label in labels:
                yield self._snapshot(conn, label, relations, context)

    def _snapshot(self, conn, period: str, relations: Sequence[str] | None, context: dict | None = None) -> Snapshot:
        """One period's snapshot; ``context`` holds what :meth:`snapshots` read once for every period."""
        if context is not None and period in context["periods"]:
            prow = context["periods"][period]
        else:
            prow = conn.execute(
                select(Period.label, Period.id, Period.sort_key, Period.start, Period.end).where(Period.label == period)
            ).first()
        if prow is None:
            known = [p for p in conn.execute(select(Period.label).order_by(Period.sort_key)).scalars()]
            shown = ", ".join(known[:8]) + (" ..." if len(known) > 8 else "")
            raise UsageError(f"no period {period!r} in this study; the periods are {shown or 'none (import data first)'}")
        rel_rows = context["relations"] if context is not None else conn.execute(
            select(RelationRow.id, RelationRow.name, RelationRow.directed).order_by(_code_points(RelationRow.name))
        ).all()
        if relations is not None:
            by_name = {r.name: r for r in rel_rows}
            missing = [r for r in relations if r not in by_name]
            if missing:
                raise UsageError(f"no relation {missing[0]!r} in this study; the relations are {', '.join(by_name) or 'none'}")
            rel_rows = [by_name[r] for r in relations]
        rows = _driver_rows(conn, select(Tie.relation_id, Tie.source_id, Tie.target_id, Tie.value).where(Tie.period_id == prow.id))
        ties = np.fromiter(itertools.chain.from_iterable(rows), dtype=np.float64, count=4 * len(rows)).reshape(-1, 4)
        ends = ties[:, 1:3].astype(np.int64)
        actor_ids, labels, index = self._present(conn, prow, ends, context)
        relation = ties[:, 0].astype(np.int64)
        triples = []
        for r in rel_rows:
            part = relation == r.id
            triples.append((index[part, 0], index[part, 1], ties[part, 3]))
        rels = [Relation(r.name, bool(r.directed)) for r in rel_rows]
        return build_snapshot(period, labels, rels, triples)

    def _present(self, conn, prow, tie_ends: np.ndarray, context: dict | None = None) -> tuple[np.ndarray, list[str], np.ndarray]:
        """Ids and labels of the actors present in a period, in label order, and the places of ``tie_ends`` among them.

        The actors of the period's events are the ends of its ties plus the
        ends of its events of weight <= 0: weights are not negative, so an
        event of positive weight makes its pair's sum positive, and every
        pair with a positive sum has a tie (see :meth:`_rebuild_ties`).  This
        reads the few non-positive events instead of every event.
        """
        zero = _driver_rows(
            conn, select(Event.source_id, Event.target_id).where(Event.period_id == prow.id, Event.weight <= 0)
        ) if context is None or context["zero"] else []
        roster = self._roster_present(conn, prow) if context is None or context["roster"] else set()
        others = np.concatenate([np.array(zero, dtype=np.int64).ravel(), np.fromiter(roster, dtype=np.int64, count=len(roster))])
        if context is not None:
            # Mark the present actors in the study's label order: no sorting per period.
            order_ids, order_labels, rank = context["order"]
            ends = np.concatenate([tie_ends.ravel(), others])
            if ends.size and (ends.min() < 0 or ends.max() >= len(rank) or (rank[ends] < 0).any()):
                raise _damaged(prow)
            keep = np.zeros(len(order_ids), dtype=bool)
            keep[rank[ends]] = True
            place = np.cumsum(keep) - 1
            return order_ids[keep], order_labels[keep].tolist(), place[rank[tie_ends]]
        ids = np.unique(np.concatenate([tie_ends.ravel(), others]))
        if len(ids) <= 30000:
            rows = conn.execute(select(Actor.id, Actor.label).where(Actor.id.in_(ids.tolist())).order_by(_code_points(Actor.label))).all()
        else:
            wanted = set(ids.tolist())
            rows = [r for r in conn.execute(select(Actor.id, Actor.label).order_by(_code_points(Actor.label))).all() if r.id in wanted]
        actor_ids = np.array([r.id for r in rows], dtype=np.int64)
        by_id = np.argsort(actor_ids)
        sorted_ids = actor_ids[by_id]
        at = np.searchsorted(sorted_ids, tie_ends)
        if tie_ends.size and (at.max() >= len(sorted_ids) or (sorted_ids[at] != tie_ends).any()):
            raise _damaged(prow)
        return actor_ids, [r.label for r in rows], by_id[at]

    def _roster_present(self, conn, prow) -> set[int]:
        scheme = self.period_scheme(conn)
        if scheme is None:
            return set()
        if scheme.dated:
            cond = and_(
                Actor.in_roster.is_(True),
                or_(Actor.first_period.is_(None), Actor.first_period <= prow.end),
                or_(Actor.last_period.is_(None), Actor.last_period >= prow.start),
            )
            return set(conn.execute(select(Actor.id).where(cond)).scalars())
        keys = dict(conn.execute(select(Period.label, Period.sort_key)).all())
        rows = conn.execute(select(Actor.id, Actor.first_period, Actor.last_period).where(Actor.in_roster.is_(True))).all()
        found = set()
        for aid, first, last in rows:
            lo = None if first is None else (keys.get(first) if first in keys else column_sort_keys([first], keys)[first])
            hi = None if last is None else (keys.get(last) if last in keys else column_sort_keys([last], keys)[last])
            if (lo is None or lo <= prow.sort_key) and (hi is None or hi >= prow.sort_key):
                found.add(aid)
        return found

    def actors(self) -> pd.DataFrame:
        """Actors with their roster range, attributes and aliases."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Actor.id, Actor.label, Actor.in_roster, Actor.first_period, Actor.last_period, Actor.attributes).order_by(_code_points(Actor.label))
            ).all()
            aliases = conn.execute(select(ActorAlias.actor_id, ActorAlias.alias)).all()
        frame = pd.DataFrame(rows, columns=["id", "actor", "in_roster", "first", "last", "attributes"])
        other = pd.DataFrame(aliases, columns=["id", "alias"]).merge(frame[["id", "actor"]], on="id")
        other = other[other["alias"] != other["actor"]].groupby("id")["alias"].agg(lambda s: "; ".join(sorted(s)))
        frame["aliases"] = frame["id"].map(other).astype(object).fillna("")
        return frame

    # ------------------------------------------------------------------ actors
    def add_alias(self, alias: str, actor: str) -> dict:
        """Make ``alias`` another name of ``actor``.

        If ``alias`` is already an actor of its own (a second spelling imported
        earlier, or an organisation that was merged), its events, roster
        entry and aliases move to ``actor`` and the ties are rebuilt.
        """
        alias, actor = alias.strip(), actor.strip()
        if not alias or not actor or alias == actor:
            raise UsageError("give two different, non-empty names: roletrail alias OTHER-NAME ACTOR")
        with self._write() as conn:
            aliases = self._aliases(conn)
            if actor not in aliases:
                raise UsageError(f"no actor {actor!r} in this study; check the spelling (roletrail actors lists them)")
            keep = aliases[actor]
            moved_events = 0
            if alias in aliases:
                old = aliases[alias]
                if old == keep:
                    return {"alias": alias, "actor": actor, "merged": False, "events_moved": 0}
                touched = set(conn.execute(
                    select(Event.period_id).where(or_(Event.source_id == old, Event.target_id == old)).distinct()
                ).scalars())
                moved_events = conn.execute(update(Event).where(Event.source_id == old).values(source_id=keep)).rowcount
                moved_events += conn.execute(update(Event).where(Event.target_id == old).values(target_id=keep)).rowcount
                conn.execute(delete(Event).where(Event.source_id == Event.target_id))
                conn.execute(delete(Tie).where(or_(Tie.source_id == old, Tie.target_id == old)))
                conn.execute(update(ActorAlias).where(ActorAlias.actor_id == old).values(actor_id=keep))
                self._before_actor_delete(conn, old, keep)
                conn.execute(delete(Actor).where(Actor.id == old))
                self._rebuild_ties(conn, touched)
                return {"alias": alias, "actor": actor, "merged": True, "events_moved": int(moved_events)}
            conn.execute(insert(ActorAlias).values(alias=alias, actor_id=keep))
            return {"alias": alias, "actor": actor, "merged": False, "events_moved": 0}

    def _before_actor_delete(self, conn, old: int, keep: int) -> None:
        """Fits made before a merge no longer describe the data: drop the merged actor's rows."""
        conn.execute(delete(Membership).where(Membership.actor_id == old))

    # ------------------------------------------------------------------ re-cutting
    def recut(self, scheme: PeriodScheme) -> dict:
        """Re-cut every dated event into the periods of another scheme, in one transaction."""
        from tracker.ingest.periods import parse_dates

        if not scheme.dated:
            raise UsageError("periods read from a column cannot be re-cut; re-import with --date instead")
        with self._write() as conn:
            current = self.period_scheme(conn)
            if current is None:
                raise UsageError("this study has no events yet; import data first")
            if not current.dated:
                raise UsageError("this study's periods come from a column, so its events have no dates to re-cut")
            events = pd.DataFrame(conn.execute(select(Event.id, Event.occurred)).all(), columns=["id", "occurred"])
            dates, year_only, bad = parse_dates(events["occurred"])
            periods = scheme.assign(dates, year_only)
            self._before_recut(conn)
            conn.execute(delete(Tie))
            labels = periods.drop_duplicates("label")
            old_ids = list(conn.execute(select(Period.id)).scalars())
            # Move the old labels aside so the new periods can take any label.
            conn.execute(update(Period).values(label=literal("~old~") + Period.label))
            conn.execute(insert(Period), [
                {"label": r.label, "sort_key": int(r.sort_key), "start": r.start, "end": r.end}
                for r in labels.itertuples(index=False)
            ])
            ids = dict(conn.execute(select(Period.label, Period.id).where(Period.id.not_in(old_ids))).all())
            conn.execute(
                update(Event).where(Event.id == _bind("eid")).values(period_id=_bind("pid")),
                [{"eid": int(e), "pid": ids[p]} for e, p in zip(events["id"], periods["label"])],
            )
            for start in range(0, len(old_ids), _IN_CHUNK):
                conn.execute(delete(Period).where(Period.id.in_(old_ids[start : start + _IN_CHUNK])))
            self._set_setting(conn, "period_scheme", scheme.name)
            self._rebuild_ties(conn, ids.values())
            return {"scheme": scheme.name, "periods": len(ids), "events": len(events)}

    def _before_recut(self, conn) -> None:
        """Fits belong to the old periods: a re-cut removes them (refit afterwards)."""
        conn.execute(delete(Fit))

    # ------------------------------------------------------------------ fits
    def save_fit(self, settings, period_fits: Sequence, software_version: str) -> int:
        """Store per-period fits under their settings, in one transaction.

        Settings equal to an existing fit's extend or refresh that fit (its other
        periods stay); new settings make a new fit.  The fit becomes current.
        """
        now = _now()
        key = settings.key()
        with self._write() as conn:
            fit_id = conn.execute(select(Fit.id).where(Fit.settings_key == key).order_by(Fit.id.desc())).scalars().first()
            if fit_id is None:
                fit_id = conn.execute(
                    insert(Fit).values(
                        settings_key=key, method=settings.method, criterion=settings.criterion, seed=settings.seed,
                        params=json.dumps(settings.as_dict(), sort_keys=True, default=str),
                        software_version=software_version, created_at=now, updated_at=now, current=False,
                    )
                ).inserted_primary_key[0]
            else:
                conn.execute(update(Fit).where(Fit.id == fit_id).values(updated_at=now, software_version=software_version))
            periods = dict(conn.execute(select(Period.label, Period.id)).all())
            relations = dict(conn.execute(select(RelationRow.name, RelationRow.id)).all())
            aliases = self._aliases(conn)
            self._check_fitted_data(conn, periods, period_fits)
            self._invalidate_alignment(conn, fit_id, [periods[pf.period] for pf in period_fits])
            for pf in period_fits:
                pid = periods[pf.period]
                for model in (Membership, Block, FitPeriod):
                    conn.execute(delete(model).where(model.fit_id == fit_id, model.period_id == pid))
                part = pf.partition
                iso = None if part.isolates is None else part.isolates + 1
                conn.execute(insert(FitPeriod).values(
                    fit_id=fit_id, period_id=pid, n_positions=part.n_positions, isolates_position=iso,
                    inconsistencies=pf.inconsistencies,
                    density_correlation=pf.density_correlation if np.isfinite(pf.density_correlation) else None,
                    perfect_fit=pf.perfect_fit, p_value=pf.p_value, draws=pf.draws,
                    diagnostics=json.dumps(pf.diagnostics, default=str), fitted_at=now,
                ))
                labels = part.labels
                conf = pf.confidence if pf.confidence is not None else [None] * len(labels)
                conn.execute(insert(Membership), [
                    {"fit_id": fit_id, "period_id": pid, "actor_id": aliases[a], "position": int(l) + 1,
                     "isolate": iso is not None and int(l) + 1 == iso,
                     "confidence": None if c is None or not np.isfinite(c) else float(c)}
                    for a, l, c in zip(pf.actors, labels, conf)
                ])
                st = pf.stats
                density, mean = st.density, st.mean_value
                rows = []
                for r, rel in enumerate(pf.relations):
                    for k in range(st.n_positions):
                        for l in range(st.n_positions):
                            row = {
                                "fit_id": fit_id, "period_id": pid, "relation_id": relations[rel],
                                "from_position": k + 1, "to_position": l + 1,
                                "ties": int(st.ties[r, k, l]), "possible": int(st.possible[r, k, l]),
                                "density": float(density[r, k, l]), "mean_value": float(mean[r, k, l]),
                                "max_value": float(st.maximum[r, k, l]),
                                "image": int(pf.image[r, k, l]),
                            }
                            for crit, img in pf.images.items():
                                row["image_" + crit.replace("-", "_")] = int(img[r, k, l])
                            rows.append(row)
                if rows:
                    conn.execute(insert(Block), rows)
            conn.execute(update(Fit).values(current=False))
            conn.execute(update(Fit).where(Fit.id == fit_id).values(current=True))
        return int(fit_id)

    def _check_fitted_data(self, conn, periods: dict, period_fits: Sequence) -> None:
        """Refuse to store fits of data that changed after the fit read it.

        An import, alias or re-cut may commit while a fit computes (the fit
        reads its snapshots, then works without holding the study).  Inside
        the saving transaction each period must still have the actors the fit
        placed and, per relation, the tie count and value total it fitted.
        """
        for pf in period_fits:
            try:
                snap = self._snapshot(conn, pf.period, list(pf.relations)) if pf.period in periods else None
            except UsageError:
                snap = None
            same = snap is not None and tuple(snap.actors) == tuple(pf.actors)
            for r, (rel, mat) in enumerate(zip(snap.relations, snap.matrices) if same else ()):
                half = 1 if rel.directed else 2  # an undirected pair fills two cells
                st = pf.stats
                if mat.nnz != half * int(st.network_ties[r]) or not np.isclose(
                    float(mat.sum()), half * float(st.network_total[r]), rtol=1e-9, atol=0.0
                ):
                    same = False
                    break
            if not same:
                raise StoreError(
                    f"the data of period {pf.period} changed while the fit ran (an import, alias or re-cut at the "
                    "same time); nothing was saved. Run roletrail fit again"
                )

    def _invalidate_alignment(self, conn, fit_id: int, period_ids: Sequence[int]) -> None:
        """Refitting a period that was already aligned voids the alignment from that period on.

        Earlier periods keep their tracks; the next ``align`` continues from them.
        Appending a new, later period voids nothing.
        """
        refitted = set(conn.execute(
            select(FitPeriod.period_id).where(FitPeriod.fit_id == fit_id, FitPeriod.period_id.in_(list(period_ids)))
        ).scalars())
        aligned = set(conn.execute(select(TrackPosition.period_id).where(TrackPosition.fit_id == fit_id)).scalars())
        keys = dict(conn.execute(select(Period.id, Period.sort_key)).all())
        new_ids = [p for p in period_ids if p not in refitted]
        last_aligned = max((keys[p] for p in aligned), default=None)
        # A new period earlier than the last aligned one also changes the story from there on.
        starts = [keys[p] for p in refitted & aligned] + [keys[p] for p in new_ids if last_aligned is not None and keys[p] < last_aligned]
        if not starts:
            return
        first = min(starts)
        later = [p for p, k in keys.items() if k >= first]
        labels = list(conn.execute(select(Period.label).where(Period.id.in_(later))).scalars())
        conn.execute(delete(TrackPosition).where(TrackPosition.fit_id == fit_id, TrackPosition.period_id.in_(later)))
        conn.execute(delete(Move).where(Move.fit_id == fit_id, Move.to_period_id.in_(later)))
        conn.execute(delete(TrackLink).where(TrackLink.fit_id == fit_id, or_(TrackLink.to_period.in_(labels),
                                                                             TrackLink.from_period.in_(labels))))

    # ------------------------------------------------------------------ alignment
    def save_alignment(self, fit_id: int, params: dict, alignment, moves: pd.DataFrame) -> None:
        """Store a fit's alignment (tracks, assignments, links) and its moves, in one transaction.

        Track names already given are kept (by track id).
        """
        now = _now()
        with self._write() as conn:
            names = dict(conn.execute(select(Track.track, Track.name).where(Track.fit_id == fit_id)).all())
            for model in (Move, TrackLink, TrackPosition, Track, AlignmentRow):
                conn.execute(delete(model).where(model.fit_id == fit_id))
            conn.execute(insert(AlignmentRow).values(fit_id=fit_id, params=json.dumps(params, sort_keys=True), aligned_at=now))
            periods = dict(conn.execute(select(Period.label, Period.id)).all())
            if alignment.tracks:
                conn.execute(insert(Track), [
                    {"fit_id": fit_id, "track": t.id, "name": names.get(t.id), "first_period": t.first_period,
                     "last_period": t.last_period, "parent": t.parent, "merged_into": t.merged_into,
                     "ended": t.ended, "isolates": bool(t.isolates)}
                    for t in alignment.tracks.values()
                ])
            rows = [
                {"fit_id": fit_id, "period_id": periods[period], "position": k + 1, "track": int(track)}
                for period, assignment in alignment.assignment.items()
                for k, track in enumerate(assignment)
            ]
            if rows:
                conn.execute(insert(TrackPosition), rows)
            if alignment.links:
                conn.execute(insert(TrackLink), [
                    {"fit_id": fit_id, "from_period": l.from_period, "to_period": l.to_period,
                     "from_track": l.from_track, "to_track": l.to_track,
                     "from_position": None if l.from_position is None else l.from_position + 1,
                     "to_position": None if l.to_position is None else l.to_position + 1,
                     "similarity": _num(l.similarity), "overlap": _num(l.overlap),
                     "role_similarity": _num(l.role_similarity), "kind": l.kind}
                    for l in alignment.links
                ])
            self._write_moves(conn, fit_id, moves, periods)

    def _write_moves(self, conn, fit_id: int, moves: pd.DataFrame, periods: dict | None = None) -> None:
        periods = periods or dict(conn.execute(select(Period.label, Period.id)).all())
        conn.execute(delete(Move).where(Move.fit_id == fit_id))
        if moves.empty:
            return
        aliases = self._aliases(conn)
        conn.execute(insert(Move), [
            {"fit_id": fit_id, "actor_id": aliases[r.actor], "from_period_id": periods[r.from_period],
             "to_period_id": periods[r.to_period], "from_track": int(r.from_track), "to_track": int(r.to_track),
             "confidence": _num(getattr(r, "confidence", None))}
            for r in moves.itertuples(index=False)
        ])

    def save_moves(self, fit_id: int, moves: pd.DataFrame) -> None:
        """Replace a fit's moves (e.g. with bootstrap confidences added)."""
        with self._write() as conn:
            self._write_moves(conn, fit_id, moves)

    def alignment_params(self, fit_id: int) -> dict | None:
        with self.engine.connect() as conn:
            row = conn.execute(select(AlignmentRow.params).where(AlignmentRow.fit_id == fit_id)).scalar_one_or_none()
        return None if row is None else json.loads(row)

    def tracks(self, fit_id: int) -> pd.DataFrame:
        """track, name, first_period, last_period, parent, merged_into, ended, isolates."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Track.track, Track.name, Track.first_period, Track.last_period, Track.parent,
                       Track.merged_into, Track.ended, Track.isolates).where(Track.fit_id == fit_id).order_by(Track.track)
            ).all()
        return pd.DataFrame(rows, columns=["track", "name", "first_period", "last_period", "parent", "merged_into",
                                           "ended", "isolates"])

    def track_positions(self, fit_id: int) -> pd.DataFrame:
        """period, position (1-based), track -- in time order."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Period.label, TrackPosition.position, TrackPosition.track)
                .join(Period, Period.id == TrackPosition.period_id).where(TrackPosition.fit_id == fit_id)
                .order_by(Period.sort_key, TrackPosition.position)
            ).all()
        return pd.DataFrame(rows, columns=["period", "position", "track"])

    def track_links(self, fit_id: int) -> pd.DataFrame:
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(TrackLink.from_period, TrackLink.to_period, TrackLink.from_track, TrackLink.to_track,
                       TrackLink.from_position, TrackLink.to_position, TrackLink.similarity, TrackLink.overlap,
                       TrackLink.role_similarity, TrackLink.kind).where(TrackLink.fit_id == fit_id).order_by(TrackLink.id)
            ).all()
        return pd.DataFrame(rows, columns=["from_period", "to_period", "from_track", "to_track", "from_position",
                                           "to_position", "similarity", "overlap", "role_similarity", "kind"])

    def moves(self, fit_id: int) -> pd.DataFrame:
        """actor, from_period, to_period, from_track, to_track, confidence -- in time order."""
        from sqlalchemy.orm import aliased

        p_from, p_to = aliased(Period), aliased(Period)
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Actor.label, p_from.label, p_to.label, Move.from_track, Move.to_track, Move.confidence)
                .join(Actor, Actor.id == Move.actor_id).join(p_from, p_from.id == Move.from_period_id)
                .join(p_to, p_to.id == Move.to_period_id).where(Move.fit_id == fit_id)
                .order_by(p_to.sort_key, _code_points(Actor.label))
            ).all()
        return pd.DataFrame(rows, columns=["actor", "from_period", "to_period", "from_track", "to_track", "confidence"])

    def name_track(self, fit_id: int, track: int, name: str) -> None:
        """Give a track a name (kept through re-alignment and updates)."""
        with self._write() as conn:
            found = conn.execute(select(Track.track).where(Track.fit_id == fit_id, Track.track == track)).first()
            if found is None:
                known = list(conn.execute(select(Track.track).where(Track.fit_id == fit_id).order_by(Track.track)).scalars())
                if not known:
                    raise UsageError("this fit has no tracks yet; run roletrail align first")
                raise UsageError(f"no track {track} in fit {fit_id}; the tracks are {', '.join(map(str, known))}")
            conn.execute(update(Track).where(Track.fit_id == fit_id, Track.track == track).values(name=name))

    def fits(self) -> pd.DataFrame:
        """Every fit: id, method, criterion, seed, periods fitted, current, times, version, params."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Fit.id, Fit.method, Fit.criterion, Fit.seed, func.count(FitPeriod.period_id), Fit.current,
                       Fit.created_at, Fit.updated_at, Fit.software_version, Fit.params)
                .outerjoin(FitPeriod, FitPeriod.fit_id == Fit.id).group_by(Fit.id).order_by(Fit.id)
            ).all()
        return pd.DataFrame(rows, columns=["fit", "method", "criterion", "seed", "periods", "current", "created_at",
                                           "updated_at", "version", "params"])

    def current_fit(self, fit_id: int | None = None) -> dict:
        """The chosen fit (or the current one) as a dict with its settings; an error if none."""
        with self.engine.connect() as conn:
            stmt = select(Fit).where(Fit.id == fit_id) if fit_id is not None else select(Fit).where(Fit.current.is_(True))
            fit = conn.execute(stmt).first()
            if fit is None and fit_id is None:
                fit = conn.execute(select(Fit).order_by(Fit.updated_at.desc(), Fit.id.desc())).first()
        if fit is None:
            if fit_id is not None:
                raise UsageError(f"no fit {fit_id} in this study; roletrail fits lists them")
            raise UsageError("this study has no fit yet; run roletrail fit first")
        return {"id": fit.id, "method": fit.method, "criterion": fit.criterion, "seed": fit.seed,
                "params": json.loads(fit.params), "version": fit.software_version,
                "created_at": fit.created_at, "updated_at": fit.updated_at}

    def use_fit(self, fit_id: int) -> None:
        """Make a fit the current one."""
        with self._write() as conn:
            if conn.execute(select(Fit.id).where(Fit.id == fit_id)).first() is None:
                raise UsageError(f"no fit {fit_id} in this study; roletrail fits lists them")
            conn.execute(update(Fit).values(current=False))
            conn.execute(update(Fit).where(Fit.id == fit_id).values(current=True))

    def fit_periods(self, fit_id: int) -> pd.DataFrame:
        """Per-period results of a fit, in time order."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Period.label, FitPeriod.n_positions, FitPeriod.isolates_position, FitPeriod.inconsistencies,
                       FitPeriod.density_correlation, FitPeriod.perfect_fit, FitPeriod.p_value, FitPeriod.draws,
                       FitPeriod.diagnostics)
                .join(Period, Period.id == FitPeriod.period_id).where(FitPeriod.fit_id == fit_id)
                .order_by(Period.sort_key)
            ).all()
        frame = pd.DataFrame(rows, columns=["period", "positions", "isolates_position", "inconsistencies",
                                            "density_correlation", "perfect_fit", "p_value", "draws", "diagnostics"])
        frame["diagnostics"] = [json.loads(d) if d else {} for d in frame["diagnostics"]]
        return frame

    def memberships(self, fit_id: int) -> pd.DataFrame:
        """period, actor, position (1-based), isolate, confidence; periods in time order, actors by label."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Period.label, Actor.label, Membership.position, Membership.isolate, Membership.confidence)
                .join(Period, Period.id == Membership.period_id).join(Actor, Actor.id == Membership.actor_id)
                .where(Membership.fit_id == fit_id).order_by(Period.sort_key, _code_points(Actor.label))
            ).all()
        frame = pd.DataFrame(rows, columns=["period", "actor", "position", "isolate", "confidence"])
        frame["isolate"] = frame["isolate"].astype(bool)
        frame["confidence"] = frame["confidence"].astype(float)
        return frame

    def blocks(self, fit_id: int) -> pd.DataFrame:
        """The block table of a fit (every period, relation and ordered pair of positions)."""
        image_cols = [Block.image_zero_block, Block.image_one_block, Block.image_density, Block.image_max_value,
                      Block.image_mean_value]
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Period.label, RelationRow.name, Block.from_position, Block.to_position, Block.ties,
                       Block.possible, Block.density, Block.mean_value, Block.max_value, Block.image, *image_cols)
                .join(Period, Period.id == Block.period_id).join(RelationRow, RelationRow.id == Block.relation_id)
                .where(Block.fit_id == fit_id)
                .order_by(Period.sort_key, _code_points(RelationRow.name), Block.from_position, Block.to_position)
            ).all()
        return pd.DataFrame(rows, columns=["period", "relation", "from_position", "to_position", "ties", "possible",
                                           "density", "mean_value", "max_value", "image", "image_zero_block",
                                           "image_one_block", "image_density", "image_max_value", "image_mean_value"])


def _num(value):
    """A float for the database: None for missing or non-finite values."""
    if value is None:
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if np.isfinite(value) else None


def _bind(name: str):
    from sqlalchemy import bindparam

    return bindparam(name)


class _code_points(ColumnElement):
    """A text column ordered by code point on every back end.

    SQLite compares text byte by byte (its BINARY collation, which is
    code-point order for UTF-8, like Python's ``sorted``).  A PostgreSQL
    server sorts by its locale instead (en-US puts "agency a" before
    "Agency C"); actor order fixes the rows of every matrix and so a seeded
    fit's tie-breaks, so the "C" collation (byte order) is asked for there.
    """

    inherit_cache = True
    _traverse_internals = [("column", InternalTraversal.dp_clauseelement)]

    def __init__(self, column) -> None:
        self.column = column
        self.type = column.type


@compiles(_code_points)
def _code_points_default(element, compiler, **kw):
    return compiler.process(element.column, **kw)


@compiles(_code_points, "postgresql")
def _code_points_postgresql(element, compiler, **kw):
    return compiler.process(element.column, **kw) + ' COLLATE "C"'


def _damaged(prow) -> StoreError:
    return StoreError(
        f"the study is damaged: ties or events of period {prow.label} name actors that do not exist; "
        "restore it from a backup, or find and remove the bad rows with roletrail check"
    )


def _driver_rows(conn: Connection, stmt) -> list[tuple]:
    """Every row of a query as the driver's plain tuples.

    Skips SQLAlchemy's row objects and result processing, several times
    faster for the many thousands of rows of a period's ties; only for
    integer, float and text columns, which every driver returns as such.
    """
    result = conn.execute(stmt)
    try:
        return result.cursor.fetchall()
    finally:
        result.close()


_EVENT_COLUMNS = ("batch_id", "row", "source_id", "target_id", "relation_id", "occurred", "period_id", "weight")


def _copy_rows(conn: Connection, table: str, columns: Sequence[str], rows: Iterable[tuple]) -> None:
    """Bulk-load rows with PostgreSQL's COPY, inside the connection's open transaction.

    COPY streams every row in one command, several times faster than batched
    INSERTs (psycopg 3 writes the rows; None becomes NULL).  ``table`` and
    ``columns`` are fixed names from this module, never user input.
    """
    names = ", ".join(f'"{c}"' for c in columns)
    with conn.connection.driver_connection.cursor() as cursor:
        with cursor.copy(f'COPY "{table}" ({names}) FROM STDIN') as copy:
            for row in rows:
                copy.write_row(row)
