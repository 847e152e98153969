"""The command line, driven through click's CliRunner, reading the study back."""

from __future__ import annotations

import io
import json

import pandas as pd
from click.testing import CliRunner

from tests.conftest import table_dump
from tracker.api import Study
from tracker.cli import main

ROWS = "from_org,to_org,event_date,kind\nHarbour Office,Coast Watch,2019-03-01,exercise\nCoast Watch,Harbour Office,2019-05-01,exercise\nCoast Watch,Fire Brigade,2019-06-01,aid\nFire Brigade,Fire Brigade,2019-06-02,aid\nFire Brigade,Harbour Office,2020-01-01,aid\n"


def _run(args, db, **kw):
    return CliRunner().invoke(main, ["--db", str(db), *args], catch_exceptions=False, **kw)


def _state(db):
    """Every row of every table (SQLite's WAL journal leaves the main file's bytes alone, so compare rows)."""
    with Study(db, create=False) as study:
        return table_dump(study)


def test_import_then_summary_csv_and_json(tmp_path, new_db):
    (tmp_path / "events.csv").write_text(ROWS)
    db = new_db("s.db")
    result = _run(["import", str(tmp_path / "events.csv"), "--source", "from_org", "--target", "to_org",
                   "--date", "event_date", "--relation", "kind"], db)
    assert result.exit_code == 0, result.output
    assert "4 events of 5 rows, 1 self-ties dropped" in result.output
    with Study(db, create=False) as study:
        assert study.store.counts()["events"] == 4
    csv_out = _run(["summary", "--format", "csv"], db)
    frame = pd.read_csv(io.StringIO(csv_out.output))
    assert list(frame.columns[:8]) == ["period", "relation", "actors", "ties", "density", "reciprocity", "isolates", "mean_value"]
    assert frame.set_index(["period", "relation"]).loc[(2019, "exercise"), "reciprocity"] == 1.0
    records = json.loads(_run(["summary", "--format", "json"], db).output)
    assert records[0]["period"] == "2019" and records[0]["ties"] == 1
    _run(["summary", "--format", "csv", "-o", str(tmp_path / "s.csv")], db)
    assert pd.read_csv(tmp_path / "s.csv").shape == frame.shape
    table = _run(["summary"], db).output
    assert "density" in table and "zero-block" in table  # sparse-data note


def test_env_var_selects_the_study(tmp_path, new_db):
    (tmp_path / "events.csv").write_text(ROWS)
    db = new_db("env.db")
    result = CliRunner().invoke(main, ["import", str(tmp_path / "events.csv"), "--source", "from_org", "--target",
                                       "to_org", "--date", "event_date", "--relation-name", "coop"],
                                env={"ROLETRAIL_DB": str(db)})
    assert result.exit_code == 0, result.output
    with Study(db, create=False) as study:
        assert study.store.counts()["events"] == 4


def test_user_errors_are_one_line_nonzero_and_leave_the_study_unchanged(tmp_path, new_db):
    (tmp_path / "events.csv").write_text(ROWS)
    (tmp_path / "bad.csv").write_text("from_org,to_org,event_date,kind\na,b,20190-01-01,x\n")
    db = new_db("s.db")
    args = ["--source", "from_org", "--target", "to_org", "--date", "event_date", "--relation", "kind"]
    _run(["import", str(tmp_path / "events.csv"), *args], db)
    before = _state(db)
    for bad in (
        ["import", str(tmp_path / "bad.csv"), *args],
        ["import", str(tmp_path / "events.csv"), *args],  # same content again
        ["import", str(tmp_path / "missing.csv"), *args],
        ["import", str(tmp_path / "events.csv"), "--source", "nope", "--target", "to_org", "--date", "event_date"],
        ["import", str(tmp_path / "events.csv"), "--source", "from_org", "--target", "to_org"],  # no date nor period
    ):
        result = CliRunner().invoke(main, ["--db", str(db), *bad])
        assert result.exit_code == 2, result.output
        lines = [l for l in result.output.splitlines() if l.strip()]
        assert len(lines) == 1 and lines[0].startswith("roletrail: error:"), result.output
        assert "Traceback" not in result.output
    assert _state(db) == before
    with Study(db, create=False) as study:
        assert study.store.counts()["events"] == 4 and len(study.batches()) == 1


