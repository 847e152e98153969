"""Helpers shared by the store modules: the base class with the write transaction, SQL snippets."""

from __future__ import annotations

from contextlib import contextmanager
from datetime import datetime, timezone
from typing import Iterable, Iterator, Sequence

import numpy as np
from sqlalchemy.engine import Connection, Engine
from sqlalchemy.ext.compiler import compiles
from sqlalchemy.sql.elements import ColumnElement
from sqlalchemy.sql.visitors import InternalTraversal

from tracker.errors import StoreError
from tracker.store.database import write_transaction


_IN_CHUNK = 500  # bound on parameters in one IN (...) list


def _now() -> datetime:
    return datetime.now(timezone.utc).replace(tzinfo=None, microsecond=0)


class ImportReport(dict):
    """What an import did: batch id, rows read and loaded, self-ties dropped, new actors..."""


class StoreBase:
    """The engine and the one way to write (shared by the store parts)."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine

    @contextmanager
    def _write(self, *, bulk: bool = False) -> Iterator[Connection]:
        """One write transaction, after any other process's write to the study (see ``lock_for_writing``)."""
        with write_transaction(self.engine, bulk=bulk) as conn:
            yield conn


def _num(value):
    """A float for the database: None for missing or non-finite values."""
    if value is None:
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if np.isfinite(value) else None


def _bind(name: str):
    from sqlalchemy import bindparam

    return bindparam(name)


class _code_points(ColumnElement):
    """A text column ordered by code point on every back end.

    SQLite compares text byte by byte (its BINARY collation, which is
    code-point order for UTF-8, like Python's ``sorted``).  A PostgreSQL
    server sorts by its locale instead (en-US puts "agency a" before
    "Agency C"); actor order fixes the rows of every matrix and so a seeded
    fit's tie-breaks, so the "C" collation (byte order) is asked for there.
    """

    inherit_cache = True
    _traverse_internals = [("column", InternalTraversal.dp_clauseelement)]

    def __init__(self, column) -> None:
        self.column = column
        self.type = column.type


@compiles(_code_points)
def _code_points_default(element, compiler, **kw):
    return compiler.process(element.column, **kw)


@compiles(_code_points, "postgresql")
def _code_points_postgresql(element, compiler, **kw):
    return compiler.process(element.column, **kw) + ' COLLATE "C"'


def _damaged(prow) -> StoreError:
    return StoreError(
        f"the study is damaged: ties or events of period {prow.label} name actors that do not exist; "
        "restore it from a backup, or find and remove the bad rows with roletrail check"
    )


def _driver_rows(conn: Connection, stmt) -> list[tuple]:
    """Every row of a query as the driver's plain tuples.

    Skips SQLAlchemy's row objects and result processing, several times
    faster for the many thousands of rows of a period's ties; only for
    integer, float and text columns, which every driver returns as such.
    """
    result = conn.execute(stmt)
    try:
        return result.cursor.fetchall()
    finally:
        result.close()


_EVENT_COLUMNS = ("batch_id", "row", "source_id", "target_id", "relation_id", "occurred", "period_id", "weight")


def _copy_rows(conn: Connection, table: str, columns: Sequence[str], rows: Iterable[tuple]) -> None:
    """Bulk-load rows with PostgreSQL's COPY, inside the connection's open transaction.

    COPY streams every row in one command, several times faster than batched
    INSERTs (psycopg 3 writes the rows; None becomes NULL).  ``table`` and
    ``columns`` are fixed names from this module, never user input.
    """
    names = ", ".join(f'"{c}"' for c in columns)
    with conn.connection.driver_connection.cursor() as cursor:
        with cursor.copy(f'COPY "{table}" ({names}) FROM STDIN') as copy:
            for row in rows:
                copy.write_row(row)

