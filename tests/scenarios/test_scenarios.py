"""The demo scenarios: complete, consistent with their rosters, reproducible."""

from __future__ import annotations

import csv
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2] / "scenarios"
NAMES = ["coastal-agencies", "island-states", "coalition-survey"]
KEYS = {
    "title", "description", "events", "source", "target", "date", "period_column", "period",
    "relation", "relation_name", "weight", "undirected", "roster", "roster_actor",
    "roster_first", "roster_last", "fit",
}
FIT_KEYS = {"method", "positions", "criterion", "seed"}
ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")
BARE_YEAR = re.compile(r"^\d{4}$")


def _scenario(name: str) -> dict:
    return json.loads((ROOT / name / "scenario.json").read_text(encoding="utf-8"))


def _rows(path: Path) -> tuple[list[str], list[dict]]:
    with open(path, newline="", encoding="utf-8") as handle:
        reader = csv.DictReader(handle)
        return list(reader.fieldnames or []), list(reader)


def _year(value: str) -> int:
    assert ISO_DATE.match(value) or BARE_YEAR.match(value), value
    return int(value[:4])


def test_readme_lists_every_scenario():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    folders = sorted(p.name for p in ROOT.iterdir() if p.is_dir() and not p.name.startswith("_"))
    assert folders == sorted(NAMES)
    for name in NAMES:
        assert f"`{name}/`" in text


@pytest.mark.parametrize("name", NAMES)
def test_scenario_json_keys_and_files(name):
    spec = _scenario(name)
    assert set(spec) == KEYS
    assert set(spec["fit"]) == FIT_KEYS
    assert isinstance(spec["fit"]["positions"], int) and isinstance(spec["fit"]["seed"], int)
    assert isinstance(spec["undirected"], bool)
    assert (spec["date"] is None) != (spec["period_column"] is None)
    if spec["date"] is not None:
        assert spec["period"] == "year" or re.fullmatch(r"[1-9]\d*y", spec["period"])
    assert (spec["relation"] is None) != (spec["relation_name"] is None)
    folder = ROOT / name
    for key in ("events", "roster"):
        assert (folder / spec[key]).is_file()
    for extra in ("README.md", "make_data.py"):
        assert (folder / extra).is_file()
    header, rows = _rows(folder / spec["events"])
    for key in ("source", "target", "date", "period_column", "relation", "weight"):
        if spec[key] is not None:
            assert spec[key] in header, key
    assert 0 < len(rows) <= 5000  # small enough for a demo that runs in seconds
    roster_header, _ = _rows(folder / spec["roster"])
    for key in ("roster_actor", "roster_first", "roster_last"):
        assert spec[key] in roster_header


@pytest.mark.parametrize("name", NAMES)
def test_events_fit_the_roster(name):
    """Every tie is between two listed actors while both exist, never a self-tie."""
    spec = _scenario(name)
    folder = ROOT / name
    _, roster = _rows(folder / spec["roster"])
    span = {
        r[spec["roster_actor"]]: (int(r[spec["roster_first"]]), int(r[spec["roster_last"]]))
        for r in roster
    }
    assert len(span) == len(roster)
    _, rows = _rows(folder / spec["events"])
    for row in rows:
        a, b = row[spec["source"]], row[spec["target"]]
        assert a != b and a in span and b in span
        when = _year(row[spec["date"]]) if spec["date"] else int(row[spec["period_column"]])
        for actor in (a, b):
            first, last = span[actor]
            assert first <= when <= last, (actor, when)
        if spec["weight"]:
            assert row[spec["weight"]] in {"0", "1", "2", "3", "4"}
    # someone enters late and someone leaves early: absent is not isolated
    firsts = {f for f, _ in span.values()}
    lasts = {last for _, last in span.values()}
    assert len(firsts) > 1 and len(lasts) > 1


def test_island_states_mix_bare_years_and_iso_dates():
    _, rows = _rows(ROOT / "island-states" / "events.csv")
    dates = [r["date"] for r in rows]
    assert any(BARE_YEAR.match(d) for d in dates) and any(ISO_DATE.match(d) for d in dates)
    relations = {r["kind"] for r in rows}
    assert relations == {"cooperation", "dispute"}


def test_coastal_office_does_not_exist_before_2014():
    _, rows = _rows(ROOT / "coastal-agencies" / "events.csv")
    office = "Orrin Coastal Resilience Office"
    years = [_year(r["event_date"]) for r in rows if office in (r["agency_from"], r["agency_to"])]
    assert years and min(years) >= 2014
    assert {r["kind"] for r in rows} == {"joint-exercise", "mutual-aid", "data-sharing"}


@pytest.mark.parametrize("name", NAMES)
def test_make_data_reproduces_the_committed_files(name, tmp_path):
    folder = ROOT / name
    subprocess.run([sys.executable, str(folder / "make_data.py"), str(tmp_path)], check=True,
                   capture_output=True, timeout=60)
    made = sorted(p.name for p in tmp_path.iterdir())
    committed = sorted(p.name for p in folder.glob("*.csv"))
    assert made == committed
    for file in made:
        assert (tmp_path / file).read_bytes() == (folder / file).read_bytes(), file
