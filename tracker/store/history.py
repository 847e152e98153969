"""What a study was built from: its imports with their mappings, and the other names of its actors.

The only SQL that :mod:`tracker.replication` needs beyond the other store parts
(an analysis file is written from these records).
"""

from __future__ import annotations

import json

from sqlalchemy import select

from tracker.store._sql import _code_points, StoreBase
from tracker.store.models import Actor, ActorAlias, Batch

__all__ = ["HistoryStore"]


class HistoryStore(StoreBase):
    """Reading a study's imports and aliases, in the order they were made."""

    def import_records(self) -> list[dict]:
        """Every kept import, oldest first: batch, kind, file, sha256, mapping (dict) and row counts."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Batch.id, Batch.kind, Batch.file_name, Batch.content_hash, Batch.mapping, Batch.rows_read,
                       Batch.rows_loaded, Batch.self_ties_dropped).order_by(Batch.id)
            ).all()
        return [
            {"batch": int(r.id), "kind": r.kind, "file": r.file_name, "sha256": r.content_hash,
             "mapping": json.loads(r.mapping) if r.mapping else {}, "rows_read": int(r.rows_read),
             "rows_loaded": int(r.rows_loaded), "self_ties_dropped": int(r.self_ties_dropped or 0)}
            for r in rows
        ]

    def alias_pairs(self) -> list[tuple[str, str]]:
        """(other name, actor label) for every name that is not the actor's own label, by actor then name."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(ActorAlias.alias, Actor.label).join(Actor, Actor.id == ActorAlias.actor_id)
                .where(ActorAlias.alias != Actor.label)
                .order_by(_code_points(Actor.label), _code_points(ActorAlias.alias))
            ).all()
        return [(str(a), str(b)) for a, b in rows]
