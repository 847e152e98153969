"""check_study: each kind of damage, made with raw SQL (foreign keys off), is found and named with its fix.

The study is built once (two relations, one undirected, weights that sum to 0
for one pair, a roster actor without ties, a fit over three periods) and
copied for each test.  Expected values come from the definitions of the
tables (value = sum of weights, n_events = count; undirected pairs stored once,
smaller actor id first; block ties = non-zero cells of the block).
"""

from __future__ import annotations

import itertools
import shutil
import sqlite3
from pathlib import Path

import pytest

from tracker.store.check import Problem, check_study, repair_ties
from tracker.store.database import open_engine, resolve_url

ACTORS = ["Harbour", "Coast", "Fire", "Police", "Lifeboat"]


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    from tracker.api import Study

    folder = tmp_path_factory.mktemp("check")
    rows = ["source,target,date,kind,w"]
    for year in (2018, 2019, 2020):
        for i, (a, b) in enumerate(itertools.permutations(ACTORS, 2)):
            if (i + year) % 3 == 0:
                rows.append(f"{a},{b},{year}-0{1 + i % 9}-01,aid,{1 + i % 3}")
    (folder / "e.csv").write_text("\n".join(rows) + "\n")
    # Fire-Police in 2019 sums to 0: observed, but no tie.
    (folder / "u.csv").write_text("a,b,d,w\nHarbour,Coast,2018,2\nCoast,Harbour,2018,1\nFire,Police,2019,0\n"
                                  "Police,Fire,2019,0\nHarbour,Police,2020,1\n")
    (folder / "r.csv").write_text("actor,from\nPilots,2018\n")
    path = folder / "template.db"
    with Study(path) as study:
        study.import_events(folder / "e.csv", source="source", target="target", date="date", relation="kind", weight="w")
        study.import_events(folder / "u.csv", source="a", target="b", date="d", relation_name="meets", undirected=True, weight="w")
        study.import_actors(folder / "r.csv", first="from")
        study.fit(positions=2, draws=0)
    return path


@pytest.fixture
def db(template, tmp_path) -> Path:
    path = tmp_path / "study.db"
    shutil.copyfile(template, path)
    return path


def _sql(path: Path, *statements: str) -> None:
    """Edit the study as another program would: plain sqlite3, foreign keys off (its default)."""
    with sqlite3.connect(path) as conn:
        conn.execute("PRAGMA foreign_keys=OFF")
        for statement in statements:
            conn.execute(statement)
    conn.close()


def _check(path: Path, **kw) -> list[Problem]:
    engine = open_engine(resolve_url(path))
    try:
        problems = check_study(engine, **kw)
    finally:
        engine.dispose()
    for p in problems:
        for part in (p.what, p.detail, p.fix):
            assert part and "\n" not in part, p
    return problems


def _one(problems: list[Problem], what: str, detail: str) -> Problem:
    found = [p for p in problems if p.what == what and detail in p.detail]
    assert found, [str(p) for p in problems]
    return found[0]


def _ids(path: Path, query: str):
    with sqlite3.connect(path) as conn:
        return conn.execute(query).fetchall()


def test_a_healthy_study_has_no_problems(db):
    assert _check(db, max_fit_periods=None) == []


