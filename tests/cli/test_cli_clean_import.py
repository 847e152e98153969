"""Clean data in, through the command line (CliRunner), reading the study back.

Names normalised, duplicates counted and dropped, a forgotten --relation
flagged, bad rows reported with editor lines, several date formats, Excel
files, folders of files, likely duplicate actors as alias commands.
"""

from __future__ import annotations

import csv
import io
import unicodedata

import pandas as pd
import pytest
from click.testing import CliRunner

from tests.conftest import table_dump
from tracker.api import Study
from tracker.cli import main

HEADER = "from_org,to_org,event_date,kind\n"
COLS = ["--source", "from_org", "--target", "to_org", "--date", "event_date"]


def _run(args, db):
    return CliRunner(mix_stderr=False).invoke(main, ["--db", str(db), *args], catch_exceptions=False) if _mix() else \
        CliRunner().invoke(main, ["--db", str(db), *args], catch_exceptions=False)


def _mix() -> bool:
    import inspect

    return "mix_stderr" in inspect.signature(CliRunner.__init__).parameters


def _events(db) -> pd.DataFrame:
    with Study(db, create=False) as study:
        with study.engine.connect() as conn:
            return pd.read_sql(
                "SELECT e.row, s.label AS source, t.label AS target, e.occurred, e.weight, e.n_events "
                "FROM events e JOIN actors s ON s.id = e.source_id JOIN actors t ON t.id = e.target_id ORDER BY e.id", conn)


def test_composed_and_decomposed_names_are_one_actor(tmp_path, new_db):
    composed = unicodedata.normalize("NFC", "Agence Sécurité")
    decomposed = unicodedata.normalize("NFD", "Agence  Sécurité ")  # also a double space and a trailing one
    assert composed != decomposed
    path = tmp_path / "e.csv"
    path.write_text(HEADER + f"{composed},Port Unit,2019-01-01,x\n{decomposed},Port Unit,2019-02-01,x\n", encoding="utf-8")
    db = new_db("s.db")
    assert _run(["import", str(path), *COLS, "--relation", "kind"], db).exit_code == 0
    with Study(db, create=False) as study:
        assert sorted(study.actors()["actor"]) == ["Agence Sécurité", "Port Unit"]
        assert study.snapshot("2019").matrices[0].sum() == 2  # one tie of two events


def test_duplicate_rows_and_events_already_in_the_study_are_counted_then_dropped(tmp_path, new_db):
    first = tmp_path / "a.csv"
    first.write_text(HEADER + "A,B,2019-03-01,x\nA,B,2019-03-01,x\nB,C,2019-04-01,x\n")
    db = new_db("s.db")
    out = _run(["import", str(first), *COLS, "--relation", "kind"], db)
    assert out.exit_code == 0
    assert "1 rows repeat an earlier row of the file and 0 repeat an event already in the study" in out.stderr
    assert len(_events(db)) == 3  # kept by default
    # the same event with the date written another way is found after parsing the date
    second = tmp_path / "b.csv"
    second.write_text(HEADER + "A,B,01/03/2019,x\nC,D,02/03/2019,x\n")
    out = _run(["import", str(second), *COLS, "--relation", "kind", "--date-format", "%d/%m/%Y", "--duplicates", "drop"], db)
    assert out.exit_code == 0
    assert "0 rows repeat an earlier row of the file and 1 repeat an event already in the study" in out.stderr and "dropped" in out.stderr
    events = _events(db)
    assert len(events) == 4 and list(events.tail(1)[["source", "target"]].iloc[0]) == ["C", "D"]
    with Study(db, create=False) as study:
        assert study.batches()["duplicates"].tolist() == [1, 1]
        assert study.check() == []


