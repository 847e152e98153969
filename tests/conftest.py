"""Shared fixtures: temporary studies and small files written on the fly."""

from __future__ import annotations

import csv
import os
from pathlib import Path

import pytest
from hypothesis import settings as hypothesis_settings

from tests.pg import PG_ENV, BACKENDS, Databases, PgServer, pg_url

# Property tests explore fresh examples on a developer's machine; under CI
# (CI=true) they replay a fixed sequence, so a run on the same commit gives the
# same verdict and a failure can be reproduced.
hypothesis_settings.register_profile("ci", derandomize=True, deadline=None, print_blob=True)
hypothesis_settings.register_profile("dev", deadline=None, print_blob=True)
hypothesis_settings.load_profile("ci" if os.environ.get("CI") else "dev")


@pytest.fixture(scope="session")
def pg_server():
    """The PostgreSQL test server (see tests/pg.py), or a skip when ROLETRAIL_TEST_PG is unset."""
    url = pg_url()
    if url is None:
        pytest.skip(f"PostgreSQL run: set {PG_ENV} to a server URL (.ci/run starts one)")
    server = PgServer(url)
    yield server
    server.close()


@pytest.fixture(params=BACKENDS)
def backend(request) -> str:
    """The database back end a store test runs on: "sqlite", or "postgresql" when ROLETRAIL_TEST_PG is set."""
    if request.param == "postgresql":
        request.getfixturevalue("pg_server")
    return request.param


@pytest.fixture
def new_db(backend, tmp_path: Path, request):
    """new_db(name="study.db") -> a location for a new study: a SQLite path, or the URL of a fresh PostgreSQL database."""
    server = request.getfixturevalue("pg_server") if backend == "postgresql" else None
    made = Databases(backend, tmp_path, server)
    yield made
    made.close()


@pytest.fixture
def study_path(new_db):
    """Where the ``study`` fixture's study lives: a path (SQLite) or a URL (PostgreSQL)."""
    return new_db("study.db")


@pytest.fixture
def study(study_path):
    from tracker.api import Study

    with Study(study_path) as s:
        yield s


@pytest.fixture
def pool_for_every_batch(monkeypatch):
    """With more than one worker, every batch of three or more tasks reaches the process pool.

    ``map_tasks`` keeps a batch in this process when a pool would not finish it
    sooner (:func:`tracker.execution.pool_pays`); the small studies of the tests
    are such batches.  A test that compares one worker with a pool sets the
    pool's costs to zero, so that the tasks after the first (timed here) run
    in worker processes.
    """
    from tracker import execution

    for name in ("POOL_START_SECONDS", "POOL_WARM_SECONDS", "TASK_DISPATCH_SECONDS"):
        monkeypatch.setattr(execution, name, 0.0)
    monkeypatch.setattr(execution, "SHIP_BYTES_PER_SECOND", float("inf"))


@pytest.fixture
def write_csv(tmp_path: Path):
    """write_csv(rows, name=..., header=..., delimiter=..., bom=False) -> path."""

    def _write(rows, name="events.csv", header=("source", "target", "date", "kind"), delimiter=",", bom=False):
        path = tmp_path / name
        with open(path, "w", encoding="utf-8-sig" if bom else "utf-8", newline="") as handle:
            writer = csv.writer(handle, delimiter=delimiter)
            if header is not None:
                writer.writerow(header)
            writer.writerows(rows)
        return path

    return _write


def table_dump(study) -> dict:
    """Every row of every table, for 'the study is unchanged' checks."""
    from sqlalchemy import inspect, text

    out = {}
    with study.engine.connect() as conn:
        for name in sorted(inspect(conn).get_table_names()):
            out[name] = sorted(map(tuple, conn.execute(text(f'SELECT * FROM "{name}"')).all()), key=repr)
    return out
