"""map_tasks and task seeds: the same answer in this process, on local processes and, when set, on a cluster."""

from __future__ import annotations

import os

import numpy as np
import pytest

from tests.execution.workflow import draw, draw_where, nested
from tracker.execution import configured, current, map_tasks, overriding, task_seeds

cluster = pytest.mark.skipif(not os.environ.get("ROLETRAIL_TEST_SCHEDULER"),
                             reason="Dask run: set ROLETRAIL_TEST_SCHEDULER to a scheduler address (.ci/run starts one)")


def test_random_tasks_identical_for_one_and_two_workers(pool_for_every_batch):
    tasks = [(s, 5) for s in task_seeds(42, 6)]
    reference = [draw(*t) for t in tasks]  # the definition: a plain loop
    for workers in (1, 2):
        got = map_tasks(draw_where, tasks, workers=workers)
        assert all(np.array_equal(a, b) for a, (_, b) in zip(reference, got))
        assert {pid == os.getpid() for pid, _ in got} == ({True} if workers == 1 else {True, False})


def test_task_seeds_are_distinct_streams():
    # numpy's SeedSequence.spawn gives independent children (numpy docs, "Parallel random number generation")
    seeds = task_seeds(0, 1000)
    assert len(set(seeds)) == 1000 and task_seeds(0, 3) == seeds[:3] and task_seeds(1, 3) != seeds[:3]


def test_nested_tasks_run_serially_with_the_same_answer(pool_for_every_batch):
    # The first task runs here (with the settings in force); the others in the pool, where nested batches are serial.
    got = map_tasks(nested, [(1,), (2,), (3,)], workers=2)
    assert [g[0] for g in got] == [None, 1, 1]
    for (_, inner), seed in zip(got, (1, 2, 3)):
        assert all(np.array_equal(a, draw(s, 2)) for a, s in zip(inner, task_seeds(seed, 3)))


def test_progress_reaches_total_and_reporter_is_used(pool_for_every_batch):
    seen = []
    with configured(workers=2, reporter=lambda label, total: (lambda done, t: seen.append((label, done, t)))):
        map_tasks(draw, [(1, 2), (2, 2), (3, 2)], label="drawing")
    assert seen[-1] == ("drawing", 3, 3) and [s[1] for s in seen] == [1, 2, 3]


@pytest.mark.parametrize("where", ["here", "pool"])
def test_a_user_error_in_a_task_comes_back_as_itself(where, request):
    from tracker.errors import UsageError
    from tracker.ingest.periods import parse_scheme

    if where == "pool":
        request.getfixturevalue("pool_for_every_batch")
    with pytest.raises(UsageError, match="unknown period 'bogus'"):
        map_tasks(parse_scheme, [("year",), ("year",), ("bogus",)], workers=2)


def test_overriding_keeps_what_is_not_given():
    reporter = lambda label, total: None  # noqa: E731
    with configured(workers=3, reporter=reporter):
        with overriding(scheduler=None):
            assert current().workers == 3 and current().reporter is reporter
        with overriding(workers=1):
            assert current().workers == 1 and current().reporter is reporter


@cluster
def test_random_generators_identical_on_a_cluster():
    # Workers have roletrail and numpy, not these tests: the task is numpy's own generator constructor.
    seeds = task_seeds(42, 6)
    got = map_tasks(np.random.default_rng, [(s,) for s in seeds], scheduler=os.environ["ROLETRAIL_TEST_SCHEDULER"])
    assert all(np.array_equal(g.random(5), np.random.default_rng(s).random(5)) for g, s in zip(got, seeds))


@cluster
def test_a_user_error_on_a_cluster_comes_back_as_itself():
    from tracker.errors import UsageError
    from tracker.ingest.periods import parse_scheme

    with pytest.raises(UsageError, match="unknown period 'bogus'"):
        map_tasks(parse_scheme, [("year",), ("bogus",)], scheduler=os.environ["ROLETRAIL_TEST_SCHEDULER"])
