"""run / run --record / replicate through the CLI on the bundled coastal-agencies scenario, reading the study back.

Outside references: SHA-256 from Python's hashlib, the study read with Python's
own sqlite3 module (not through roletrail), TOML parsed with tomllib, versions
from the libraries themselves.
"""

from __future__ import annotations

import copy
import hashlib
import json
import shutil
import sqlite3
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import scipy
from click.testing import CliRunner

from tests.cli.test_cli_tracks import moving_events
from tracker.api import Study
from tracker.cli import main
from tracker.demo import load_scenario
from tracker.glossary import terms
from tracker.replication import compare_results, read_results

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

# A hand-written analysis: the scenario's own import mapping and fit settings
# (scenarios/coastal-agencies/scenario.json); four periods fitted one by one (smoothing off) so the test
# stays fast.
ANALYSIS = """
[analysis]
title = "Coastal agencies around the founding of the coordinating office"
current_fit = 1

[[import]]
file = "events.csv"
sha256 = "{events_sha}"
source = "agency_from"
target = "agency_to"
date = "event_date"
relation = "kind"
undirected = true

[[import]]
kind = "roster"
file = "actors.csv"
sha256 = "{actors_sha}"
actor = "actor"
first = "first_period"
last = "last_period"

[[fit]]
id = 1
method = "structural"
positions = 5
criterion = "zero-block"
seed = 11
smoothing = 0.0
draws = 0
periods = ["2013", "2014", "2015", "2016"]

[[align]]
fit = 1
draws = 3
seed = 5

[[track_name]]
fit = 1
track = 1
name = "coordinating core"

[report]
file = "report.html"
structure_draws = 9
"""


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def _ok(*args) -> str:
    result = _invoke(*args)
    assert result.exit_code == 0, result.output
    return result.output


@pytest.fixture(scope="module")
def recorded(tmp_path_factory):
    """The analysis run into a study, then recorded from that study as deposit.toml (+ results)."""
    folder = tmp_path_factory.mktemp("analysis")
    scenario, _ = load_scenario("coastal-agencies")
    for name in ("events.csv", "actors.csv"):
        shutil.copy(scenario / name, folder / name)
    (folder / "analysis.toml").write_text(ANALYSIS.format(events_sha=_sha(folder / "events.csv"),
                                                          actors_sha=_sha(folder / "actors.csv")), encoding="utf-8")
    db = folder / "study.db"
    run_out = _ok("--db", db, "run", folder / "analysis.toml")
    record_out = _ok("--db", db, "run", "--record", folder / "deposit.toml", "--no-report")
    return {"folder": folder, "db": db, "run": run_out, "record": record_out}


def _copy(recorded, tmp_path) -> Path:
    for name in ("events.csv", "actors.csv", "deposit.toml", "deposit.results.json", "study.db"):
        shutil.copy(recorded["folder"] / name, tmp_path / name)
    return tmp_path


def test_run_builds_the_study_the_file_describes(recorded):
    folder = recorded["folder"]
    with Study(recorded["db"]) as study:
        fits = study.fits()
        assert len(fits) == 1 and fits["seed"].tolist() == [11]
        assert study.fit_info()["params"]["positions"] == 5
        assert study.memberships()["period"].unique().tolist() == ["2013", "2014", "2015", "2016"]
        tracks = study.tracks()
        assert tracks.loc[tracks["track"] == 1, "name"].tolist() == ["coordinating core"]
        assert study.store.alignment_params(int(fits["fit"].iloc[0]))["seed"] == 5
        batches = study.batches()
    # each batch keeps the content hash of the file imported (hashlib as the reference)
    assert batches["sha256"].tolist() == [_sha(folder / "events.csv"), _sha(folder / "actors.csv")]
    page = (folder / "report.html").read_text(encoding="utf-8")
    assert 'id="glossary"' in page
    for term in terms():
        assert f'id="term-{"-".join(term.split())}"' in page


def test_record_writes_every_step_with_hashes_and_seeds(recorded):
    folder = recorded["folder"]
    doc = tomllib.loads((folder / "deposit.toml").read_text(encoding="utf-8"))
    assert [i["file"] for i in doc["import"]] == ["events.csv", "actors.csv"]
    assert [i["sha256"] for i in doc["import"]] == [_sha(folder / "events.csv"), _sha(folder / "actors.csv")]
    assert doc["import"][0]["source"] == "agency_from" and doc["import"][0]["undirected"] is True
    (fit,) = doc["fit"]
    assert (fit["method"], fit["positions"], fit["seed"], fit["draws"]) == ("structural", 5, 11, 0)
    assert fit["periods"] == ["2013", "2014", "2015", "2016"]
    assert doc["align"][0]["seed"] == 5 and doc["align"][0]["draws"] == 3
    assert doc["track_name"] == [{"fit": fit["id"], "track": 1, "name": "coordinating core"}]
    assert doc["analysis"]["current_fit"] == fit["id"] and "report" not in doc
    # the results file holds what the study stores, read here with sqlite3 rather than roletrail
    results = json.loads((folder / "deposit.results.json").read_text(encoding="utf-8"))
    members = results["fits"][str(fit["id"])]["tables"]["memberships"]
    cols = members["columns"]
    got = sorted((r[cols.index("period")], r[cols.index("actor")], r[cols.index("position")]) for r in members["rows"])
    with sqlite3.connect(recorded["db"]) as conn:
        want = sorted(conn.execute(
            "SELECT p.label, a.label, m.position FROM memberships m JOIN periods p ON p.id = m.period_id "
            "JOIN actors a ON a.id = m.actor_id").fetchall())
        moves = conn.execute("SELECT confidence FROM moves").fetchall()
    assert got == want and len(got) > 0
    move_rows = results["fits"][str(fit["id"])]["tables"]["moves"]
    assert sorted(r[move_rows["columns"].index("confidence")] for r in move_rows["rows"]) == sorted(c for (c,) in moves)


