"""The study store: the only part of roletrail that speaks SQL.

``models`` declares the tables, ``database`` opens a study (creating or
upgrading its schema through the Alembic revisions in ``migrations/``), and
``repository`` holds every query the rest of the package needs.
"""

from tracker.store.database import open_engine, resolve_url
from tracker.store.repository import Store

__all__ = ["Store", "open_engine", "resolve_url"]
