"""Alignments, tracks, links and moves: the only SQL of tracks.
"""

from __future__ import annotations

import json
from typing import Sequence

import pandas as pd
from sqlalchemy import delete, insert, or_, select, update

from tracker.errors import UsageError
from tracker.store.models import (
    Actor, AlignmentRow, FitPeriod, Move, Period, Track, TrackLink, TrackPosition,
)

from tracker.store._sql import _code_points, _driver_rows, _now, _num, StoreBase

__all__ = ["TrackStore"]


class TrackStore(StoreBase):
    """Saving and reading alignments, tracks and moves."""

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
        """Replace a fit's moves (e.g. with confidences added)."""
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
            rows = _driver_rows(conn,
                select(Actor.label, p_from.label, p_to.label, Move.from_track, Move.to_track, Move.confidence)
                .join(Actor, Actor.id == Move.actor_id).join(p_from, p_from.id == Move.from_period_id)
                .join(p_to, p_to.id == Move.to_period_id).where(Move.fit_id == fit_id)
                .order_by(p_to.sort_key, _code_points(Actor.label))
            )
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

    def set_track_names(self, fit_id: int, names: dict) -> None:
        """Set every track name of a fit at once: ``names`` maps track -> name; other tracks lose theirs."""
        with self._write() as conn:
            conn.execute(update(Track).where(Track.fit_id == fit_id).values(name=None))
            for track, name in names.items():
                conn.execute(update(Track).where(Track.fit_id == fit_id, Track.track == int(track)).values(name=name))
