"""Every schema revision upgrades to the newest with its data kept, row for row.

For each revision in ``migrations/versions`` (walked with Alembic's
ScriptDirectory, so a new revision is covered without editing this file):
build a study at that revision with the revisions themselves, fill every table
it has with rows written by plain SQL inserts (values chosen from the reflected
column types, foreign keys pointing at rows that exist), upgrade to the head
revision, and read every row back: each column that existed before must hold
the same value.  Columns added later must accept the old rows (nullable or
with a default).
"""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import inspect, text, types

from tracker.store.database import _alembic_config, head_revision, open_engine, resolve_url, upgrade

ROWS = 3  # per table; the last row leaves every nullable column empty


def _revisions() -> list[str]:
    from alembic.script import ScriptDirectory

    script = ScriptDirectory.from_config(_alembic_config(None))
    return [rev.revision for rev in reversed(list(script.walk_revisions("base", "heads")))]


def test_history_is_one_line_ending_at_head():
    revisions = _revisions()
    assert revisions and revisions[-1] == head_revision()
    assert len(set(revisions)) == len(revisions)


def _value(table: str, column: dict, i: int, fks: dict, unique: set):
    """A value for row ``i`` (1-based) of a column, by its reflected type."""
    name = column["name"]
    if name in fks:
        return i  # the parent table's row i (parents are filled first, ids 1..ROWS)
    if column["nullable"] and i == ROWS and name not in unique:
        return None
    kind = column["type"]
    if isinstance(kind, types.Boolean):
        return i % 2
    if isinstance(kind, types.Integer):
        return i
    if isinstance(kind, (types.Float, types.Numeric)):
        return i + 0.25
    if isinstance(kind, types.DateTime):
        return dt.datetime(2020, 1, i, 12, 30, 0).isoformat(" ")
    if isinstance(kind, types.Date):
        return dt.date(2020, 1, i).isoformat()
    length = getattr(kind, "length", None) or 1000
    return f"{table[:3]}{name[:3]}{i}"[-length:]


def _fill(engine) -> dict[str, list[dict]]:
    """Insert ROWS rows into every table (parents first); return them as read back."""
    # One connection for reading the schema and writing: every SQLite
    # transaction of a study starts with BEGIN IMMEDIATE, so a second
    # connection would wait for this one.
    with engine.begin() as conn:
        insp = inspect(conn)
        order = [name for name, _ in insp.get_sorted_table_and_fkc_names() if name and name != "alembic_version"]
        for table in order:
            columns = insp.get_columns(table)
            fks = {c: fk["referred_table"] for fk in insp.get_foreign_keys(table) for c in fk["constrained_columns"]}
            unique = {c for u in insp.get_unique_constraints(table) for c in u["column_names"]}
            unique |= set(insp.get_pk_constraint(table)["constrained_columns"])
            names = [c["name"] for c in columns]
            statement = text(
                f'INSERT INTO "{table}" ({", ".join(chr(34) + n + chr(34) for n in names)}) '
                f'VALUES ({", ".join(":p" + str(k) for k in range(len(names)))})'
            )
            for i in range(1, ROWS + 1):
                conn.execute(statement, {f"p{k}": _value(table, c, i, fks, unique) for k, c in enumerate(columns)})
    return _read(engine)


def _read(engine, only: dict[str, list[dict]] | None = None) -> dict[str, list[dict]]:
    out = {}
    with engine.connect() as conn:
        insp = inspect(conn)
        for table in sorted(insp.get_table_names()):
            if table == "alembic_version" or (only is not None and table not in only):
                continue
            names = [c["name"] for c in insp.get_columns(table)]
            if only is not None:
                names = [n for n in names if n in only[table][0]] if only[table] else names
            rows = conn.execute(text(f'SELECT {", ".join(chr(34) + n + chr(34) for n in names)} FROM "{table}"')).mappings().all()
            out[table] = sorted((dict(r) for r in rows), key=lambda r: [repr(r[n]) for n in names])
    return out


@pytest.mark.parametrize("revision", _revisions())
def test_upgrade_from_each_revision_keeps_every_row(tmp_path, revision):
    engine = open_engine(resolve_url(tmp_path / f"at_{revision}.db"))
    upgrade(engine, revision)
    with engine.connect() as conn:
        assert conn.exec_driver_sql("SELECT version_num FROM alembic_version").scalar_one() == revision
    before = _fill(engine)
    assert before and all(len(rows) == ROWS for rows in before.values())
    upgrade(engine)  # to head, as opening the study with a newer roletrail does
    with engine.connect() as conn:
        assert conn.exec_driver_sql("SELECT version_num FROM alembic_version").scalar_one() == head_revision()
        assert conn.exec_driver_sql("PRAGMA foreign_key_check").all() == []
    after = _read(engine, only=before)
    assert after.keys() == before.keys(), "a table was dropped"
    for table, rows in before.items():
        assert after[table] == rows, f"rows of {table} changed in the upgrade from {revision}"
    engine.dispose()
