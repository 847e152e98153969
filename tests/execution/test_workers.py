"""--workers: the same stored results whatever the number of processes, through the CLI runner."""

from __future__ import annotations

import pytest

from tests.execution.workflow import analyse, assert_same, stored


# The default dynamic model, each period alone (one task per period) and periods smoothed together.
@pytest.mark.parametrize("method, smooth", [("dynamic", None), ("structural", "off"), ("structural", "auto")])
def test_one_and_two_workers_store_identical_results(tmp_path, events_file, method, smooth, pool_for_every_batch):
    # The reference is the serial run (--workers 1: a plain loop in this process); with two
    # workers every batch of three or more tasks goes to the pool after its first task.
    one = tmp_path / "one.db"
    two = tmp_path / "two.db"
    structures_one = analyse(one, events_file, "--workers", "1", method=method, smooth=smooth)
    structures_two = analyse(two, events_file, "--workers", "2", method=method, smooth=smooth)
    first, second = stored(one), stored(two)
    assert_same(first, second)
    assert structures_one == structures_two
    # The analysis did something: positions found, p-values drawn, moves with a confidence.
    assert first["fit_periods"]["p_value"].notna().all()
    assert len(first["moves"]) > 0 and first["moves"]["confidence"].between(0, 1).all()
    assert structures_one.count("\n") > 1
