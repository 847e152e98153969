"""Two processes on one study: both finish, or one stops with one clear line; nothing lost or doubled.

SQLite studies start every transaction with BEGIN IMMEDIATE and wait up to
30 s for a busy study (tracker/store/database.py), so two writers queue.
Checked here with real processes of the command line:

* an import while a fit runs;
* two imports of different files at once (both batches land, once each);
* the same file imported twice at once (one batch; the other run is refused);
* readers during a large import see the study before or after it, never half.

A process that fails must print exactly one line ``roletrail: error: ...`` and
exit with status 2: never a traceback, never SQLite's raw "database is locked".
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.reliability.conftest import IMPORT, write_events

REPO = Path(__file__).resolve().parents[2]


def _start(db: Path, *args: str) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "tracker.cli", "--db", str(db), *args],
        env={**os.environ, "PYTHONPATH": str(REPO), "ROLETRAIL_DEBUG": ""},
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )


def _finish(proc: subprocess.Popen) -> tuple[int, str]:
    out, err = proc.communicate(timeout=120)
    text = out + err
    assert "Traceback" not in text and "database is locked" not in text, text
    if proc.returncode != 0:
        lines = [line for line in err.splitlines() if line.strip()]
        assert proc.returncode == 2 and len(lines) == 1 and lines[0].startswith("roletrail: error: "), text
    return proc.returncode, text


def _counts(db: Path) -> dict:
    from tracker.api import Study

    with Study(db, create=False) as study:
        return {**study.store.counts(), "batch_files": sorted(study.batches()["file"])}


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("concurrency")
    out = {}
    for name, n, actors, seed in (("base", 6000, 200, 1), ("one", 20_000, 600, 2), ("two", 20_000, 600, 3),
                                  ("small1", 8000, 400, 5), ("small2", 8000, 400, 6), ("big", 60_000, 3000, 4)):
        out[name] = folder / f"{name}.csv"
        write_events(out[name], n, actors, seed)
    return out


@pytest.fixture
def base_study(files, tmp_path) -> Path:
    from tracker.api import Study

    db = tmp_path / "study.db"
    with Study(db) as study:
        study.import_events(files["base"], source="source", target="target", date="date", relation="kind", weight="w")
    return db


def _reference(db: Path, tmp_path: Path, *files: Path) -> dict:
    """Counts after importing ``files`` one after the other, alone."""
    from tracker.api import Study

    copy = tmp_path / f"reference{len(list(tmp_path.iterdir()))}.db"
    shutil.copyfile(db, copy)
    with Study(copy, create=False) as study:
        for path in files:
            study.import_events(path, source="source", target="target", date="date", relation="kind", weight="w")
    return _counts(copy)


def test_import_while_a_fit_runs(files, tmp_path):
    """The import lands while the fit computes; the fit must not store results of data that changed.

    Acceptable: the fit is refused with one line (asking to run it again), or
    it stored results that match the data as it is after the import.  Storing
    the results of the data before the import over data that changed meanwhile
    (memberships missing the imported actors) is the failure this guards against.
    """
    from tracker.api import Study
    from tracker.store.check import check_study

    db = tmp_path / "fit.db"
    with Study(db) as study:  # big enough that the fit computes for a few seconds
        study.import_events(files["one"], source="source", target="target", date="date", relation="kind", weight="w")
    expected = _reference(db, tmp_path, files["two"])
    # 199 fit-test refits in one process keep the fit computing for several seconds (the
    # fit itself is quicker than the import of the second file).
    fit = _start(db, "fit", "--method", "structural", "--smooth", "off", "--positions", "3", "--draws", "199",
                 "--workers", "1")
    time.sleep(1.5)  # the fit has started up and is reading or fitting
    imp = _start(db, "import", str(files["two"]), *IMPORT)
    imp_code, imp_text = _finish(imp)
    fit_code, fit_text = _finish(fit)
    assert imp_code == 0, imp_text
    assert _counts(db) == expected
    with Study(db, create=False) as study:
        problems = check_study(study.engine, max_fit_periods=None)
        assert problems == [], [str(p) for p in problems]
        if fit_code == 0:
            assert len(study.fits()) == 1
        else:
            assert study.fits().empty and "changed while the fit ran" in fit_text and "again" in fit_text


def test_two_imports_at_once_both_land_once(files, base_study, tmp_path):
    expected = _reference(base_study, tmp_path, files["small1"], files["small2"])
    procs = [_start(base_study, "import", str(files[name]), *IMPORT) for name in ("small1", "small2")]
    results = [_finish(p) for p in procs]
    assert [code for code, _ in results] == [0, 0], results
    counts = _counts(base_study)
    assert counts == expected and counts["batch_files"] == ["base.csv", "small1.csv", "small2.csv"]


def test_same_file_twice_at_once_is_one_batch(files, base_study, tmp_path):
    expected = _reference(base_study, tmp_path, files["small1"])
    procs = [_start(base_study, "import", str(files["small1"]), *IMPORT) for _ in range(2)]
    results = sorted(_finish(p) for p in procs)
    assert [code for code, _ in results] == [0, 2], results
    assert "already imported" in results[1][1]
    assert _counts(base_study) == expected


def test_readers_during_a_large_import_see_before_or_after(files, base_study, tmp_path):
    from tracker.api import Study

    before = _counts(base_study)
    after = _reference(base_study, tmp_path, files["big"])
    imp = _start(base_study, "import", str(files["big"]), *IMPORT)
    seen, waits = [], []
    while imp.poll() is None:
        start = time.monotonic()
        with Study(base_study, create=False) as study:
            counts = study.store.counts()  # one read transaction
            seen.append((counts["events"], counts["ties"]))
            seen.append(("summary", int(study.summary()["ties"].sum())))  # another one
        waits.append(time.monotonic() - start)
        time.sleep(0.05)
    code, text = _finish(imp)
    assert code == 0, text
    states = {(before["events"], before["ties"]), (after["events"], after["ties"]),
              ("summary", before["ties"]), ("summary", after["ties"])}
    assert seen and set(seen) <= states, (seen, states)
    assert _counts(base_study) == after
