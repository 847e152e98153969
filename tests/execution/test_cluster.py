"""A fit, its fit test (p-value draws), structure tests and an alignment on a real Dask cluster.

Runs when ROLETRAIL_TEST_SCHEDULER holds the address of a scheduler with
workers (``.ci/run`` starts one on loopback with two workers); the stored
results must equal those of a local run with one worker.
"""

from __future__ import annotations

import os

import pytest

from tests.execution.workflow import analyse, assert_same, stored

ADDRESS = os.environ.get("ROLETRAIL_TEST_SCHEDULER")
pytestmark = pytest.mark.skipif(
    not ADDRESS, reason="Dask run: set ROLETRAIL_TEST_SCHEDULER to a scheduler address (.ci/run starts one)")


@pytest.mark.parametrize("method, smooth", [("dynamic", None), ("structural", "off")])
def test_cluster_run_stores_what_the_local_run_stores(tmp_path, events_file, method, smooth):
    local, cluster = tmp_path / "local.db", tmp_path / "cluster.db"
    structures_local = analyse(local, events_file, "--workers", "1", method=method, smooth=smooth)
    structures_cluster = analyse(cluster, events_file, "--scheduler", ADDRESS, method=method, smooth=smooth)
    assert_same(stored(local), stored(cluster))
    assert structures_local == structures_cluster
    assert stored(cluster)["fit_periods"]["p_value"].notna().all()


def test_cluster_through_the_environment_and_the_api(tmp_path, events_file, monkeypatch):
    from tracker.api import Study

    local, cluster = tmp_path / "local.db", tmp_path / "cluster.db"
    analyse(local, events_file, "--workers", "1", method="structural", smooth="auto")
    monkeypatch.setenv("ROLETRAIL_SCHEDULER", ADDRESS)
    analyse(cluster, events_file, method="structural", smooth="auto")
    assert_same(stored(local), stored(cluster))
    with Study(cluster, create=False, scheduler=ADDRESS) as study:
        assert study.structures(draws=9).equals(Study(local, create=False, workers=1).structures(draws=9))
