"""Events, actors, relations, periods and snapshots: the only SQL of raw data.

Each method that writes runs in one transaction (see :class:`StoreBase`).
"""

from __future__ import annotations

import itertools
import json
from typing import Iterable, Iterator, Sequence

import numpy as np
import pandas as pd
from sqlalchemy import and_, case, delete, func, insert, literal, or_, select, update
from sqlalchemy.engine import Connection

from tracker.errors import StoreError, UsageError
from tracker.ingest.periods import PeriodScheme, column_sort_keys, parse_scheme_name
from tracker.snapshot import Relation, Snapshot, build_snapshot
from tracker.store.models import (
    Actor, ActorAlias, Batch, Event, Fit, Membership, Period, RelationRow,
    Setting, Tie,
)

from tracker.store._sql import _IN_CHUNK, _bind, _code_points, _copy_rows, _damaged, _driver_rows, _EVENT_COLUMNS, _now, StoreBase, ImportReport

__all__ = ["EventStore"]


class EventStore(StoreBase):
    """Settings, imports, aliases, periods, snapshots and actors."""

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

