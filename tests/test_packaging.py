"""The installed package must carry every subpackage, the migrations and the demo scenarios."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _config():
    return tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]


def test_every_subpackage_is_listed():
    listed = set(_config()["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts) for p in (ROOT / "tracker").rglob("__init__.py")}
    assert found <= listed, sorted(found - listed)
    assert {"tracker._migrations", "tracker._scenarios"} <= listed


def test_scenario_and_migration_files_match_the_package_data_globs():
    data = _config()["package-data"]
    for package, folder in (("tracker._scenarios", "scenarios"), ("tracker._migrations", "migrations")):
        base = ROOT / folder
        wanted = {p for p in base.rglob("*") if p.is_file() and "__pycache__" not in p.parts}
        covered = {p for pattern in data[package] for p in base.glob(pattern)}
        assert wanted <= covered, sorted(str(p.relative_to(ROOT)) for p in wanted - covered)
