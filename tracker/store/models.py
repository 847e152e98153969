"""SQLAlchemy 2 models of a study.

The schema is created and changed only by the Alembic revisions in
``migrations/versions``; these classes describe it for queries.  A test checks
that the migrated schema and these models agree.

Tables (see DEVELOPERS.md for the full description):

``settings``          study-wide key/value settings (period scheme ...)
``actors``            one row per actor; roster attributes and presence range
``actor_aliases``     every spelling that maps to an actor (the label itself too)
``relations``         relation name and whether it is directed
``batches``           one row per imported file (hash, mapping, counts, time)
``events``            raw dated events, kept so periods can be re-cut
``periods``           period label, bounds and order
``ties``              per period and relation: value and number of events
``fits``...           blockmodel fits (added by revision 0002)
"""

from __future__ import annotations

from datetime import datetime
from typing import Optional

from sqlalchemy import (
    Boolean,
    DateTime,
    Float,
    ForeignKey,
    Index,
    Integer,
    String,
    Text,
    UniqueConstraint,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column


class Base(DeclarativeBase):
    pass


class Setting(Base):
    __tablename__ = "settings"

    key: Mapped[str] = mapped_column(String(64), primary_key=True)
    value: Mapped[str] = mapped_column(Text)


class Actor(Base):
    __tablename__ = "actors"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    label: Mapped[str] = mapped_column(Text, unique=True)
    attributes: Mapped[str | None] = mapped_column(Text)  # JSON object from a roster
    first_period: Mapped[str | None] = mapped_column(Text)  # roster: present from (inclusive)
    last_period: Mapped[str | None] = mapped_column(Text)  # roster: present until (inclusive)
    in_roster: Mapped[bool] = mapped_column(Boolean, default=False)


class ActorAlias(Base):
    __tablename__ = "actor_aliases"

    alias: Mapped[str] = mapped_column(Text, primary_key=True)
    actor_id: Mapped[int] = mapped_column(ForeignKey("actors.id", ondelete="CASCADE"), index=True)


class RelationRow(Base):
    __tablename__ = "relations"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(Text, unique=True)
    directed: Mapped[bool] = mapped_column(Boolean)


class Batch(Base):
    __tablename__ = "batches"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    kind: Mapped[str] = mapped_column(String(16))  # "events" or "roster"
    file_name: Mapped[str] = mapped_column(Text)
    content_hash: Mapped[str] = mapped_column(String(64))
    mapping: Mapped[str] = mapped_column(Text)  # JSON: the column mapping and options used
    rows_read: Mapped[int] = mapped_column(Integer)
    rows_loaded: Mapped[int] = mapped_column(Integer)
    self_ties_dropped: Mapped[int] = mapped_column(Integer, default=0)
    duplicates: Mapped[int] = mapped_column(Integer, default=0, server_default="0")  # rows repeating a row or a stored event
    rows_rejected: Mapped[int] = mapped_column(Integer, default=0, server_default="0")  # bad rows skipped (--errors report)
    imported_at: Mapped[datetime] = mapped_column(DateTime)

    __table_args__ = (UniqueConstraint("kind", "content_hash", name="uq_batches_kind_hash"),)


class Period(Base):
    __tablename__ = "periods"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    label: Mapped[str] = mapped_column(Text, unique=True)
    sort_key: Mapped[int] = mapped_column(Integer)
    start: Mapped[str | None] = mapped_column(String(10))  # ISO date, inclusive
    end: Mapped[str | None] = mapped_column(String(10))  # ISO date, inclusive


class Event(Base):
    __tablename__ = "events"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    batch_id: Mapped[int] = mapped_column(ForeignKey("batches.id", ondelete="CASCADE"))
    row: Mapped[int] = mapped_column(Integer)  # data row in the file (1 = first after header)
    source_id: Mapped[int] = mapped_column(ForeignKey("actors.id"))
    target_id: Mapped[int] = mapped_column(ForeignKey("actors.id"))
    relation_id: Mapped[int] = mapped_column(ForeignKey("relations.id"))
    occurred: Mapped[str | None] = mapped_column(String(10))  # ISO date; NULL when imported by period
    period_id: Mapped[int] = mapped_column(ForeignKey("periods.id"))
    weight: Mapped[float] = mapped_column(Float, default=1.0)
    # events of the file this row stands for: 1, or a pair's count in a period (aggregated folder import)
    n_events: Mapped[int] = mapped_column(Integer, default=1, server_default="1")

    __table_args__ = (
        Index("ix_events_batch", "batch_id"),
        Index("ix_events_period", "period_id", "relation_id"),
    )


class Tie(Base):
    __tablename__ = "ties"

    period_id: Mapped[int] = mapped_column(ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True)
    relation_id: Mapped[int] = mapped_column(ForeignKey("relations.id"), primary_key=True)
    source_id: Mapped[int] = mapped_column(ForeignKey("actors.id"), primary_key=True)
    target_id: Mapped[int] = mapped_column(ForeignKey("actors.id"), primary_key=True)
    value: Mapped[float] = mapped_column(Float)
    n_events: Mapped[int] = mapped_column(Integer)


class Fit(Base):
    """One set of fitting settings; its per-period results live in the tables below."""

    __tablename__ = "fits"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    settings_key: Mapped[str] = mapped_column(String(64), index=True)
    method: Mapped[str] = mapped_column(String(32))
    criterion: Mapped[str] = mapped_column(String(32))
    seed: Mapped[int] = mapped_column(Integer)
    params: Mapped[str] = mapped_column(Text)  # JSON of every setting
    software_version: Mapped[str] = mapped_column(String(32))
    created_at: Mapped[datetime] = mapped_column(DateTime)
    updated_at: Mapped[datetime] = mapped_column(DateTime)
    current: Mapped[bool] = mapped_column(Boolean, default=False, server_default="0")


class FitPeriod(Base):
    __tablename__ = "fit_periods"

    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True)
    period_id: Mapped[int] = mapped_column(ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True)
    n_positions: Mapped[int] = mapped_column(Integer)
    isolates_position: Mapped[int | None] = mapped_column(Integer)  # 1-based, None if no isolates
    inconsistencies: Mapped[float] = mapped_column(Float)
    density_correlation: Mapped[float | None] = mapped_column(Float)
    perfect_fit: Mapped[bool] = mapped_column(Boolean)
    p_value: Mapped[float | None] = mapped_column(Float)
    draws: Mapped[int] = mapped_column(Integer)
    null_model: Mapped[str | None] = mapped_column(String(16))  # null model of the fit test ("ties", "degrees")
    diagnostics: Mapped[str | None] = mapped_column(Text)  # JSON (per-K table for --positions auto ...)
    fitted_at: Mapped[datetime] = mapped_column(DateTime)


