"""Shared pieces of the reliability tests: a small study to copy, and the import harness.

Every damaged-input test imports into a fresh copy of one small study (made
once per session) and then checks one of two outcomes:

* the import worked, and the study is internally consistent
  (:func:`tracker.store.check.check_study` finds nothing; labels, weights
  and counts are what an import may store; nothing that was there is lost);
* the import was refused with one :class:`tracker.errors.RoletrailError`
  whose message is one line, and the study is unchanged row for row.

Any other exception fails the test.
"""

from __future__ import annotations

import math
import shutil
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
from sqlalchemy import text

from tests.conftest import table_dump

BASE_EVENTS = (
    "source,target,date,kind,w\n"
    "Harbour Office,Coast Watch,2018-03-01,exercise,1\n"
    "Coast Watch,Harbour Office,2018-05-01,exercise,2\n"
    "Coast Watch,Fire Brigade,2019-06-01,aid,0.5\n"
    "Fire Brigade,Harbour Office,2019-01-01,aid,3\n"
    "Port Police,Harbour Office,2019,exercise,1\n"
)
#: The command-line options that import the files made by :func:`write_events`.
IMPORT = ["--source", "source", "--target", "target", "--date", "date", "--relation", "kind", "--weight", "w"]
BASE_ROSTER = "actor,from,until,sector\nHarbour Office,2000,,port\nLighthouse Trust,2019,,heritage\n"


def write_events(path: Path, n_events: int, n_actors: int, seed: int) -> None:
    """Random dated events among ``n_actors`` actors over 2010-2015, two relations, weights 1-3."""
    rng = np.random.default_rng(seed)
    source = rng.integers(0, n_actors, n_events)
    target = rng.integers(0, n_actors, n_events)
    year = rng.integers(2010, 2016, n_events)
    day = rng.integers(1, 29, n_events)
    kind = np.array(["aid", "trade"])[rng.integers(0, 2, n_events)]
    weight = rng.integers(1, 4, n_events)
    with open(path, "w", encoding="utf-8") as handle:
        handle.write("source,target,date,kind,w\n")
        handle.writelines(
            f"org {s},org {t},{y}-05-{d:02d},{k},{w}\n" for s, t, y, d, k, w in zip(source, target, year, day, kind, weight)
        )


def make_base_study(folder: Path) -> Path:
    """A study with one event batch (two relations, two years, weights) and a roster."""
    from tracker.api import Study

    (folder / "base.csv").write_text(BASE_EVENTS, encoding="utf-8")
    (folder / "roster.csv").write_text(BASE_ROSTER, encoding="utf-8")
    path = folder / "template.db"
    with Study(path) as study:
        study.import_events(folder / "base.csv", source="source", target="target", date="date", relation="kind", weight="w")
        study.import_actors(folder / "roster.csv", actor="actor", first="from", last="until")
    return path


@pytest.fixture(scope="session")
def template(tmp_path_factory) -> Path:
    return make_base_study(tmp_path_factory.mktemp("template"))


@dataclass
class Outcome:
    """What one import attempt did."""

    ok: bool
    message: str = ""
    report: dict = field(default_factory=dict)
    events: list = field(default_factory=list)  # (row, source, target, relation, period, weight) of the new batch
    actors: dict = field(default_factory=dict)  # label -> (in_roster, first, last, attributes) after the import


@contextmanager
def study_copy(template: Path):
    """A fresh copy of the template study, opened; removed afterwards."""
    from tracker.api import Study

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "study.db"
        shutil.copyfile(template, path)
        with Study(path, create=False) as study:
            yield study, Path(folder)


def attempt(template: Path, data: bytes, *, kind: str = "events", suffix: str = ".csv", **options) -> Outcome:
    """Import ``data`` (the bytes of a file) into a copy of the template and check the outcome."""
    from tracker.errors import RoletrailError

    with study_copy(template) as (study, folder):
        path = folder / f"input{suffix}"
        path.write_bytes(data)
        before = table_dump(study)
        verb = study.import_events if kind == "events" else study.import_actors
        try:
            report = verb(path, **options)
        except RoletrailError as exc:
            message = str(exc)
            assert message and "\n" not in message and "\r" not in message, repr(message)
            assert table_dump(study) == before, f"refused import changed the study: {message}"
            return Outcome(False, message)
        return _accepted(study, before, dict(report))


def _accepted(study, before: dict, report: dict) -> Outcome:
    from tracker.ingest.events import MAX_LABEL, MAX_WEIGHT
    from tracker.store.check import check_study

    problems = check_study(study.engine, max_fit_periods=None)
    assert problems == [], [str(p) for p in problems]
    after = table_dump(study)
    for table in ("events", "actor_aliases", "relations"):
        assert set(before[table]) <= set(after[table]), f"rows of {table} were lost"
    with study.engine.connect() as conn:
        labels = conn.execute(text("SELECT label FROM actors UNION ALL SELECT name FROM relations")).scalars().all()
        for label in labels:
            assert label and label == label.strip() and "\x00" not in label and len(label) <= MAX_LABEL, repr(label)
        batch = report["batch"]
        counted = conn.execute(text("SELECT COUNT(*) FROM events WHERE batch_id = :b"), {"b": batch}).scalar_one()
        weights = conn.execute(text("SELECT weight FROM events")).scalars().all()
        events = conn.execute(text(
            "SELECT e.row, s.label, t.label, r.name, p.label, e.weight FROM events e "
            "JOIN actors s ON s.id = e.source_id JOIN actors t ON t.id = e.target_id "
            "JOIN relations r ON r.id = e.relation_id JOIN periods p ON p.id = e.period_id "
            "WHERE e.batch_id = :b ORDER BY e.row"), {"b": batch}).all() if "rows_loaded" in report else []
        actors = {
            r[0]: tuple(r[1:]) for r in conn.execute(
                text("SELECT label, in_roster, first_period, last_period, attributes FROM actors")
            ).all()
        }
    for w in weights:
        assert w is not None and math.isfinite(w) and 0 <= w <= MAX_WEIGHT, w
    if "self_ties_dropped" in report:
        assert counted == report["rows_loaded"]
        assert report["rows_read"] == report["rows_loaded"] + report["self_ties_dropped"]
    return Outcome(True, report=report, events=[tuple(e) for e in events], actors=actors)
