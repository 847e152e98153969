"""The same study on SQLite and on PostgreSQL: text order and concurrent writers.

Each test runs on both back ends (see tests/pg.py); the PostgreSQL run needs
``ROLETRAIL_TEST_PG``.
"""

from __future__ import annotations

import threading
import time

import pandas as pd
import pytest

from tests.conftest import table_dump
from tracker.api import Study

# Upper and lower case, digits, an accented capital: a locale-aware sort (ICU en-US,
# glibc en_US.UTF-8) orders these differently from code-point order.
LABELS = ["agency b", "Agency C", "agency a", "Ärzte", "zeta", "Zeta", "10 Downing", "9 Elms"]


def test_text_sorts_in_code_point_order_whatever_the_server_locale(new_db, write_csv):
    # Reference: Python's str ordering is code-point order, which is SQLite's
    # BINARY collation for UTF-8 text (sqlite.org/datatype3.html, "Collating
    # Sequences").  Actor order fixes the rows of every matrix, so a fit with a
    # given seed must not depend on the server's locale.
    db = new_db("s.db", icu_locale="en-US")
    rows = [(a, b, "2019", rel) for a, b, rel in zip(LABELS, LABELS[1:] + LABELS[:1], ["aid", "Aid", "boats"] * 3)]
    with Study(db) as study:
        study.import_events(write_csv(rows), source="source", target="target", date="date", relation="kind")
        assert study.snapshot("2019").actors == tuple(sorted(LABELS))
        assert study.actors()["actor"].tolist() == sorted(LABELS)
        assert [r.name for r in study.store.relations()] == sorted(["aid", "Aid", "boats"])
        study.fit(positions=2, draws=0)
        members = study.memberships()
        assert members["actor"].tolist() == sorted(LABELS)


def _events(write_csv, name, actors, year):
    rows = [(a, b, f"{year}-05-01", "aid") for a in actors for b in actors if a != b]
    return write_csv(rows, name=name)


def test_concurrent_imports_wait_for_each_other(new_db, write_csv):
    # Two imports that create the same new actors start while a third writer
    # holds the study: each must wait its turn and succeed, and the study must
    # equal the one made by importing the files one after the other.
    shared = [f"org {i}" for i in range(40)]
    first = _events(write_csv, "a.csv", shared[:30], 2019)
    second = _events(write_csv, "b.csv", shared[10:], 2019)
    db, serial = new_db("s.db"), new_db("serial.db")
    with Study(serial) as study:
        for path in (first, second):
            study.import_events(path, source="source", target="target", date="date", relation="kind")
        expected = study.summary()
    errors, reports = [], []

    def run(path):
        try:
            with Study(db) as study:
                reports.append(study.import_events(path, source="source", target="target", date="date", relation="kind"))
        except Exception as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    with Study(db) as holder:
        with holder.store._write():
            threads = [threading.Thread(target=run, args=(p,)) for p in (first, second)]
            for t in threads:
                t.start()
            time.sleep(0.5)
            assert not reports and not errors  # both are waiting for the holder
        for t in threads:
            t.join(60)
        assert errors == [] and len(reports) == 2
        pd.testing.assert_frame_equal(holder.summary(), expected)
        assert holder.store.counts()["actors"] == 40


def test_a_waiting_writer_gives_up_with_one_line_and_changes_nothing(new_db, write_csv, monkeypatch):
    import tracker.store.database as database
    from click.testing import CliRunner

    from tracker.cli import main

    monkeypatch.setattr(database, "BUSY_TIMEOUT_S", 0.5)
    db = new_db("s.db")
    path = _events(write_csv, "a.csv", ["x", "y", "z"], 2019)
    with Study(db) as holder:
        before = table_dump(holder)
        with holder.store._write():
            result = CliRunner().invoke(main, ["--db", str(db), "import", str(path), "--source", "source",
                                               "--target", "target", "--date", "date"])
        assert result.exit_code == 2, result.output
        assert result.output.count("\n") == 1 and "the study is busy" in result.output, result.output
        assert table_dump(holder) == before


def test_readers_do_not_wait_for_a_writer_on_a_server(backend, new_db, write_csv):
    if backend == "sqlite":
        pytest.skip("SQLite readers wait for a writer (every transaction begins IMMEDIATE)")
    db = new_db("s.db")
    with Study(db) as study:
        study.import_events(_events(write_csv, "a.csv", ["x", "y", "z"], 2019), source="source", target="target", date="date")
        expected = study.summary()
        with study.store._write() as conn:
            study.store._set_setting(conn, "note", "being written")
            start = time.perf_counter()
            with Study(db, create=False) as reader:
                pd.testing.assert_frame_equal(reader.summary(), expected)
                assert reader.store.setting("note") is None  # not committed yet
            assert time.perf_counter() - start < 5


def test_snapshots_read_together_equal_snapshots_read_one_by_one(new_db, write_csv):
    # Two code paths (one period, or every period with the study read once) must agree:
    # zero weights (presence without a tie), an undirected relation, roster-only actors.
    rows = [("a", "b", "2019-01-01", "2"), ("b", "c", "2019-02-01", "0"), ("c", "a", "2020-01-01", "1"),
            ("d", "e", "2020-03-01", "0"), ("B", "a", "2021-01-01", "1.5")]
    with Study(new_db("s.db")) as study:
        study.import_events(write_csv(rows, header=("source", "target", "date", "w")), source="source",
                            target="target", date="date", weight="w", relation_name="aid")
        study.import_events(write_csv(rows[:3], name="u.csv", header=("source", "target", "date", "w")),
                            source="source", target="target", date="date", weight="w", relation_name="talk",
                            undirected=True)
        study.import_actors(write_csv([("z", "2020", ""), ("a", "", "2019")], name="r.csv", header=("actor", "from", "until")),
                            first="from", last="until")
        together = list(study.store.snapshots())
        for snap in together:
            alone = study.snapshot(snap.period)
            assert alone.actors == snap.actors and alone.relations == snap.relations
            for x, y in zip(alone.matrices, snap.matrices):
                assert (x != y).nnz == 0
        present = {s.period: s.actors for s in together}
        # by definition: event ends of the period (any weight) plus roster actors alive then
        assert present == {"2019": ("a", "b", "c"), "2020": ("a", "c", "d", "e", "z"), "2021": ("B", "a", "z")}


def test_ties_naming_a_missing_actor_are_reported_not_misplaced(tmp_path, write_csv):
    import sqlite3

    from tracker.errors import StoreError

    path = tmp_path / "s.db"
    with Study(path) as study:
        study.import_events(write_csv([("a", "b", "2019", "x")]), source="source", target="target", date="date")
    with sqlite3.connect(path) as conn:  # another program, foreign keys off (sqlite3's default)
        conn.execute("UPDATE ties SET source_id = 999")
    with Study(path) as study:
        with pytest.raises(StoreError, match="period 2019 name actors that do not exist"):
            study.snapshot("2019")
        with pytest.raises(StoreError, match="damaged"):
            study.summary()
