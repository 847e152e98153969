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
        blocks: Iterable,
        replace: bool = False,
        drop_duplicates: bool = False,
    ) -> ImportReport:
        """Load validated event blocks as one batch, in one transaction.

        ``blocks`` yields :class:`tracker.ingest.block.EventBlock` objects; an
        exception raised while iterating rolls everything back.  Each block's
        distinct actors, relations and periods are resolved to ids once, the
        rows are written with the back end's bulk path (SQLite: prepared
        INSERTs of many rows each, see :func:`_sqlite_insert_many`; PostgreSQL: COPY), and the ties of periods
        that had no events before are summed in numpy in the same pass; ties
        of periods that had events are rebuilt from the raw events in SQL.

        Duplicates: a row equal to an earlier row of the batch, or to an event
        already in the study (same actors, relation, period, date and weight,
        dates compared after parsing), is counted; ``drop_duplicates`` leaves
        those rows out.
        """
        # bulk: ids all come from this transaction, so foreign keys are not checked row by row
        with self._write(bulk=True) as conn:
            self._check_scheme(conn, scheme)
            earlier = self._earlier_batches(conn, "events", content_hash, file_name, replace)
            touched_old: set[int] = set()
            if earlier:
                touched_old |= self._batch_periods(conn, earlier)
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
            relations_before = sorted(relations)
            with_events = set(conn.execute(select(Event.period_id).distinct()).scalars())
            fresh = not with_events
            if fresh:
                # An empty events table: load it without indexes and build them once at the end.
                for index in Event.__table__.indexes:
                    index.drop(conn)
            actors_before = len(set(aliases.values()))
            dedup = _Duplicates(self, conn, with_events)
            ties: list[dict[str, np.ndarray]] = []
            tally = dict(read=0, loaded=0, stored=0, self_ties=0, rejected=0, in_file=0, in_study=0)
            for block in blocks:
                tally["self_ties"] += block.self_ties
                tally["rejected"] += len(block.rejected)
                tally["read"] += block.events + block.self_ties + len(block.rejected)
                if not len(block):
                    continue
                actor_ids = self._actor_ids(conn, aliases, block.actors)
                rel_ids = self._resolve_relations(conn, relations, pd.Series(block.relations, dtype=object), directed)
                used = np.unique(block.period)
                wanted = block.periods.iloc[used].rename(columns={"label": "period"})
                period_ids = np.full(len(block.periods), -1, dtype=np.int64)
                period_ids[used] = self._resolve_periods(conn, periods, period_keys, wanted, scheme)
                rows = pd.DataFrame({
                    "source_id": actor_ids[block.source], "target_id": actor_ids[block.target],
                    "relation_id": rel_ids[block.relation], "period_id": period_ids[block.period],
                    "date": block.date, "weight": block.weight,
                })
                if block.n_events is None:
                    in_file, in_study = dedup.find(rows, block.dates)
                else:  # aggregated rows: one per pair and period already
                    in_file = in_study = np.zeros(len(rows), dtype=bool)
                tally["in_file"] += int(in_file.sum())
                tally["in_study"] += int(in_study.sum())
                keep = ~(in_file | in_study) if drop_duplicates else np.ones(len(rows), dtype=bool)
                counts = block.n_events
                cols = {name: rows[name].to_numpy() for name in rows.columns}
                file_rows = block.rows
                if not keep.all():
                    cols = {name: values[keep] for name, values in cols.items()}
                    counts = None if counts is None else counts[keep]
                    file_rows = file_rows[keep]
                occurred = block.dates[cols["date"]]
                self._insert_event_rows(conn, batch_id, file_rows, cols, occurred, counts)
                stored = len(file_rows)
                tally["stored"] += stored
                tally["loaded"] += stored if counts is None else int(counts.sum())
                old = np.isin(cols["period_id"], list(with_events))
                touched_old |= set(np.unique(cols["period_id"][old]).tolist())
                if old.any():
                    cols = {name: values[~old] for name, values in cols.items()}
                    counts = None if counts is None else counts[~old]
                if len(cols["period_id"]):
                    ties.append(_tie_sums(cols, np.ones(len(cols["period_id"]), np.int64) if counts is None else counts, relations))
            if tally["read"] == 0:
                raise StoreError(f"{file_name}: has a header but no data rows; nothing was imported")
            if tally["stored"] == 0 and tally["rejected"]:
                raise StoreError(f"{file_name}: every row is bad ({tally['rejected']} rows); nothing was imported")
            conn.execute(
                update(Batch).where(Batch.id == batch_id).values(
                    rows_read=tally["read"], rows_loaded=tally["loaded"], self_ties_dropped=tally["self_ties"],
                    duplicates=tally["in_file"] + tally["in_study"], rows_rejected=tally["rejected"],
                )
            )
            if fresh:
                for index in Event.__table__.indexes:
                    index.create(conn)
            new_periods = self._insert_ties(conn, ties)
            self._rebuild_ties(conn, touched_old - new_periods)
            self._drop_empty_periods(conn)
            return ImportReport(
                batch=batch_id, file=file_name, rows_read=tally["read"], rows_loaded=tally["loaded"],
                rows_stored=tally["stored"], self_ties_dropped=tally["self_ties"],
                new_actors=len(set(aliases.values())) - actors_before,
                periods=len(touched_old | new_periods), replaced=list(earlier),
                duplicates_in_file=tally["in_file"], duplicates_in_study=tally["in_study"],
                duplicates_dropped=drop_duplicates, rows_rejected=tally["rejected"],
                relations_before=relations_before, new_relations=sorted(set(relations) - set(relations_before)),
            )

    def _actor_ids(self, conn, aliases: dict[str, int], labels: np.ndarray) -> np.ndarray:
        """Ids of distinct labels (new actors are added), in the order of ``labels``."""
        new = [label for label in labels.tolist() if label not in aliases]
        if new:
            top = conn.execute(select(func.max(Actor.id))).scalar() or 0
            conn.execute(insert(Actor), [{"label": label, "in_roster": False} for label in new])
            ids = dict(conn.execute(select(Actor.label, Actor.id).where(Actor.id > top)).all())
            conn.execute(insert(ActorAlias), [{"alias": label, "actor_id": ids[label]} for label in new])
            aliases.update(ids)
        return np.fromiter((aliases[label] for label in labels.tolist()), dtype=np.int64, count=len(labels))

    def _insert_event_rows(self, conn, batch_id: int, file_rows: np.ndarray, cols: dict, occurred: np.ndarray, counts) -> None:
        """Write event rows (arrays of ids, dates, weights) with the back end's bulk path."""
        names = list(_EVENT_COLUMNS)
        columns = [batch_id, file_rows, cols["source_id"], cols["target_id"], cols["relation_id"], occurred,
                   cols["period_id"], cols["weight"]]
        if counts is not None:
            names.append("n_events")
            columns.append(counts)
        self._bulk_insert(conn, "events", names, columns, len(file_rows))

    def _bulk_insert(self, conn, table: str, names: Sequence[str], columns: Sequence, n: int) -> None:
        """``n`` rows given column by column (numpy arrays, or one value for every row).

        SQLite: one prepared INSERT of many rows (:func:`_sqlite_insert_many`);
        PostgreSQL: COPY.
        """
        if not n:
            return
        if conn.dialect.name == "sqlite":
            _sqlite_insert_many(conn, table, names, columns, n)
            return
        lists = [itertools.repeat(c, n) if np.ndim(c) == 0 else np.asarray(c).tolist() for c in columns]
        if conn.dialect.name == "postgresql":
            _copy_rows(conn, table, names, zip(*lists))
        else:
            model = {"events": Event, "ties": Tie}[table]
            conn.execute(insert(model), [dict(zip(names, values)) for values in zip(*lists)])

    def _insert_ties(self, conn, parts: list[dict[str, np.ndarray]]) -> set[int]:
        """Store ties summed in numpy (periods without earlier events); returns their period ids."""
        if not parts:
            return set()
        key = ["period_id", "relation_id", "source_id", "target_id"]
        if len(parts) == 1:
            ties = parts[0]
        else:
            joined = {name: np.concatenate([p[name] for p in parts]) for name in parts[0]}
            ties = _sum_by_key([joined[k] for k in key], joined, ["value", "n_events"])
        periods = set(np.unique(ties["period_id"]).tolist())
        ordered = sorted(periods)
        for start in range(0, len(ordered), _IN_CHUNK):  # ties left by a replaced batch
            conn.execute(delete(Tie).where(Tie.period_id.in_(ordered[start : start + _IN_CHUNK])))
        # in primary-key order (as summed): the B-tree grows at its right edge instead of splitting pages all over
        positive = ties["value"] > 0
        names = [*key, "value", "n_events"]
        self._bulk_insert(conn, "ties", names, [ties[c][positive] for c in names], int(positive.sum()))
        return periods

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
                select(Event.period_id, Event.relation_id, src, dst, func.sum(Event.weight), func.sum(Event.n_events))
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
                       Batch.self_ties_dropped, Batch.duplicates, Batch.rows_rejected, Batch.imported_at,
                       Batch.content_hash).order_by(Batch.id)
            ).all()
        return pd.DataFrame(rows, columns=["batch", "kind", "file", "rows_read", "rows_loaded", "self_ties_dropped",
                                           "duplicates", "rows_rejected", "imported_at", "sha256"])

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
    def actor_event_counts(self) -> dict[int, int]:
        """Events each actor takes part in (as source or target), by actor id."""
        with self.engine.connect() as conn:
            counts: dict[int, int] = {}
            for column in (Event.source_id, Event.target_id):
                for aid, n in conn.execute(select(column, func.sum(Event.n_events)).group_by(column)):
                    counts[aid] = counts.get(aid, 0) + int(n)
        return counts

    def add_alias(self, alias: str, actor: str) -> dict:
        """Make ``alias`` another name of ``actor``.

        If ``alias`` is already an actor of its own (a second spelling imported
        earlier, or an organisation that was merged), its events, roster
        entry and aliases move to ``actor`` and the ties are rebuilt.
        """
        from tracker.ingest.block import normalise_names

        alias, actor = normalise_names(pd.Series([alias, actor])).tolist()
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
            if conn.execute(select(Event.id).where(Event.occurred.is_(None)).limit(1)).first() is not None:
                raise UsageError("some batches were imported from a folder, summed per period without dates, so they "
                                 "cannot be re-cut; import those files again with the new --period instead")
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



