"""Fixtures of the execution tests."""

from __future__ import annotations

import pytest

from tests.execution.workflow import planted_events


@pytest.fixture(scope="session")
def events_file(tmp_path_factory):
    """A small planted study as an event file (see :func:`tests.execution.workflow.planted_events`)."""
    return planted_events(tmp_path_factory.mktemp("events") / "events.csv")