def test_damaged_file_is_reported(db):
    # Overwrite the middle of the file, where the table pages are.
    size = db.stat().st_size
    with open(db, "r+b") as handle:
        handle.seek(size // 2)
        handle.write(b"\xa5" * 8192)
    problems = _check(db)
    assert len(problems) == 1 and problems[0].what in ("integrity", "database"), problems
    assert "backup" in problems[0].fix


@pytest.mark.parametrize(
    "statement, child, parent",
    [
        ("DELETE FROM batches WHERE id = 1", "events", "batches"),
        ("INSERT INTO actor_aliases (alias, actor_id) VALUES ('Ghost', 999)", "actor_aliases", "actors"),
        ("INSERT INTO memberships (fit_id, period_id, actor_id, position, isolate) "
         "SELECT fit_id, period_id, 999, position, 0 FROM memberships LIMIT 1", "memberships", "actors"),
        ("UPDATE blocks SET relation_id = 999 WHERE rowid = (SELECT MIN(rowid) FROM blocks)", "blocks", "relations"),
        ("DELETE FROM fits", "fit_periods", "fits"),
    ],
)
def test_orphans_are_reported_with_the_statement_that_removes_them(db, statement, child, parent):
    _sql(db, statement)
    problem = _one(_check(db), "orphans", f"of {child} point")
    assert f"missing rows of {parent}" in problem.detail or f"missing row of {parent}" in problem.detail
    assert f"DELETE FROM {child} WHERE" in problem.fix and f"FROM {parent})" in problem.fix


def test_orphan_ties_are_reported(db):
    _sql(db, "INSERT INTO ties (period_id, relation_id, source_id, target_id, value, n_events) "
             "SELECT period_id, relation_id, 999, target_id, 1.0, 1 FROM ties LIMIT 1")
    problems = _check(db)
    _one(problems, "orphans", "1 row of ties points at a missing row of actors (source_id = 999)")
    _one(problems, "ties", "no events behind them")


def test_tie_value_and_count_must_match_the_events(db):
    (pid, rid, s, t), = _ids(db, "SELECT period_id, relation_id, source_id, target_id FROM ties ORDER BY 1, 2, 3, 4 LIMIT 1")
    # The value the events give, by definition: the sum of their weights.
    (want, n), = _ids(db, f"SELECT SUM(weight), COUNT(*) FROM events WHERE period_id = {pid} AND relation_id = {rid} "
                          f"AND source_id = {s} AND target_id = {t}")
    _sql(db, f"UPDATE ties SET value = value + 0.5 WHERE period_id = {pid} AND relation_id = {rid} "
             f"AND source_id = {s} AND target_id = {t}")
    problem = _one(_check(db), "ties", "disagree with their events")
    assert f"stored value {want + 0.5:g} from {n} events, the events give {want:g} from {n}" in problem.detail
    assert "roletrail check --repair" in problem.fix


def test_event_count_mismatch_is_reported(db):
    _sql(db, "UPDATE ties SET n_events = n_events + 1 WHERE rowid = (SELECT MIN(rowid) FROM ties)")
    _one(_check(db), "ties", "disagree with their events")


def test_missing_and_extra_ties(db):
    _sql(db, "DELETE FROM ties WHERE rowid = (SELECT MIN(rowid) FROM ties)")
    _one(_check(db), "ties", "1 pairs have events but no tie")


def test_undirected_pair_stored_the_wrong_way_round(db):
    _sql(db, "UPDATE ties SET source_id = target_id, target_id = source_id "
             "WHERE relation_id = (SELECT id FROM relations WHERE name = 'meets')")
    problems = _check(db)
    _one(problems, "ties", "larger actor id first")
    # Reported once: not also as ties without events.
    assert not [p for p in problems if "no events behind them" in p.detail]


def test_zero_sum_pair_must_have_no_tie(db):
    # Fire and Police met in 2019 with weights 0 + 0: observed, no tie.
    _sql(db, "INSERT INTO ties (period_id, relation_id, source_id, target_id, value, n_events) "
             "SELECT e.period_id, e.relation_id, MIN(e.source_id, e.target_id), MAX(e.source_id, e.target_id), 0.0, 2 "
             "FROM events e JOIN relations r ON r.id = e.relation_id WHERE r.name = 'meets' AND e.weight = 0 "
             "GROUP BY e.period_id, e.relation_id")
    _one(_check(db), "ties", "value of 0 or less")


def test_repair_ties_rebuilds_them_from_the_events(db):
    before = _ids(db, "SELECT * FROM ties ORDER BY 1, 2, 3, 4")
    _sql(db, "UPDATE ties SET value = value * 3", "DELETE FROM ties WHERE rowid % 4 = 0",
         "UPDATE ties SET source_id = target_id, target_id = source_id "
         "WHERE relation_id = (SELECT id FROM relations WHERE name = 'meets')")
    assert _check(db)
    engine = open_engine(resolve_url(db))
    assert repair_ties(engine) == len(before)
    engine.dispose()
    assert _ids(db, "SELECT * FROM ties ORDER BY 1, 2, 3, 4") == before
    assert _check(db, max_fit_periods=None) == []


def test_actor_without_its_own_alias(db):
    _sql(db, "DELETE FROM actor_aliases WHERE alias = 'Fire'")
    problem = _one(_check(db), "actors", "no alias row under their own label ('Fire')")
    assert "INSERT INTO actor_aliases" in problem.fix


def test_self_events_negative_weights_and_misfiled_events(db):
    _sql(db, "UPDATE events SET target_id = source_id WHERE id = 1",
         "UPDATE events SET weight = -2 WHERE id = 2",
         "UPDATE events SET period_id = (SELECT id FROM periods WHERE label = '2020') "
         "WHERE id = (SELECT MIN(e.id) FROM events e JOIN periods p ON p.id = e.period_id WHERE p.label = '2018')")
    problems = _check(db)
    _one(problems, "events", "go from an actor to itself")
    _one(problems, "events", "missing, negative or infinite weight")
    assert "roletrail recut --period year" in _one(problems, "events", "filed under a period").fix


def test_positions_out_of_range_and_isolate_flags(db):
    _sql(db, "UPDATE memberships SET position = 7 WHERE rowid = (SELECT MIN(rowid) FROM memberships)")
    _one(_check(db), "fit", "use positions outside 1..positions")
    _sql(db, "UPDATE memberships SET position = 1 WHERE position = 7",
         "UPDATE memberships SET isolate = 1 - isolate WHERE rowid = (SELECT MAX(rowid) FROM memberships)")
    _one(_check(db), "fit", "isolate flags")


def test_two_current_fits(db):
    _sql(db, "INSERT INTO fits (settings_key, method, criterion, seed, params, software_version, created_at, "
             "updated_at, current) SELECT 'other', method, criterion, seed, params, software_version, created_at, "
             "updated_at, 1 FROM fits")
    assert "roletrail use-fit" in _one(_check(db), "fit", "2 fits are marked current").fix


def test_missing_membership_and_wrong_block_counts(db):
    _sql(db, "DELETE FROM memberships WHERE actor_id = (SELECT id FROM actors WHERE label = 'Coast') "
             "AND period_id = (SELECT id FROM periods WHERE label = '2019')")
    _one(_check(db, max_fit_periods=None), "fit", "period 2019: 1 actors, first 'Coast'")
    _sql(db, "INSERT INTO memberships (fit_id, period_id, actor_id, position, isolate) SELECT fit_id, period_id, "
             "(SELECT id FROM actors WHERE label = 'Coast'), 1, 0 FROM fit_periods WHERE period_id = "
             "(SELECT id FROM periods WHERE label = '2019')",
         "UPDATE blocks SET ties = ties + 1 WHERE rowid = (SELECT MIN(rowid) FROM blocks)")
    problem = _one(_check(db, max_fit_periods=None), "fit", "do not match their memberships and ties")
    assert "ties stored" in problem.detail


def test_block_ties_recomputed_by_hand(db):
    # Brute force over the definition: ties from position k to l = number of
    # ordered pairs (i in k, j in l, i != j) with a non-zero tie value.
    (fit, pid), = _ids(db, "SELECT fit_id, period_id FROM fit_periods WHERE period_id = "
                           "(SELECT id FROM periods WHERE label = '2018')")
    pos = dict(_ids(db, f"SELECT actor_id, position FROM memberships WHERE fit_id = {fit} AND period_id = {pid}"))
    (rid,), = _ids(db, "SELECT id FROM relations WHERE name = 'aid'")
    ties = _ids(db, f"SELECT source_id, target_id FROM ties WHERE period_id = {pid} AND relation_id = {rid} AND value > 0")
    stored = {(k, l): t for k, l, t in _ids(db, f"SELECT from_position, to_position, ties FROM blocks "
                                                f"WHERE fit_id = {fit} AND period_id = {pid} AND relation_id = {rid}")}
    by_hand = {kl: 0 for kl in stored}
    for s, t in ties:
        by_hand[pos[s], pos[t]] += 1
    assert stored == by_hand
    # Move one actor to another position without refitting: the blocks no longer fit.
    s = ties[0][0]
    _sql(db, f"UPDATE memberships SET position = {3 - pos[s] if pos[s] < 3 else 1} "
             f"WHERE fit_id = {fit} AND period_id = {pid} AND actor_id = {s}")
    _one(_check(db, max_fit_periods=None), "fit", "do not match their memberships and ties")


def test_events_imported_after_a_fit_make_it_stale(db, tmp_path):
    from tracker.api import Study

    (tmp_path / "late.csv").write_text("s,t,d\nHarbour,Newcomer,2019-05-05\n")
    with Study(db, create=False) as study:
        study.import_events(tmp_path / "late.csv", source="s", target="t", date="d", relation_name="aid")
    problem = _one(_check(db), "fit", "have no position (data imported after the fit?)")
    assert "'Newcomer'" in problem.detail and "roletrail fit --periods" in problem.fix


def test_sampling_checks_evenly_spread_fit_periods(db):
    # Damage the blocks of the middle period only: a sample of one checks the
    # first period, a sample of three (or all) finds it.
    _sql(db, "UPDATE blocks SET possible = possible + 5 WHERE period_id = (SELECT id FROM periods WHERE label = '2019')")
    assert not [p for p in _check(db, max_fit_periods=1) if p.what == "fit"]
    _one(_check(db, max_fit_periods=3), "fit", "period 2019")
    _one(_check(db, max_fit_periods=None), "fit", "period 2019")


def test_problem_prints_on_one_line():
    p = Problem("ties", "3 ties disagree", "rebuild them")
    assert str(p) == "ties: 3 ties disagree; fix: rebuild them"