def _tie_sums(rows: dict[str, np.ndarray], counts: np.ndarray, relations: dict) -> dict[str, np.ndarray]:
    """Ties of event rows: value = sum of weights, n_events = sum of counts, sorted by the ties' primary key.

    Undirected relations put the smaller actor id first (see :meth:`EventStore._rebuild_ties`).
    """
    directed_ids = [rid for rid, flag in relations.values() if flag]
    src, dst = rows["source_id"], rows["target_id"]
    flip = ~np.isin(rows["relation_id"], directed_ids) & (src > dst)
    keys = [rows["period_id"], rows["relation_id"], np.where(flip, dst, src), np.where(flip, src, dst)]
    return _sum_by_key(keys, {"value": rows["weight"], "n_events": counts}, ["value", "n_events"])


_TIE_KEY = ("period_id", "relation_id", "source_id", "target_id")


def _sum_by_key(keys: list[np.ndarray], values: dict, summed: list[str]) -> dict[str, np.ndarray]:
    """Rows with equal ``keys`` (non-negative integer ids) summed: one row per key, in ascending key order.

    Rows are ordered by a stable sort, so each sum adds its rows in their
    given order.  The keys are packed into one int64 when their ids fit in
    62 bits (one sort of one array), else sorted with ``np.lexsort``.
    """
    n = len(keys[0])
    if n == 0:
        return {**{k: np.asarray(a, dtype=np.int64) for k, a in zip(_TIE_KEY, keys)},
                **{name: np.asarray(values[name]) for name in summed}}
    widths = [max(int(k.max()), 1).bit_length() for k in keys]
    if min(int(k.min()) for k in keys) >= 0 and sum(widths) <= 62:
        packed = np.zeros(n, dtype=np.int64)
        for k, w in zip(keys, widths):
            packed = (packed << w) | k.astype(np.int64, copy=False)
        order = np.argsort(packed, kind="stable")
        ordered = packed[order]
        first = np.empty(n, dtype=bool)
        first[0] = True
        np.not_equal(ordered[1:], ordered[:-1], out=first[1:])
        starts = np.flatnonzero(first)
        unique = ordered[starts]
        out = {}
        for name, w in zip(reversed(_TIE_KEY[: len(keys)]), reversed(widths)):
            out[name] = unique & ((1 << w) - 1)
            unique = unique >> w
        out = {name: out[name] for name in _TIE_KEY[: len(keys)]}
    else:
        order = np.lexsort(keys[::-1])
        first = np.zeros(n, dtype=bool)
        first[0] = True
        for k in keys:
            ordered_k = k[order]
            first[1:] |= ordered_k[1:] != ordered_k[:-1]
        starts = np.flatnonzero(first)
        out = {name: k[order[starts]].astype(np.int64, copy=False) for name, k in zip(_TIE_KEY, keys)}
    for name in summed:
        out[name] = np.add.reduceat(np.asarray(values[name])[order], starts)
    return out


