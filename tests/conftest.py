"""Shared fixtures: temporary studies and small files written on the fly."""

from __future__ import annotations

import csv
from pathlib import Path

import pytest


@pytest.fixture
def study_path(tmp_path: Path) -> Path:
    return tmp_path / "study.db"


@pytest.fixture
def study(study_path):
    from tracker.api import Study

    with Study(study_path) as s:
        yield s


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
