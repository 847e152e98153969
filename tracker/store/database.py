"""Opening a study: URL resolution, SQLite pragmas and schema migrations.

A study is any SQLAlchemy URL; a plain path means a SQLite file.  SQLite
connections get foreign keys on, a WAL journal and a busy timeout.  The schema
is created and upgraded only through the Alembic revisions shipped with the
package; a study written by a newer roletrail (an unknown revision) is refused.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from typing import Iterator
from pathlib import Path

from sqlalchemy import create_engine, event, inspect
from sqlalchemy.engine import Connection, Engine, make_url
from sqlalchemy.exc import ArgumentError

from tracker.errors import StoreError

__all__ = [
    "DEFAULT_DB",
    "BUSY_TIMEOUT_S",
    "resolve_url",
    "open_engine",
    "migrations_path",
    "upgrade",
    "current_revision",
    "head_revision",
    "lock_for_writing",
]

DEFAULT_DB = "roletrail.db"
BUSY_TIMEOUT_S = 30.0

#: Key of the PostgreSQL advisory lock that writers of a study hold (any fixed
#: number: advisory locks belong to one database, so one study's writers queue
#: only behind each other).
_PG_WRITE_LOCK = 0x524F4C45


def resolve_url(db: str | os.PathLike | None = None) -> str:
    """The SQLAlchemy URL of a study.

    ``db`` may be a URL (``sqlite:///x.db``, ``postgresql+psycopg://...``) or a
    path to a SQLite file.  ``None`` falls back to the ``ROLETRAIL_DB``
    environment variable, then to ``roletrail.db`` in the current folder.
    """
    if db is None:
        db = os.environ.get("ROLETRAIL_DB") or DEFAULT_DB
    text = os.fspath(db)
    if "://" in text:
        try:
            make_url(text)
        except ArgumentError as exc:
            raise StoreError(f"cannot read the database URL {text!r}: {exc}; give a path or a SQLAlchemy URL") from None
        return text
    return "sqlite:///" + str(Path(text).expanduser().resolve())


def sqlite_path(url: str) -> Path | None:
    """The file behind a SQLite URL, or None for other back ends and in-memory SQLite."""
    parsed = make_url(url)
    if parsed.get_backend_name() != "sqlite" or not parsed.database or parsed.database == ":memory:":
        return None
    return Path(parsed.database)


def open_engine(url: str, *, must_exist: bool = False) -> Engine:
    """Create an engine for a study, with SQLite set up for safe concurrent use.

    With ``must_exist`` a missing SQLite file is an error rather than a new study.
    """
    path = sqlite_path(url)
    if path is not None:
        if must_exist and not path.exists():
            raise StoreError(
                f"no study at {path}; import data first (roletrail import FILE ...) or point --db / ROLETRAIL_DB at a study"
            )
        if not path.parent.exists():
            raise StoreError(f"the folder {path.parent} does not exist; create it or choose another --db")
    try:
        engine = create_engine(url, future=True)
    except Exception as exc:  # missing driver, bad URL parts
        raise StoreError(f"cannot open {url!r}: {exc}; check the URL and that its driver is installed") from None
    if engine.dialect.name == "sqlite":

        @event.listens_for(engine, "connect")
        def _sqlite_pragmas(dbapi_conn, _record):  # pragma: no cover - exercised by every test
            # Python's sqlite3 opens transactions lazily and hides BEGIN; let
            # SQLAlchemy issue BEGIN itself so each import is one transaction.
            dbapi_conn.isolation_level = None
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute(f"PRAGMA busy_timeout={int(BUSY_TIMEOUT_S * 1000)}")
            if path is not None:
                cur.execute("PRAGMA journal_mode=WAL")
                cur.execute("PRAGMA synchronous=NORMAL")
            cur.close()

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn):  # pragma: no cover - exercised by every test
            # A write transaction (see write_transaction) starts IMMEDIATE: it takes
            # the write lock at once, so two writers wait for each other
            # (busy_timeout) instead of failing half-way.  Reads start a plain
            # deferred transaction: in WAL mode they see the last committed state
            # and neither wait for a writer nor block one.
            conn.exec_driver_sql("BEGIN IMMEDIATE" if conn.info.get(_WRITING) else "BEGIN")

    return engine


_WRITING = "roletrail_writing"


@contextmanager
def write_transaction(engine: Engine, *, bulk: bool = False) -> Iterator[Connection]:
    """One write transaction: waits for other writers, then holds the write lock until commit.

    ``bulk`` (SQLite): foreign keys are not checked row by row during the
    transaction (``PRAGMA foreign_keys`` can only change outside one).  For
    bulk loads whose ids all come from the same transaction; ``roletrail
    check`` verifies every reference afterwards.
    """
    with engine.connect() as conn:
        conn.info[_WRITING] = True
        driver = conn.connection.driver_connection if bulk and engine.dialect.name == "sqlite" else None
        try:
            if driver is not None:
                driver.execute("PRAGMA foreign_keys=OFF")
            with conn.begin():
                lock_for_writing(conn)
                yield conn
        finally:
            conn.info.pop(_WRITING, None)
            if driver is not None:
                driver.execute("PRAGMA foreign_keys=ON")


def lock_for_writing(conn) -> None:
    """Make a write transaction wait until no other roletrail process writes to the study.

    SQLite transactions already start with ``BEGIN IMMEDIATE`` (see
    :func:`open_engine`).  On PostgreSQL a transaction-level advisory lock
    plays that part: writers queue (for at most ``BUSY_TIMEOUT_S``), readers
    never wait (each sees the last committed state), and the lock goes with
    the commit or rollback.  Call it first in every write transaction.
    """
    if conn.dialect.name != "postgresql":
        return
    from sqlalchemy.exc import OperationalError

    conn.exec_driver_sql(f"SET LOCAL lock_timeout = '{int(BUSY_TIMEOUT_S * 1000)}ms'")
    try:
        conn.exec_driver_sql(f"SELECT pg_advisory_xact_lock({_PG_WRITE_LOCK})")
    except OperationalError:
        raise StoreError(
            f"the study is busy: another roletrail process has been writing to it for over {BUSY_TIMEOUT_S:.0f} s; "
            "wait for it to finish and try again"
        ) from None


def migrations_path() -> Path:
    """The folder holding the Alembic environment (installed copy or source tree)."""
    here = Path(__file__).resolve().parent.parent
    for candidate in (here / "_migrations", here.parent / "migrations"):
        if (candidate / "env.py").exists():
            return candidate
    raise StoreError("roletrail's migrations are missing from this installation; reinstall roletrail")


def _alembic_config(connection):
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(migrations_path()))
    cfg.attributes["connection"] = connection
    return cfg


def head_revision() -> str:
    """The newest schema revision this version of roletrail knows."""
    from alembic.script import ScriptDirectory

    cfg = _alembic_config(None)
    return ScriptDirectory.from_config(cfg).get_current_head()


def current_revision(connection) -> str | None:
    """The schema revision a study is at (None for an empty database)."""
    from alembic.runtime.migration import MigrationContext

    return MigrationContext.configure(connection).get_current_revision()


def upgrade(engine: Engine, revision: str = "head") -> None:
    """Bring a study's schema to ``revision`` (default: the newest).

    Refuses a study whose revision this roletrail does not know (made by a newer
    version), naming the fix.
    """
    from alembic import command
    from alembic.script import ScriptDirectory

    with engine.connect() as conn:
        found = current_revision(conn)
    script = ScriptDirectory.from_config(_alembic_config(None))
    if found is not None:
        try:
            script.get_revision(found)
        except Exception:
            raise StoreError(
                f"this study was written by a newer roletrail (schema revision {found}); "
                "upgrade roletrail (pip install -U roletrail) to open it"
            ) from None
        if found == script.get_current_head() and revision == "head":
            return
    elif not _looks_empty(engine):
        raise StoreError("this database holds tables that are not a roletrail study; choose another --db")
    with write_transaction(engine) as conn:
        if revision == "head" and current_revision(conn) == script.get_current_head():
            return  # another process upgraded it while this one waited
        command.upgrade(_alembic_config(conn), revision)


def downgrade(engine: Engine, revision: str) -> None:
    """Take a study's schema back to ``revision`` (``"base"`` removes every table)."""
    from alembic import command

    with write_transaction(engine) as conn:
        command.downgrade(_alembic_config(conn), revision)


def _looks_empty(engine: Engine) -> bool:
    names = set(inspect(engine).get_table_names())
    return not (names - {"alembic_version"})
