"""The Python API: a :class:`Study` has the same verbs as the ``roletrail`` command.

>>> from tracker.api import Study                       # doctest: +SKIP
>>> study = Study("alliances.db")                       # doctest: +SKIP
>>> study.import_events("events.csv", source="from_org", target="to_org",
...                     date="event_date", relation="kind")  # doctest: +SKIP
>>> study.summary()                                     # doctest: +SKIP

Everything the command line does goes through here; the CLI only parses
options and prints.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Callable, Sequence

import pandas as pd

from tracker.errors import UsageError
from tracker.ingest.events import EventMapping, validate_events
from tracker.ingest.periods import PeriodScheme, parse_scheme
from tracker.ingest.reader import file_hash, open_table
from tracker.ingest.roster import validate_roster
from tracker.measures import network_measures
from tracker.snapshot import Snapshot
from tracker.store.database import open_engine, resolve_url, sqlite_path, upgrade
from tracker.store.repository import ImportReport, Store

__all__ = ["Study"]

Progress = Callable[[int, int], None]


class Study:
    """A study: one database of events, periods, fits and tracks.

    Parameters
    ----------
    db : str or path, optional
        SQLite file path or SQLAlchemy URL; default ``$ROLETRAIL_DB`` or
        ``roletrail.db`` in the current folder.
    create : bool
        Create the study if it does not exist (otherwise a missing SQLite file
        is an error).  Opening a study made by an older roletrail upgrades its
        schema in place, keeping its data.
    """

    def __init__(self, db: str | os.PathLike | None = None, *, create: bool = True) -> None:
        self.url = resolve_url(db)
        self.engine = open_engine(self.url, must_exist=not create)
        upgrade(self.engine)
        self.store = Store(self.engine)

    @property
    def path(self) -> Path | None:
        """The SQLite file of the study (None for other back ends)."""
        return sqlite_path(self.url)

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> "Study":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ import
    def import_events(
        self,
        path: str | os.PathLike,
        *,
        source: str,
        target: str,
        date: str | None = None,
        period_column: str | None = None,
        period: str = "year",
        period_origin: int = 0,
        relation: str | None = None,
        relation_name: str | None = None,
        weight: str | None = None,
        undirected: bool = False,
        date_format: str | None = None,
        delimiter: str | None = None,
        replace: bool = False,
        progress: Progress | None = None,
    ) -> ImportReport:
        """Import a file of dyadic events (CSV or Parquet) as one batch.

        One row per event: source, target, a date (cut into periods by
        ``period``: ``year``, ``quarter``, ``month`` or ``Ny``) or a period
        label (``period_column``), a relation (column or fixed name) and an
        optional weight.  The import is one transaction: on any error nothing
        is written.  Self-ties are dropped and counted.  Importing the same
        content twice is refused unless ``replace`` (which swaps the earlier
        batch, or the latest batch of the same file name, atomically).
        """
        mapping = EventMapping(
            source=source, target=target, date=date, period_column=period_column,
            period=period, period_origin=period_origin, relation=relation,
            relation_name=relation_name, weight=weight, undirected=undirected,
            date_format=date_format, delimiter=delimiter,
        )
        scheme = PeriodScheme("column") if period_column else parse_scheme(period, period_origin)
        table = open_table(path, delimiter=delimiter)
        table.require(mapping.columns())
        digest = file_hash(table.path)

        def chunks():
            for _, frame in table.chunks():
                yield validate_events(frame, mapping, scheme, table.name)
                if progress is not None:
                    progress(table.bytes_read, table.size)

        return self.store.import_events(
            file_name=table.name, content_hash=digest, mapping=mapping.as_dict(), scheme=scheme,
            directed=not undirected, chunks=chunks(), replace=replace,
        )

    def import_actors(
        self,
        path: str | os.PathLike,
        *,
        actor: str = "actor",
        first: str | None = None,
        last: str | None = None,
        delimiter: str | None = None,
        replace: bool = False,
    ) -> ImportReport:
        """Import a roster: one row per actor, optional first/last period present, other columns as attributes."""
        table = open_table(path, delimiter=delimiter)
        table.require({"--actor": actor, "--first": first, "--last": last})
        frames = [frame for _, frame in table.chunks()]
        if not frames:
            raise UsageError(f"{table.name}: has a header but no data rows; nothing was imported")
        frame = pd.concat(frames)
        roster = validate_roster(frame, actor=actor, first=first, last=last, scheme=self.store.period_scheme(), file=table.name)
        mapping = {"actor": actor, "first": first, "last": last, "delimiter": delimiter}
        return self.store.import_roster(
            file_name=table.name, content_hash=file_hash(table.path), mapping=mapping, roster=roster, replace=replace
        )

    def alias(self, alias: str, actor: str) -> dict:
        """Make ``alias`` another name of ``actor`` (merging them if both exist)."""
        return self.store.add_alias(alias, actor)

    def recut(self, period: str, *, origin: int = 0) -> dict:
        """Re-cut all dated events into other periods, without re-importing."""
        return self.store.recut(parse_scheme(period, origin))

    # ------------------------------------------------------------------ read
    def periods(self) -> list[str]:
        """Period labels in time order."""
        return self.store.period_labels()

    def snapshot(self, period: str, relations: Sequence[str] | None = None) -> Snapshot:
        """One period's ties as sparse matrices (see :class:`tracker.snapshot.Snapshot`)."""
        return self.store.snapshot(str(period), relations)

    def summary(self) -> pd.DataFrame:
        """One row per period and relation: actors, ties, density, reciprocity, isolates, mean_value, sparse."""
        rows = []
        for snap in self.store.snapshots():
            for measures in network_measures(snap):
                rows.append({"period": snap.period, **measures})
        columns = ["period", "relation", "actors", "ties", "density", "reciprocity", "isolates", "mean_value", "sparse"]
        return pd.DataFrame(rows, columns=columns)

    def actors(self) -> pd.DataFrame:
        """Actors with roster range, attributes and aliases."""
        return self.store.actors().drop(columns=["id"])

    def batches(self) -> pd.DataFrame:
        """Imported files: batch id, kind, file, rows read and loaded, self-ties dropped, time, hash."""
        return self.store.batches()
