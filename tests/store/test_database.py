"""The store's schema comes only from Alembic revisions; older studies upgrade, newer ones are refused."""

from __future__ import annotations

import pytest
from sqlalchemy import inspect, text

from tracker.errors import StoreError
from tracker.store.database import downgrade, head_revision, open_engine, resolve_url, upgrade
from tracker.store.models import Base


def test_upgrade_from_empty_to_head_and_back_down(new_db):
    # Alembic's own upgrade/downgrade commands run every revision in turn.
    engine = open_engine(resolve_url(new_db("s.db", empty=True)))
    upgrade(engine)
    names = set(inspect(engine).get_table_names())
    assert {"actors", "actor_aliases", "relations", "batches", "events", "periods", "ties"} <= names
    with engine.connect() as conn:
        assert conn.execute(text("SELECT version_num FROM alembic_version")).scalar_one() == head_revision()
    downgrade(engine, "base")
    assert set(inspect(engine).get_table_names()) <= {"alembic_version"}
    upgrade(engine)
    assert {"events", "ties"} <= set(inspect(engine).get_table_names())


def test_migrated_schema_matches_the_models(new_db):
    # Reference: alembic.autogenerate.compare_metadata finds no difference.
    from alembic.autogenerate import compare_metadata
    from alembic.runtime.migration import MigrationContext

    engine = open_engine(resolve_url(new_db("s.db", empty=True)))
    upgrade(engine)
    with engine.connect() as conn:
        diff = compare_metadata(MigrationContext.configure(conn), Base.metadata)
    assert diff == []


def test_study_from_a_newer_version_is_refused(new_db):
    engine = open_engine(resolve_url(new_db("s.db", empty=True)))
    upgrade(engine)
    with engine.begin() as conn:
        conn.execute(text("UPDATE alembic_version SET version_num = 'f00dfeed'"))
    with pytest.raises(StoreError, match="newer roletrail"):
        upgrade(engine)


def test_foreign_table_is_not_taken_for_a_study(new_db):
    engine = open_engine(resolve_url(new_db("other.db", empty=True)))
    with engine.begin() as conn:
        conn.execute(text("CREATE TABLE invoices (id INTEGER)"))
    with pytest.raises(StoreError, match="not a roletrail study"):
        upgrade(engine)


def test_sqlite_pragmas(tmp_path):
    engine = open_engine(resolve_url(tmp_path / "s.db"))
    with engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() >= 1000


def test_url_resolution(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("ROLETRAIL_DB", raising=False)
    assert resolve_url(None) == f"sqlite:///{tmp_path / 'roletrail.db'}"
    monkeypatch.setenv("ROLETRAIL_DB", str(tmp_path / "env.db"))
    assert resolve_url(None).endswith("env.db")
    assert resolve_url("postgresql+psycopg://u@localhost/x") == "postgresql+psycopg://u@localhost/x"
    assert resolve_url("sqlite://") == "sqlite://"


def test_missing_study_for_reading(tmp_path):
    from tracker.api import Study

    with pytest.raises(StoreError, match="no study at"):
        Study(tmp_path / "absent.db", create=False)
    assert not (tmp_path / "absent.db").exists()


def test_in_memory_url_works():
    from tracker.api import Study

    with Study("sqlite://") as s:
        assert s.periods() == []
