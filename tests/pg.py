"""Running the store's tests on PostgreSQL as well as on SQLite.

Set ``ROLETRAIL_TEST_PG`` to the SQLAlchemy URL of a PostgreSQL server where
the user may create databases, e.g.::

    ROLETRAIL_TEST_PG=postgresql+psycopg://roletrail@127.0.0.1:54329/postgres pytest

and every test that takes the ``backend``, ``new_db``, ``study_path`` or
``study`` fixture runs twice: once on SQLite files and once on PostgreSQL,
where each study is a new database (``test_<random>``) dropped after the test.
Without the variable the PostgreSQL runs are skipped.  ``.ci/run`` starts a
throwaway server on loopback and sets the variable.  ``pytest -m postgresql``
runs only the PostgreSQL half.
"""

from __future__ import annotations

import os
import uuid
from pathlib import Path

import pytest

__all__ = ["PG_ENV", "BACKENDS", "pg_url", "PgServer", "Databases"]

PG_ENV = "ROLETRAIL_TEST_PG"
BACKENDS = ("sqlite", pytest.param("postgresql", marks=pytest.mark.postgresql))


def pg_url() -> str | None:
    """The test server's URL, or None when the PostgreSQL runs are off."""
    return os.environ.get(PG_ENV) or None


class PgServer:
    """One administrative connection to the test server (per test session)."""

    def __init__(self, url: str) -> None:
        from sqlalchemy import create_engine
        from sqlalchemy.engine import make_url

        self.url = make_url(url)
        # CREATE / DROP DATABASE cannot run inside a transaction.
        self.engine = create_engine(self.url, isolation_level="AUTOCOMMIT", pool_size=1)
        self._template: str | None = None

    def create(self, *, empty: bool = False, icu_locale: str | None = None) -> str:
        """A new database, at the head schema revision unless ``empty``; returns its URL.

        Copying a template migrated once per session is several times faster
        than running every revision again for each test.  ``icu_locale``
        (e.g. ``"en-US"``) makes an empty database that sorts text by that
        locale, as servers set up for people usually do.
        """
        if icu_locale is not None:
            return self._create("template0", f"LOCALE_PROVIDER icu ICU_LOCALE '{icu_locale}'")
        template = "template0" if empty else self._migrated_template()
        return self._create(template)

    def _create(self, template: str, options: str = "") -> str:
        name = "test_" + uuid.uuid4().hex[:16]
        with self.engine.connect() as conn:
            conn.exec_driver_sql(f'CREATE DATABASE "{name}" TEMPLATE "{template}" ENCODING \'UTF8\' {options}')
        return self.url.set(database=name).render_as_string(hide_password=False)

    def _migrated_template(self) -> str:
        if self._template is None:
            from sqlalchemy.engine import make_url

            from tracker.store.database import open_engine, upgrade

            url = self._create("template0")
            engine = open_engine(url)
            try:
                upgrade(engine)
            finally:
                engine.dispose()
            self._template = make_url(url).database
        return self._template

    def drop(self, url: str) -> None:
        """Drop a database made by :meth:`create` (given by URL or name)."""
        from sqlalchemy.engine import make_url

        name = make_url(url).database if "://" in url else url
        with self.engine.connect() as conn:
            # FORCE ends connections a test left open (PostgreSQL 13 and later).
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')

    def close(self) -> None:
        if self._template is not None:
            self.drop(self._template)
        self.engine.dispose()


class Databases:
    """Fresh study locations for one test: SQLite files under ``tmp_path``, or new PostgreSQL databases."""

    def __init__(self, backend: str, tmp_path: Path, server: PgServer | None) -> None:
        self.backend = backend
        self.tmp_path = tmp_path
        self.server = server
        self._made: list[str] = []

    def __call__(self, name: str = "study.db", *, empty: bool = False, icu_locale: str | None = None) -> Path | str:
        """A location for a new study: a path (SQLite) or a URL (PostgreSQL).

        ``name`` names the SQLite file.  A PostgreSQL database comes with the
        head schema (as a new study has once opened) unless ``empty`` or
        ``icu_locale`` (see :meth:`PgServer.create`).
        """
        if self.backend == "sqlite":
            return self.tmp_path / name
        url = self.server.create(empty=empty, icu_locale=icu_locale)
        self._made.append(url)
        return url

    def close(self) -> None:
        for url in self._made:
            self.server.drop(url)