def test_forgotten_relation_is_flagged(tmp_path, new_db):
    path = tmp_path / "a.csv"
    path.write_text(HEADER + "A,B,2019-03-01,aid\n")
    db = new_db("s.db")
    assert "warning" not in _run(["import", str(path), *COLS, "--relation", "kind"], db).stderr
    other = tmp_path / "b.csv"
    other.write_text(HEADER + "C,B,2019-03-01,aid\n")
    out = _run(["import", str(other), *COLS], db)
    assert out.exit_code == 0
    assert "created the relation 'tie' (the default when neither --relation nor --relation-name is given)" in out.stderr
    assert "already has 'aid'" in out.stderr
    with Study(db, create=False) as study:
        assert set(study.summary()["relation"]) == {"aid", "tie"}


def test_errors_report_lists_every_bad_row_with_its_editor_line_and_imports_the_rest(tmp_path, new_db):
    path = tmp_path / "e.csv"
    # line 1 header, 2 good, 3 bad date, 4 a quoted label spanning two lines (good), 6 no source, 7 good, 8 bad weight
    path.write_text(
        "from_org,to_org,event_date,kind,w\n"
        "A,B,2019-01-01,x,1\n"
        "A,C,2019-13-45,x,1\n"
        '"Long\nName",C,2019-02-01,x,1\n'
        ",C,2019-02-01,x,1\n"
        "B,C,2019-03-01,x,2\n"
        "B,A,2019-03-01,x,-4\n"
    )
    db = new_db("s.db")
    report = tmp_path / "bad.csv"
    out = _run(["import", str(path), *COLS, "--relation", "kind", "--weight", "w", "--errors", "report", str(report)], db)
    assert out.exit_code == 0, out.output
    assert "3 bad rows skipped" in out.output
    bad = list(csv.DictReader(report.open()))
    assert [(int(r["line"]), r["column"]) for r in bad] == [(3, "event_date"), (6, "from_org"), (8, "w")]
    assert "is negative" in bad[2]["problem"]
    assert sorted(_events(db)["source"]) == ["A", "B", "Long Name"]
    with Study(db, create=False) as study:
        assert study.batches()["rows_rejected"].tolist() == [3]
    # the default stays all-or-nothing, naming the same editor line
    db2 = new_db("t.db")
    out = CliRunner().invoke(main, ["--db", str(db2), "import", str(path), *COLS, "--relation", "kind", "--weight", "w"])
    assert out.exit_code != 0 and "line 3, column 'event_date'" in out.output
    with Study(db2) as study:
        assert study.store.counts()["events"] == 0


def test_several_date_formats(tmp_path, new_db):
    path = tmp_path / "e.csv"
    path.write_text(HEADER + "A,B,2019-03-01,x\nA,C,15/07/2020,x\nB,C,2021,x\n")
    db = new_db("s.db")
    out = _run(["import", str(path), *COLS, "--date-format", "iso", "--date-format", "%d/%m/%Y"], db)
    assert out.exit_code == 0, out.output
    assert sorted(_events(db)["occurred"]) == ["2019-03-01", "2020-07-15", "2021"]


def test_excel_files_are_read(tmp_path, new_db):
    path = tmp_path / "e.xlsx"
    pd.DataFrame({"from_org": ["A", "B", "C"], "to_org": ["B", "C", "A"], "event_date": ["2019-01-01", "2019-02-01", "bad"]}) \
        .to_excel(path, index=False)
    db = new_db("s.db")
    out = CliRunner().invoke(main, ["--db", str(db), "import", str(path), *COLS])
    assert out.exit_code != 0 and "e.xlsx, line 4, column 'event_date'" in out.output  # the sheet's row 4
    pd.DataFrame({"from_org": ["A", "B"], "to_org": ["B", "C"], "event_date": ["2019-01-01", "2019-02-01"]}).to_excel(path, index=False)
    assert _run(["import", str(path), *COLS], db).exit_code == 0
    assert len(_events(db)) == 2