def test_replicate_confirms_identical_results_with_versions_and_seeds(recorded, tmp_path):
    folder = _copy(recorded, tmp_path)
    out = _ok("replicate", folder / "deposit.toml")
    assert "identical: every stored result of the replay equals the recorded one" in out
    assert f"numpy {np.__version__}" in out and f"scipy {scipy.__version__}" in out
    assert f"python {sys.version.split()[0]}" in out
    assert "fit 1 (structural): seed 11; alignment seed 5" in out
    assert "exact equality" in out
    # --into keeps the replayed study: read it back
    _ok("replicate", folder / "deposit.toml", "--into", folder / "replica.db")
    with Study(folder / "replica.db") as replica, Study(folder / "study.db") as original:
        assert replica.memberships().equals(original.memberships())
        assert replica.moves().equals(original.moves())


def test_replicate_lists_a_tampered_result(recorded, tmp_path):
    folder = _copy(recorded, tmp_path)
    path = folder / "deposit.results.json"
    results = json.loads(path.read_text(encoding="utf-8"))
    members = results["fits"]["1"]["tables"]["memberships"]
    cols = members["columns"]
    row = members["rows"][0]
    row[cols.index("position")] += 1
    moves = results["fits"]["1"]["tables"]["moves"]
    assert moves["rows"], "the scenario has moves to tamper with"
    moves["rows"][0][moves["columns"].index("confidence")] = 0.123
    results["versions"]["numpy"] = "0.0.1"
    path.write_text(json.dumps(results), encoding="utf-8")
    result = _invoke("replicate", folder / "deposit.toml", "--no-report")
    assert result.exit_code == 1, result.output
    assert "NOT identical: 2 difference(s)" in result.output
    assert f"fit 1 memberships: period '{row[cols.index('period')]}', actor '{row[cols.index('actor')]}': " \
           f"position {row[cols.index('position')]} recorded, {row[cols.index('position')] - 1} replayed" in result.output
    assert "fit 1 moves:" in result.output and "confidence 0.123 recorded" in result.output
    assert f"note: versions changed (numpy 0.0.1 -> {np.__version__})" in result.output


def test_an_interactive_study_is_recorded_and_replicated(tmp_path):
    """Imports, a re-cut, an alias merge, a fit, an alignment and a name, made one command at a time."""
    moving_events(tmp_path / "events.csv")
    events = pd.read_csv(tmp_path / "events.csv")
    events.loc[events.index[::7], "a"] = events.loc[events.index[::7], "a"].str.replace("agency 0", "Agency #")
    events.to_csv(tmp_path / "events.csv", index=False)
    db = tmp_path / "work.db"
    _ok("--db", db, "import", tmp_path / "events.csv", "--source", "a", "--target", "b", "--date", "d")
    _ok("--db", db, "recut", "--period", "2y")
    _ok("--db", db, "alias", "Agency #3", "agency 03")
    _ok("--db", db, "fit", "--positions", "2", "--draws", "0", "--seed", "4")
    _ok("--db", db, "align", "--draws", "3")
    _ok("--db", db, "name-track", "1", "core")
    _ok("--db", db, "run", "--record", tmp_path / "work.toml", "--no-report")
    doc = tomllib.loads((tmp_path / "work.toml").read_text(encoding="utf-8"))
    assert doc["import"][0]["period"] == "2y"  # the re-cut is part of the import
    assert {"name": "Agency #3", "actor": "agency 03"} in doc["alias"]
    assert doc["fit"][0]["seed"] == 4 and doc["align"][0]["seed"] == 4  # the alignment took the fit's seed
    # the default (dynamic) fit takes no --smooth: its stored "no penalty" is not written as a setting to replay
    assert doc["fit"][0]["method"] == "dynamic" and "smoothing" not in doc["fit"][0]
    out = _ok("replicate", tmp_path / "work.toml", "--into", tmp_path / "again.db")
    assert "identical" in out
    with Study(tmp_path / "again.db") as again, Study(db) as work:
        assert again.periods() == work.periods() == ["2016-2017", "2018-2019"]
        assert again.actors()["actor"].tolist() == work.actors()["actor"].tolist()
        assert again.tracks()["name"].tolist() == work.tracks()["name"].tolist()
    # Files recorded by earlier versions wrote the 0 that every dynamic fit stored; they still replay
    # to the same results (the dynamic model refuses a --smooth given by the user).
    text = (tmp_path / "work.toml").read_text(encoding="utf-8")
    old = text.replace('method = "dynamic"', 'method = "dynamic"\nsmoothing = 0.0', 1)
    assert old != text
    (tmp_path / "old.toml").write_text(old, encoding="utf-8")
    shutil.copy(tmp_path / "work.results.json", tmp_path / "old.results.json")
    assert "identical" in _ok("replicate", tmp_path / "old.toml", "--into", tmp_path / "old.db")


