"""One way to run many independent tasks: in this process, on every core, or on a Dask cluster.

Per-period fits, refits on null-model draws, bootstrap refits and smoothing
restarts are all *independent tasks* of a pure function.  :func:`map_tasks`
runs them serially (``workers=1``), on local processes through joblib's loky
backend (the default: every core), or on an existing Dask distributed cluster
(``scheduler="tcp://host:8786"`` or ``$ROLETRAIL_SCHEDULER``).  The study
database is never touched by a task: tasks receive arrays and return results,
and the caller stores them.

Determinism: a randomised task never draws from a shared generator.  Its seed
comes from :func:`task_seeds`, which spawns independent child streams from
one seed with :class:`numpy.random.SeedSequence` (O'Neill 2014, PCG; numpy's
documented way to seed parallel work).  Results are returned in the order of
the tasks, so the answer is the same for any number of workers and on a
cluster.

>>> map_tasks(pow, [(2, 3), (3, 2)], workers=1)
[8, 9]
>>> task_seeds(7, 3) == task_seeds(7, 3)
True
"""

from __future__ import annotations

import contextlib
import contextvars
import os
from dataclasses import dataclass
from typing import Callable, Iterable, Iterator, Sequence

import numpy as np

__all__ = ["map_tasks", "task_seeds", "resolve_workers", "resolve_scheduler", "Progress", "Execution",
           "configured", "current"]

Progress = Callable[[int, int], None]  # (done, total)
Reporter = Callable[[str, int], Progress]  # (label, total) -> progress callback

SCHEDULER_ENV = "ROLETRAIL_SCHEDULER"
_IN_TASK_ENV = "ROLETRAIL_IN_TASK"


@dataclass(frozen=True)
class Execution:
    """Where tasks run, set once by the caller (API or CLI) for everything below it.

    ``workers`` None = every core; ``scheduler`` a Dask address; ``reporter``
    makes a progress callback for a labelled batch of tasks (the CLI shows a
    bar with a time estimate).  Settings of *how* to compute never change
    *what* is computed, so they are not part of a fit's stored settings.
    """

    workers: int | None = None
    scheduler: str | None = None
    reporter: Reporter | None = None


_CURRENT: contextvars.ContextVar[Execution] = contextvars.ContextVar("roletrail_execution", default=Execution())


def current() -> Execution:
    """The execution settings in force (inside a worker process: one worker, no reporter)."""
    if os.environ.get(_IN_TASK_ENV):
        return Execution(workers=1)
    return _CURRENT.get()


@contextlib.contextmanager
def configured(workers: int | None = None, scheduler: str | None = None,
               reporter: Reporter | None = None) -> Iterator[Execution]:
    """``with configured(workers=2): ...``: every :func:`map_tasks` below runs so."""
    token = _CURRENT.set(Execution(workers, resolve_scheduler(scheduler), reporter))
    try:
        yield _CURRENT.get()
    finally:
        _CURRENT.reset(token)


def task_seeds(seed: int, n: int) -> list[int]:
    """``n`` independent 63-bit seeds spawned from ``seed`` (numpy ``SeedSequence``)."""
    children = np.random.SeedSequence(int(seed)).spawn(int(n))
    return [int(c.generate_state(2, dtype=np.uint32).astype(np.uint64) @ np.array([1, 2**31], dtype=np.uint64))
            for c in children]


def resolve_workers(workers: int | None) -> int:
    """``None`` or 0 means every core; a negative number counts back from every core (joblib's rule)."""
    cores = os.cpu_count() or 1
    if workers is None or workers == 0:
        return cores
    if workers < 0:
        return max(1, cores + 1 + workers)
    return int(workers)


def resolve_scheduler(scheduler: str | None) -> str | None:
    """The Dask scheduler address: the argument, else ``$ROLETRAIL_SCHEDULER``, else None (local)."""
    if scheduler:
        return scheduler
    return os.environ.get(SCHEDULER_ENV) or None


def map_tasks(
    fn: Callable,
    tasks: Iterable[Sequence],
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    progress: Progress | None = None,
    label: str | None = None,
) -> list:
    """``[fn(*task) for task in tasks]``, in order, run where the settings say.

    Parameters
    ----------
    fn : callable
        A pure, picklable, module-level function.
    tasks : iterable of argument tuples
    workers : int, optional
        Local processes; default from :func:`configured` (else every core;
        1 runs in this process).  Inside a task it is always 1.
    scheduler : str, optional
        Address of a Dask distributed scheduler; overrides ``workers``.
    progress : callable(done, total), optional
        Called as results come back.
    label : str, optional
        What the tasks are ("null-model refits"); with a configured reporter,
        shown as a progress bar.
    """
    tasks = [tuple(t) for t in tasks]
    total = len(tasks)
    ctx = current()
    if workers is None:
        workers = ctx.workers
    if os.environ.get(_IN_TASK_ENV):
        workers = 1
    if progress is None and label is not None and ctx.reporter is not None and total:
        progress = ctx.reporter(label, total)
    address = None if os.environ.get(_IN_TASK_ENV) else resolve_scheduler(scheduler or ctx.scheduler)
    if address is not None:
        return _map_dask(fn, tasks, address, progress)
    n_workers = min(resolve_workers(workers), total)
    if n_workers <= 1:
        out = []
        for i, task in enumerate(tasks, 1):
            out.append(fn(*task))
            if progress is not None:
                progress(i, total)
        return out
    from joblib import Parallel, delayed

    parallel = Parallel(n_jobs=n_workers, backend="loky", return_as="generator")
    out = []
    for i, result in enumerate(parallel(delayed(_in_task)(fn, task) for task in tasks), 1):
        out.append(result)
        if progress is not None:
            progress(i, total)
    return out


def _map_dask(fn: Callable, tasks: list[tuple], address: str, progress: Progress | None) -> list:
    try:
        from distributed import Client, as_completed
    except ImportError as exc:  # pragma: no cover - depends on the install
        raise ValueError("a Dask scheduler was given but dask.distributed is not installed; "
                         "pip install 'roletrail[cluster]'") from exc
    with Client(address, set_as_default=False) as client:
        futures = [client.submit(_in_task, fn, task, pure=False) for task in tasks]
        index = {f.key: i for i, f in enumerate(futures)}
        out = [None] * len(futures)
        for done, future in enumerate(as_completed(futures), 1):
            out[index[future.key]] = future.result()
            if progress is not None:
                progress(done, len(futures))
        return out


def _in_task(fn: Callable, task: tuple):
    """Run one task in a worker, marking the process so nested :func:`map_tasks` stay serial."""
    os.environ[_IN_TASK_ENV] = "1"
    return fn(*task)