class Membership(Base):
    __tablename__ = "memberships"

    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True)
    period_id: Mapped[int] = mapped_column(ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True)
    actor_id: Mapped[int] = mapped_column(ForeignKey("actors.id", ondelete="CASCADE"), primary_key=True)
    position: Mapped[int] = mapped_column(Integer)  # 1-based
    isolate: Mapped[bool] = mapped_column(Boolean)
    confidence: Mapped[float | None] = mapped_column(Float)  # posterior probability of the position, when known


class Block(Base):
    __tablename__ = "blocks"

    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True)
    period_id: Mapped[int] = mapped_column(ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True)
    relation_id: Mapped[int] = mapped_column(ForeignKey("relations.id", ondelete="CASCADE"), primary_key=True)
    from_position: Mapped[int] = mapped_column(Integer, primary_key=True)
    to_position: Mapped[int] = mapped_column(Integer, primary_key=True)
    ties: Mapped[int] = mapped_column(Integer)
    possible: Mapped[int] = mapped_column(Integer)
    density: Mapped[float] = mapped_column(Float)
    mean_value: Mapped[float] = mapped_column(Float)
    max_value: Mapped[float] = mapped_column(Float)
    image: Mapped[int] = mapped_column(Integer)  # under the fit's criterion
    image_zero_block: Mapped[int] = mapped_column(Integer)
    image_one_block: Mapped[int] = mapped_column(Integer)
    image_density: Mapped[int] = mapped_column(Integer)
    image_max_value: Mapped[int] = mapped_column(Integer)
    image_mean_value: Mapped[int] = mapped_column(Integer)
    image_above_background: Mapped[int | None] = mapped_column(Integer)