def test_replicate_against_a_tampered_study(recorded, tmp_path):
    folder = _copy(recorded, tmp_path)
    with sqlite3.connect(folder / "study.db") as conn:
        conn.execute("UPDATE blocks SET ties = ties + 1 WHERE rowid = (SELECT MIN(rowid) FROM blocks)")
    result = _invoke("replicate", folder / "deposit.toml", "--against", folder / "study.db", "--no-report")
    assert result.exit_code == 1, result.output
    assert "fit 1 blocks:" in result.output and "in study.db" in result.output
    assert "NOT identical: 1 difference(s)" in result.output


def test_tolerance_is_for_decimals_only(recorded, tmp_path):
    folder = _copy(recorded, tmp_path)
    path = folder / "deposit.results.json"
    expected = read_results(path)
    nudged = copy.deepcopy(expected)
    blocks = nudged["fits"]["1"]["tables"]["blocks"]
    blocks["rows"][0][blocks["columns"].index("density")] += 1e-12
    diffs, _ = compare_results(expected, nudged)
    assert [d.where for d in diffs] == ["fit 1 blocks"] and "density" in diffs[0].detail
    assert compare_results(expected, nudged, tolerance=1e-9)[0] == []
    counted = copy.deepcopy(nudged)
    counted["fits"]["1"]["tables"]["blocks"]["rows"][0][blocks["columns"].index("ties")] += 1
    diffs, _ = compare_results(expected, counted, tolerance=1e-9)
    assert len(diffs) == 1 and "ties" in diffs[0].detail and "density" not in diffs[0].detail
    # through the command: the replay is compared with the nudged record within the stated tolerance
    path.write_text(json.dumps(nudged), encoding="utf-8")
    out = _ok("replicate", folder / "deposit.toml", "--no-report", "--tolerance", "1e-9")
    assert "decimals within 1e-09, labels and counts exact" in out and "identical" in out


def test_changed_data_is_refused_and_nothing_is_left(recorded, tmp_path):
    folder = _copy(recorded, tmp_path)
    with open(folder / "events.csv", "a", encoding="utf-8") as handle:
        handle.write("Quenport Borough Office,Orrin Coastguard Station,2015-06-01,mutual-aid\n")
    result = _invoke("replicate", folder / "deposit.toml")
    assert result.exit_code == 2
    assert "events.csv" in result.stderr and "has changed since the analysis was recorded" in result.stderr
    result = _invoke("--db", folder / "new.db", "run", folder / "deposit.toml")
    assert result.exit_code == 2 and "has changed" in result.stderr
    assert not (folder / "new.db").exists()


def test_run_refuses_a_study_that_has_data(recorded, tmp_path):
    folder = _copy(recorded, tmp_path)
    with Study(folder / "study.db") as study:
        before = study.store.counts()
    result = _invoke("--db", folder / "study.db", "run", folder / "deposit.toml")
    assert result.exit_code == 2 and "new, empty study" in result.stderr
    with Study(folder / "study.db") as study:
        assert study.store.counts() == before


def test_a_bad_analysis_file_names_the_problem(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_text('[[fit]]\nid = 1\nmethod = "structural"\nsmooth = 3\n', encoding="utf-8")
    result = _invoke("--db", tmp_path / "x.db", "run", path)
    assert result.exit_code == 2
    assert "[[fit]] 1: 'smooth' is not a setting this roletrail knows" in result.stderr
    assert "smoothing" in result.stderr  # the fix lists the real settings
    path.write_text("[[fit]\n", encoding="utf-8")
    result = _invoke("replicate", path)
    assert result.exit_code == 2 and "is not valid TOML" in result.stderr


def test_run_into_any_backend_then_replicate_against_it(recorded, tmp_path, new_db):
    """The replay stored on SQLite or PostgreSQL (when ROLETRAIL_TEST_PG is set) equals a fresh replay."""
    folder = _copy(recorded, tmp_path)
    target = new_db("replayed.db")
    _ok("--db", target, "run", folder / "deposit.toml")
    with Study(target) as study:
        assert study.tracks().loc[lambda t: t["track"] == 1, "name"].tolist() == ["coordinating core"]
    out = _ok("replicate", folder / "deposit.toml", "--against", target, "--no-report")
    assert "identical" in out