def test_reading_a_missing_study_is_an_error_and_creates_nothing(tmp_path):
    result = CliRunner().invoke(main, ["--db", str(tmp_path / "none.db"), "summary"])
    assert result.exit_code == 2 and "no study at" in result.output
    assert not (tmp_path / "none.db").exists()


def test_alias_recut_actors_batches(tmp_path, new_db):
    (tmp_path / "events.csv").write_text("a,b,d\nCoast Watch,Port,2019-01-01\nCoastwatch,Port,2020-06-01\n")
    db = new_db("s.db")
    _run(["import", str(tmp_path / "events.csv"), "--source", "a", "--target", "b", "--date", "d"], db)
    assert "merged" in _run(["alias", "Coastwatch", "Coast Watch"], db).output
    actors = pd.read_csv(io.StringIO(_run(["actors", "--format", "csv"], db).output))
    assert set(actors["actor"]) == {"Coast Watch", "Port"}
    assert actors.set_index("actor").loc["Coast Watch", "aliases"] == "Coastwatch"
    assert "into 2 periods" in _run(["recut", "--period", "2y"], db).output
    summary = pd.read_csv(io.StringIO(_run(["summary", "--format", "csv"], db).output))
    assert summary["period"].tolist() == ["2018-2019", "2020-2021"]
    batches = pd.read_csv(io.StringIO(_run(["batches", "--format", "csv"], db).output))
    assert batches["rows_loaded"].tolist() == [2]


def test_hostile_labels_print_as_typed(tmp_path, new_db):
    (tmp_path / "events.csv").write_text("a,b,d\n[bold]x[/bold],<img src=x>,2019\n")
    db = new_db("s.db")
    _run(["import", str(tmp_path / "events.csv"), "--source", "a", "--target", "b", "--date", "d"], db)
    out = _run(["actors"], db).output
    assert "[bold]x[/bold]" in out and "<img src=x>" in out


def test_check_reports_ok_then_a_damaged_tie_and_repairs_it(tmp_path):
    import sqlite3

    (tmp_path / "events.csv").write_text(ROWS)
    db = tmp_path / "check.db"
    _run(["import", str(tmp_path / "events.csv"), "--source", "from_org", "--target", "to_org",
          "--date", "event_date", "--relation", "kind"], db)
    ok = CliRunner().invoke(main, ["--db", str(db), "check"])
    assert ok.exit_code == 0 and "study ok" in ok.output
    with sqlite3.connect(db) as conn:
        conn.execute("UPDATE ties SET value = value + 5 WHERE rowid = (SELECT min(rowid) FROM ties)")
    bad = CliRunner().invoke(main, ["--db", str(db), "check"])
    assert bad.exit_code == 1 and "problem" in bad.output and "Traceback" not in bad.output
    fixed = CliRunner().invoke(main, ["--db", str(db), "check", "--repair"])
    assert fixed.exit_code == 0 and "study ok" in fixed.output


def test_long_listings_use_a_plain_table():
    from tracker.output import PLAIN_ROWS, render

    frame = pd.DataFrame({"actor": [f"a{i}" for i in range(PLAIN_ROWS + 1)], "value": range(PLAIN_ROWS + 1)})
    text = render(frame, "table")
    lines = text.splitlines()
    assert lines[0].split() == ["actor", "value"] and len(lines) == PLAIN_ROWS + 3
    assert lines[-1].split() == [f"a{PLAIN_ROWS}", str(PLAIN_ROWS)]
