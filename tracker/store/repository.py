"""The study database: one :class:`Store` made of parts, each the only SQL of its kind.

* :class:`tracker.store.events.EventStore`: settings, imports, actors, periods, snapshots;
* :class:`tracker.store.fits.FitStore`: fits, fitted periods, memberships, blocks;
* :class:`tracker.store.tracks.TrackStore`: alignments, tracks, links, moves;
* :class:`tracker.store.history.HistoryStore`: imports with their mappings, aliases (for replication files).

Each method that writes runs in one transaction, so a failure (bad row, crash,
concurrent writer) leaves the study as it was.  Methods return plain Python
objects, numpy arrays, pandas frames or :class:`tracker.snapshot.Snapshot`
objects; no SQL escapes the store.
"""

from __future__ import annotations

from tracker.store._sql import ImportReport
from tracker.store.calibrations import CalibrationStore
from tracker.store.events import EventStore
from tracker.store.fits import FitStore
from tracker.store.history import HistoryStore
from tracker.store.tracks import TrackStore

__all__ = ["Store", "ImportReport"]


class Store(EventStore, FitStore, TrackStore, HistoryStore, CalibrationStore):
    """A study database.

    Parameters
    ----------
    engine : sqlalchemy.engine.Engine
        An engine whose schema is at the head revision (see
        :func:`tracker.store.database.upgrade`).
    """