@pytest.mark.parametrize("kind", ["csv", "parquet"])
def test_a_folder_is_summed_per_pair_and_period(tmp_path, new_db, kind):
    folder = tmp_path / "many"
    folder.mkdir()
    parts = [
        pd.DataFrame({"from_org": ["A", "A ", "B"], "to_org": ["B", "B", "B"], "event_date": ["2019-01-01", "2019-05-01T10:00:00", "2019-01-01"]}),
        pd.DataFrame({"from_org": ["B", "C"], "to_org": ["A", "A"], "event_date": ["2020-02-02", "2019-12-31"]}),
    ]
    for i, part in enumerate(parts):
        if kind == "csv":
            part.to_csv(folder / f"p{i}.csv", index=False)
        else:
            part.to_parquet(folder / f"p{i}.parquet", index=False)
    db = new_db("s.db")
    out = _run(["import", str(folder), *COLS], db)
    assert out.exit_code == 0, out.output
    assert "(2 files, summed per pair and period)" in out.output and "4 events of 5 rows, 1 self-ties dropped" in out.output
    events = _events(db).sort_values(["source", "target", "occurred"], na_position="first")
    # reference: pandas groupby of the same rows (labels trimmed, self-ties left out)
    raw = pd.concat(parts).assign(from_org=lambda f: f["from_org"].str.strip(), year=lambda f: f["event_date"].str[:4])
    raw = raw[raw["from_org"] != raw["to_org"]]
    expected = raw.groupby(["from_org", "to_org", "year"]).size()
    assert sorted(events["n_events"].tolist()) == sorted(expected.tolist())
    assert events["occurred"].isna().all()
    with Study(db, create=False) as study:
        assert study.check() == []
        assert study.snapshot("2019").matrices[0].sum() == 3
    out = CliRunner().invoke(main, ["--db", str(db), "recut", "--period", "2y"])
    assert out.exit_code != 0 and "cannot be re-cut" in out.output


def test_a_folder_with_a_bad_value_names_file_and_line(tmp_path, new_db):
    folder = tmp_path / "many"
    folder.mkdir()
    (folder / "a.csv").write_text(HEADER + "A,B,2019-01-01,x\n")
    (folder / "b.csv").write_text(HEADER + "A,B,2019-01-01,x\nC,D,2019-99-01,x\n")
    db = new_db("s.db")
    before = None
    out = CliRunner().invoke(main, ["--db", str(db), "import", str(folder / "*.csv"), *COLS])
    assert out.exit_code != 0
    assert "b.csv, line 3, column 'event_date': is not a date" in out.output
    with Study(db) as study:
        before = table_dump(study)
        assert study.store.counts()["events"] == 0
    assert before is not None


def test_similar_actors_are_suggested_as_alias_commands(tmp_path, new_db):
    path = tmp_path / "e.csv"
    path.write_text(HEADER + "Harbour Office,Coast Watch,2019-01-01,x\nHarbour Office,Fire Brigade,2019-01-01,x\n"
                    "harbour office,Coast Watch,2019-02-01,x\nCoast-Watch,Fire Brigade,2019-02-01,x\n"
                    "Fire Brigad,Coast Watch,2019-03-01,x\nUS,UK,2019-01-01,x\n")
    db = new_db("s.db")
    assert _run(["import", str(path), *COLS], db).exit_code == 0
    out = _run(["actors", "--similar", "--format", "csv"], db)
    pairs = pd.read_csv(io.StringIO(out.stdout))
    found = {(r.name, r.other): r.reason for r in pairs.itertuples()}
    assert found == {
        ("Coast Watch", "Coast-Watch"): "punctuation",
        ("Harbour Office", "harbour office"): "case",
        ("Fire Brigad", "Fire Brigade"): "spelling",
    }
    commands = set(pairs["command"])
    assert "roletrail alias 'harbour office' 'Harbour Office'" in commands  # the name with fewer events joins the other
    # running a suggestion merges the two actors
    assert _run(["alias", "harbour office", "Harbour Office"], db).exit_code == 0
    with Study(db, create=False) as study:
        assert "harbour office" not in set(study.actors()["actor"])
        assert study.check() == []