def _sqlite_insert_many(conn, table: str, names: Sequence[str], columns: Sequence, n: int) -> None:
    """Insert ``n`` rows into SQLite with INSERT statements of many rows each.

    One statement of ``k`` rows (``k * len(names)`` parameters, at most 999,
    the smallest limit of any SQLite build) is prepared once and run over
    every group of ``k`` rows by the driver's ``executemany``: the per-row
    work of the driver (step, reset, a Python tuple) is paid once per ``k``
    rows.  The values reach the driver as plain Python numbers and strings,
    converted in C by numpy (object arrays), a chunk at a time to bound memory.
    ``table`` and ``names`` are fixed names from this module, never user input.
    """
    width = len(names)
    per = max(1, _SQLITE_PARAMS // width)
    head = f"INSERT INTO {table} ({', '.join(names)}) VALUES "
    one = "(" + ", ".join("?" * width) + ")"
    many = head + ", ".join([one] * per)
    cursor = conn.connection.driver_connection.cursor()
    try:
        step = per * _SQLITE_CHUNK
        for start in range(0, n, step):
            stop = min(n, start + step)
            block = np.empty((stop - start, width), dtype=object)
            for j, column in enumerate(columns):
                block[:, j] = column if np.ndim(column) == 0 else column[start:stop]
            whole = (stop - start) // per * per
            if whole:
                cursor.executemany(many, block[:whole].reshape(-1, per * width).tolist())
            if whole < stop - start:
                cursor.execute(head + ", ".join([one] * (stop - start - whole)), block[whole:].ravel().tolist())
    finally:
        cursor.close()


#: Parameters in one SQLite statement (SQLITE_MAX_VARIABLE_NUMBER was 999 before SQLite 3.32).
_SQLITE_PARAMS = 999
#: Statements of rows converted to Python values at a time.
_SQLITE_CHUNK = 512


class _Duplicates:
    """Rows repeating an earlier row of the import or an event already in the study.

    Rows are compared on (source, target, relation, period, date, weight),
    dates as parsed ISO text, through a 64-bit hash of those values
    (``pandas.util.hash_pandas_object``; two different rows share a hash with
    probability about 2**-64 per pair).
    """

    def __init__(self, store: "EventStore", conn, with_events: set[int]) -> None:
        self.store, self.conn, self.with_events = store, conn, with_events
        self.seen: list[np.ndarray] = []
        self.study: dict[int, np.ndarray] = {}
        self.dates: dict = {}

    def _date_keys(self, values: np.ndarray) -> np.ndarray:
        return np.fromiter((self.dates.setdefault(v, len(self.dates)) for v in values.tolist()), dtype=np.int64, count=len(values))

    def _hash(self, rows: pd.DataFrame) -> np.ndarray:
        return pd.util.hash_pandas_object(rows, index=False).to_numpy()

    def find(self, rows: pd.DataFrame, dates: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        keyed = rows.assign(date=self._date_keys(dates)[rows["date"].to_numpy()])
        hashes = self._hash(keyed)
        in_file = pd.Series(hashes).duplicated().to_numpy()
        if self.seen:
            in_file = in_file | np.isin(hashes, np.concatenate(self.seen))
        self.seen.append(hashes)
        old = rows["period_id"].isin(self.with_events).to_numpy()
        in_study = np.zeros(len(rows), dtype=bool)
        if old.any():
            stored = np.concatenate([self._stored(int(p)) for p in np.unique(keyed["period_id"].to_numpy()[old])])
            in_study = old & np.isin(hashes, stored) & ~in_file
        return in_file, in_study

    def _stored(self, period_id: int) -> np.ndarray:
        if period_id not in self.study:
            found = pd.DataFrame(
                self.conn.execute(
                    select(Event.source_id, Event.target_id, Event.relation_id, Event.period_id, Event.occurred, Event.weight)
                    .where(Event.period_id == period_id)
                ).all(),
                columns=["source_id", "target_id", "relation_id", "period_id", "date", "weight"],
            )
            found = found.astype({"source_id": np.int64, "target_id": np.int64, "relation_id": np.int64,
                                  "period_id": np.int64, "weight": np.float64})
            found["date"] = self._date_keys(found["date"].to_numpy(dtype=object))
            self.study[period_id] = self._hash(found)
        return self.study[period_id]
