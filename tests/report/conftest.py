"""Fixtures of the report tests (the tables themselves are in report_data.py)."""

from __future__ import annotations

import pytest

from tests.report.report_data import make_tables


@pytest.fixture
def report_tables():
    return make_tables()