class AlignmentRow(Base):
    """The settings of a fit's alignment (one per fit)."""

    __tablename__ = "alignments"

    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True)
    params: Mapped[str] = mapped_column(Text)
    aligned_at: Mapped[datetime] = mapped_column(DateTime)


class Calibration(Base):
    """A calibration check of a fit's move confidence (reliability bins and ECE as JSON)."""

    __tablename__ = "calibrations"
    __table_args__ = (Index("ix_calibrations_fit", "fit_id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"))
    studies: Mapped[int] = mapped_column(Integer)
    ece: Mapped[Optional[float]] = mapped_column(Float, nullable=True)
    result: Mapped[str] = mapped_column(Text)
    checked_at: Mapped[datetime] = mapped_column(DateTime)


class Track(Base):
    """A persistent position across periods (track 0: actors without ties)."""

    __tablename__ = "tracks"

    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True)
    track: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str | None] = mapped_column(Text)
    first_period: Mapped[str | None] = mapped_column(Text)
    last_period: Mapped[str | None] = mapped_column(Text)
    parent: Mapped[int | None] = mapped_column(Integer)
    merged_into: Mapped[int | None] = mapped_column(Integer)
    ended: Mapped[str | None] = mapped_column(Text)
    isolates: Mapped[bool] = mapped_column(Boolean)


class TrackPosition(Base):
    """Which track each position of each period belongs to."""

    __tablename__ = "track_positions"

    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True)
    period_id: Mapped[int] = mapped_column(ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True)
    position: Mapped[int] = mapped_column(Integer, primary_key=True)  # 1-based
    track: Mapped[int] = mapped_column(Integer)


class TrackLink(Base):
    """One alignment event: continue, birth, split, merge or end, with its similarity."""

    __tablename__ = "track_links"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"))
    from_period: Mapped[str | None] = mapped_column(Text)
    to_period: Mapped[str | None] = mapped_column(Text)
    from_track: Mapped[int | None] = mapped_column(Integer)
    to_track: Mapped[int | None] = mapped_column(Integer)
    from_position: Mapped[int | None] = mapped_column(Integer)
    to_position: Mapped[int | None] = mapped_column(Integer)
    similarity: Mapped[float | None] = mapped_column(Float)
    overlap: Mapped[float | None] = mapped_column(Float)
    role_similarity: Mapped[float | None] = mapped_column(Float)
    kind: Mapped[str] = mapped_column(String(16))

    __table_args__ = (Index("ix_track_links_fit", "fit_id"),)


class Move(Base):
    """An actor's change of track between two periods in which it is present."""

    __tablename__ = "moves"

    fit_id: Mapped[int] = mapped_column(ForeignKey("fits.id", ondelete="CASCADE"), primary_key=True)
    actor_id: Mapped[int] = mapped_column(ForeignKey("actors.id", ondelete="CASCADE"), primary_key=True)
    to_period_id: Mapped[int] = mapped_column(ForeignKey("periods.id", ondelete="CASCADE"), primary_key=True)
    from_period_id: Mapped[int] = mapped_column(ForeignKey("periods.id", ondelete="CASCADE"))
    from_track: Mapped[int] = mapped_column(Integer)
    to_track: Mapped[int] = mapped_column(Integer)
    confidence: Mapped[float | None] = mapped_column(Float)
