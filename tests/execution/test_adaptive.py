"""map_tasks decides by itself when a batch is worth a pool: never a change of result, no timing in the tests.

The clock that times tasks run here (``tracker.execution._clock``) is replaced
by one that says how long each task took, so the decisions are deterministic.
Whether a task ran in a pool is read from the process id it returns.
"""

from __future__ import annotations

import math
import os

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given
from hypothesis import strategies as st

from tests.execution.workflow import draw, draw_where
from tracker import execution
from tracker.execution import map_tasks, pool_pays, task_seeds


def fake_clock(monkeypatch, durations):
    """Make the i-th task run here appear to take ``durations[i]`` seconds (the last value repeats)."""
    state = {"now": 0.0, "calls": 0}

    def clock():
        # Called twice per task: before (even call) and after (odd call).
        if state["calls"] % 2:
            i = min(state["calls"] // 2, len(durations) - 1)
            state["now"] += durations[i]
        state["calls"] += 1
        return state["now"]

    monkeypatch.setattr(execution, "_clock", clock)


def ran_here(results) -> list[bool]:
    return [pid == os.getpid() for pid, _ in results]


@pytest.fixture
def cold_pool(monkeypatch):
    """No pool of this process counts as warm, whatever earlier tests started."""
    monkeypatch.setattr(execution, "_POOL_USED", {})


def test_cheap_batch_never_starts_a_pool(monkeypatch, cold_pool):
    # 40 tasks of 10 ms each: 0.39 s left after the first, less than a pool's start (3 s).
    fake_clock(monkeypatch, [0.01])
    tasks = [(s, 3) for s in task_seeds(1, 40)]
    got = map_tasks(draw_where, tasks, workers=2)
    assert all(ran_here(got))
    assert execution._POOL_USED == {}  # the pool was never asked for


def test_expensive_batch_goes_to_the_pool_after_the_first_task(monkeypatch, cold_pool):
    # 8 tasks of 5 s: 35 s left, about 20 s on two workers with the start: the pool pays.
    fake_clock(monkeypatch, [5.0])
    tasks = [(s, 3) for s in task_seeds(2, 8)]
    got = map_tasks(draw_where, tasks, workers=2)
    assert ran_here(got) == [True] + [False] * 7
    assert all(np.array_equal(b, draw(*t)) for (_, b), t in zip(got, tasks))


def test_switches_to_the_pool_when_the_tasks_grow(monkeypatch, cold_pool):
    # Three cheap tasks, then one of 30 s: the mean of the four makes the 6 left worth a pool.
    fake_clock(monkeypatch, [0.001, 0.001, 0.001, 30.0])
    tasks = [(s, 2) for s in task_seeds(3, 10)]
    seen = []
    got = map_tasks(draw_where, tasks, workers=2, progress=lambda done, total: seen.append((done, total)))
    assert ran_here(got) == [True] * 4 + [False] * 6
    assert seen == [(i, 10) for i in range(1, 11)]  # progress counts on across the switch


def test_one_worker_and_the_last_task_always_run_here(monkeypatch, cold_pool):
    fake_clock(monkeypatch, [100.0])
    assert all(ran_here(map_tasks(draw_where, [(s, 2) for s in task_seeds(4, 5)], workers=1)))
    assert all(ran_here(map_tasks(draw_where, [(1, 2), (2, 2)], workers=2)))  # one task left: no pool of one


def test_heavy_arguments_keep_a_batch_here(monkeypatch, cold_pool):
    # 1 s tasks, 9 left: worth a pool with small arguments, not when each ships 200 MB (18 s at 100 MB/s).
    fake_clock(monkeypatch, [1.0])
    assert not all(ran_here(map_tasks(_where_size, [(np.zeros(10),)] * 10, workers=2)))
    big = np.zeros(25_000_000)  # 200 MB
    assert all(ran_here(map_tasks(_where_size, [(big,)] * 10, workers=2)))


def _where_size(array):
    return os.getpid(), array.size


def test_results_identical_serial_adaptive_and_pool(monkeypatch, cold_pool, pool_for_every_batch):
    # The definition is the plain loop; the adaptive run switches after 2 tasks; the forced run after 1.
    tasks = [(s, 4) for s in task_seeds(42, 9)]
    reference = [draw(*t) for t in tasks]
    runs = {"serial": map_tasks(draw_where, tasks, workers=1),
            "pool": map_tasks(draw_where, tasks, workers=2)}
    monkeypatch.setattr(execution, "POOL_START_SECONDS", 3.0)
    monkeypatch.setattr(execution, "_POOL_USED", {})
    fake_clock(monkeypatch, [0.01, 10.0])
    runs["adaptive"] = map_tasks(draw_where, tasks, workers=2)
    assert ran_here(runs["adaptive"]) == [True, True] + [False] * 7
    assert ran_here(runs["pool"]) == [True] + [False] * 8
    for got in runs.values():
        assert all(np.array_equal(a, b) for a, (_, b) in zip(reference, got))


def test_a_pool_used_recently_is_warm_and_cheaper(monkeypatch, cold_pool):
    fake_clock(monkeypatch, [5.0])
    map_tasks(draw_where, [(s, 2) for s in task_seeds(5, 3)], workers=2)
    assert execution._pool_is_warm(2) and not execution._pool_is_warm(3)
    # 0.5 s tasks, 9 left: not worth a cold start, worth a warm pool.
    assert not pool_pays(0.5, 9, 2) and pool_pays(0.5, 9, 2, warm=True)


def _greedy_makespan(t: float, m: int, w: int) -> float:
    """Brute force: m equal tasks, each handed to the worker free first (list scheduling), the last finish."""
    free = [0.0] * w
    for _ in range(m):
        i = free.index(min(free))
        free[i] += t
    return max(free)


@given(eighths=st.integers(0, 800), m=st.integers(0, 60), w=st.integers(1, 8),
       payload=st.floats(0, 1e10), warm=st.booleans())
def test_rule_is_the_schedule_against_the_serial_time(eighths, m, w, payload, warm):
    # The pool's time: the schedule of equal tasks (simulated above) plus its fixed costs; serial: t * m.
    # Task times in eighths of a second add up exactly, so the simulated schedule equals t * ceil(m / w).
    t = eighths / 8
    start = execution.POOL_WARM_SECONDS if warm else execution.POOL_START_SECONDS
    pool = (_greedy_makespan(t, m, max(1, min(w, m))) + start + m * execution.TASK_DISPATCH_SECONDS
            + payload / execution.SHIP_BYTES_PER_SECOND)
    expected = min(w, m) > 1 and pool < t * m  # one worker (or one task left) is no pool
    assert pool_pays(t, m, w, payload, warm=warm) == expected
    if expected:  # more work, a warm pool or more workers never turn the answer back
        assert pool_pays(2 * t, m, w, payload, warm=warm) and pool_pays(t, m, w, payload, warm=True)
        assert pool_pays(t, m, w + 1, payload, warm=warm)


def test_rule_rejects_bad_arguments():
    for args in ((-1.0, 3, 2), (1.0, -1, 2), (1.0, 3, 0)):
        with pytest.raises(ValueError):
            pool_pays(*args)


def test_argument_bytes_count_arrays_inside_sparse_matrices_and_snapshots():
    # Reference: scipy's CSR storage is exactly its data, indices and indptr arrays.
    a = sp.random_array((300, 300), density=0.05, format="csr", random_state=0)
    stored = a.data.nbytes + a.indices.nbytes + a.indptr.nbytes
    from tracker.snapshot import Relation, Snapshot

    actors = tuple(f"a{i:03d}" for i in range(300))
    snap = Snapshot("2020", actors, (Relation("r", True),), (a,))
    (sparse_bytes, snap_bytes, twice) = execution._task_bytes([(a,), (snap, "settings"), (a, a)])
    assert stored <= sparse_bytes <= stored + 1024
    assert stored + 4 * 300 <= snap_bytes <= stored + 5 * 300 + 2048  # + the actor names
    assert twice == sparse_bytes  # the same object twice in one task ships once (pickle's memo)
    assert math.isclose(execution._nbytes(list(range(1000)), set(), 0), 8000, rel_tol=0.01)


def _blas_threads(_):
    from threadpoolctl import threadpool_info

    return os.getpid(), max(info["num_threads"] for info in threadpool_info() if info["user_api"] == "blas")


def test_tasks_run_here_get_a_workers_thread_limits(monkeypatch, cold_pool):
    # joblib gives a loky worker cores // workers threads (its inner_max_num_threads); a task of a
    # multi-worker batch run here gets the same, so its time predicts a worker's.  One worker: no limit.
    from threadpoolctl import threadpool_info

    before = max(info["num_threads"] for info in threadpool_info() if info["user_api"] == "blas")
    fake_clock(monkeypatch, [0.001])
    limited = map_tasks(_blas_threads, [(i,) for i in range(3)], workers=2)
    assert all(ran_here(limited)) and {n for _, n in limited} == {max(1, (os.cpu_count() or 1) // 2)}
    assert {n for _, n in map_tasks(_blas_threads, [(i,) for i in range(3)], workers=1)} == {before}
