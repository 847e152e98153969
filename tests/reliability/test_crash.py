"""Crash safety: a command killed at any moment leaves the study before or after, never between.

The command line runs in a child process on a copy of a prepared study and is
killed with SIGKILL at seeded moments spread over the length of an
uninterrupted run (from start-up to just past the end).  After each kill:

* SQLite's ``PRAGMA integrity_check`` answers ``ok``;
* every table equals, row for row, either the state before the command or the
  state an uninterrupted run leaves (timestamps aside);
* the next command works (a roster import: it needs the write lock, so a lock
  left behind by the killed process would show).

Done for a large import (200,000 events), a fit over six periods and an alignment with
bootstrap confidence.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tests.reliability.conftest import IMPORT, write_events

REPO = Path(__file__).resolve().parents[2]
KILLS = 10


def _state(path: Path) -> dict[str, tuple[int, str]]:
    """Integrity check, then (rows, digest) of every table, timestamp columns left out."""
    conn = sqlite3.connect(path)
    try:
        assert conn.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        out = {}
        for (table,) in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name").fetchall():
            columns = [
                row[1] for row in conn.execute(f'PRAGMA table_info("{table}")')
                if not any(word in (row[2] or "").upper() for word in ("DATETIME", "TIMESTAMP"))
            ]
            listed = ", ".join(f'"{c}"' for c in columns)
            rows = conn.execute(f'SELECT {listed} FROM "{table}" ORDER BY {listed}').fetchall()
            out[table] = (len(rows), hashlib.sha256(repr(rows).encode()).hexdigest())
        return out
    finally:
        conn.close()


def _command(db: Path, *args: str) -> list[str]:
    return [sys.executable, "-m", "tracker.cli", "--db", str(db), *args]


def _env() -> dict:
    return {**os.environ, "PYTHONPATH": str(REPO), "ROLETRAIL_DEBUG": ""}


def _run_to_end(db: Path, args: list[str]) -> float:
    start = time.monotonic()
    done = subprocess.run(_command(db, *args), env=_env(), capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    return time.monotonic() - start


def _kill_at(db: Path, args: list[str], delay: float) -> bool:
    """Run the command and SIGKILL it after ``delay`` seconds; True if it was still running."""
    proc = subprocess.Popen(_command(db, *args), env=_env(), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        proc.wait(timeout=delay)
        return False
    except subprocess.TimeoutExpired:
        proc.send_signal(signal.SIGKILL)
        proc.wait()
        return True


def _crash_many(tmp_path: Path, before_db: Path, args: list[str], seed: int) -> dict[str, int]:
    """Kill ``args`` at KILLS seeded moments; check each outcome; count the outcomes."""
    # Two uninterrupted runs side by side, as the killed runs will go: their
    # mean length scales the kill moments, and both must end in the same state.
    references = [tmp_path / "reference1.db", tmp_path / "reference2.db"]
    for reference in references:
        shutil.copyfile(before_db, reference)
    with ThreadPoolExecutor(max_workers=2) as pool:
        length = float(np.mean(list(pool.map(lambda db: _run_to_end(db, args), references))))
    before, after = _state(before_db), _state(references[0])
    assert before != after and _state(references[1]) == after
    rng = np.random.default_rng(seed)
    # One moment in each of KILLS equal slices of [20 %, 102 %] of a full run
    # (the first fifth is Python starting up): reading, writing, committing
    # and just after.
    edges = np.linspace(0.20, 1.02, KILLS + 1) * length
    moments = rng.uniform(edges[:-1], edges[1:])
    outcome = {"killed_before": 0, "killed_after": 0, "finished": 0}
    dbs = []
    for i in range(KILLS):
        (tmp_path / f"run{i}").mkdir()
        dbs.append(tmp_path / f"run{i}" / "study.db")
        shutil.copyfile(before_db, dbs[-1])
    # Two runs at a time (the machines this runs on have two cores); each is
    # killed at its own moment.
    with ThreadPoolExecutor(max_workers=2) as pool:
        killed = list(pool.map(lambda job: _kill_at(job[0], args, float(job[1])), zip(dbs, moments)))
    roster = tmp_path / "roster.csv"
    roster.write_text("actor,from\nnew one,2012\n", encoding="utf-8")
    from tracker.cli import main

    for i, (db, moment) in enumerate(zip(dbs, moments)):
        state = _state(db)
        assert state in (before, after), f"kill {i} at {moment:.2f} s of {length:.2f} s left a state between before and after"
        if not killed[i]:
            assert state == after
            outcome["finished"] += 1
        else:
            outcome["killed_before" if state == before else "killed_after"] += 1
        # The next command works: a roster import needs the write lock the
        # killed process held, and is quick on a large study.
        result = CliRunner().invoke(main, ["--db", str(db), "import-actors", str(roster), "--first", "from"])
        assert result.exit_code == 0, result.output
        shutil.rmtree(db.parent)
    return outcome


@pytest.mark.slow
def test_import_killed_at_random_moments(tmp_path):
    from tracker.api import Study

    big = tmp_path / "big.csv"
    write_events(big, 200_000, 3000, seed=1)
    base = tmp_path / "base.csv"
    write_events(base, 500, 50, seed=2)
    before_db = tmp_path / "before.db"
    with Study(before_db) as study:
        study.import_events(base, source="source", target="target", date="date", relation="kind", weight="w")
    outcome = _crash_many(tmp_path, before_db, ["import", str(big), *IMPORT], seed=11)
    # Most moments fall while the import runs: kills did land mid-way.
    assert outcome["killed_before"] >= 3, outcome


@pytest.mark.slow
def test_fit_killed_at_random_moments(tmp_path):
    from tracker.api import Study

    events = tmp_path / "events.csv"
    write_events(events, 2000, 100, seed=3)
    before_db = tmp_path / "before.db"
    with Study(before_db) as study:
        study.import_events(events, source="source", target="target", date="date", relation="kind", weight="w")
        assert len(study.periods()) == 6
    outcome = _crash_many(tmp_path, before_db, ["fit", "--positions", "3", "--draws", "9"], seed=12)
    assert outcome["killed_before"] >= 3, outcome


@pytest.mark.slow
def test_align_killed_at_random_moments(tmp_path):
    from tracker.api import Study

    events = tmp_path / "events.csv"
    write_events(events, 2000, 100, seed=4)
    before_db = tmp_path / "before.db"
    with Study(before_db) as study:
        study.import_events(events, source="source", target="target", date="date", relation="kind", weight="w")
        study.fit(positions=3, draws=0)
    # simulated studies for move confidence make the alignment long enough to be killed while it computes
    outcome = _crash_many(tmp_path, before_db, ["align", "--draws", "1"], seed=13)  # up to 10 studies (studies_needed)
    assert outcome["killed_before"] >= 3, outcome
