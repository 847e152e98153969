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

import atexit
import contextlib
import contextvars
import os
from dataclasses import dataclass
from typing import Callable, Iterable, Iterator, Sequence

import numpy as np

__all__ = ["map_tasks", "task_seeds", "resolve_workers", "resolve_scheduler", "Progress", "Execution",
           "configured", "overriding", "current", "step_progress", "CONNECT_TIMEOUT_ENV"]

Progress = Callable[[int, int], None]  # (done, total)
Reporter = Callable[[str, int], Progress]  # (label, total) -> progress callback

SCHEDULER_ENV = "ROLETRAIL_SCHEDULER"
CONNECT_TIMEOUT_ENV = "ROLETRAIL_SCHEDULER_TIMEOUT"  # seconds to reach the scheduler and find a worker (default 10)
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


@contextlib.contextmanager
def overriding(workers: int | None = None, scheduler: str | None = None,
               reporter: Reporter | None = None) -> Iterator[Execution]:
    """Like :func:`configured`, but a setting left None keeps the one in force.

    The API uses it: ``Study(workers=2)`` overrides, ``Study()`` inherits what
    the command line (or an enclosing :func:`configured`) set.
    """
    now = _CURRENT.get()
    with configured(now.workers if workers is None else workers, scheduler or now.scheduler,
                    reporter or now.reporter) as execution:
        yield execution


def step_progress(label: str, total: int | None = None, **kwargs) -> Progress | None:
    """A ``(done, total)`` callback from the configured reporter for a step that is no batch of tasks.

    None when no reporter is configured (or inside a task), so callers write
    ``if update: update(done, total)``.
    """
    reporter = current().reporter
    return None if reporter is None else reporter(label, total, **kwargs)


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
        What the tasks are ("null-model refits"); with a configured reporter
        and no ``progress``, a batch of more than one task is shown as a
        progress bar under this label (default: the first line of ``fn``'s
        docstring).
    """
    tasks = [tuple(t) for t in tasks]
    total = len(tasks)
    if total == 0:
        return []
    ctx = current()
    if workers is None:
        workers = ctx.workers
    if os.environ.get(_IN_TASK_ENV):
        workers = 1
    if progress is None and ctx.reporter is not None and total > 1:
        progress = ctx.reporter(label or _describe(fn), total)
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
    """Run the tasks on the Dask cluster at ``address``; results in task order.

    Each task (the function and its arguments: arrays, snapshots, settings)
    is pickled by Dask (cloudpickle) and sent to a worker; the result comes
    back here.  Workers never see the study database: the caller stores what
    comes back, so the study keeps one writer.
    """
    from tracker.errors import UsageError

    client = connect(address)  # first: it explains a missing Dask in one line
    from distributed import as_completed
    from distributed.client import FutureCancelledError
    from distributed.scheduler import KilledWorker

    futures = [client.submit(_in_task, fn, task, pure=False) for task in tasks]
    index = {f.key: i for i, f in enumerate(futures)}
    out = [None] * len(futures)
    try:
        for done, future in enumerate(as_completed(futures, loop=client.loop), 1):
            out[index[future.key]] = future.result()
            if progress is not None:
                progress(done, len(futures))
    except (KilledWorker, FutureCancelledError) as exc:
        raise UsageError(f"a worker of the Dask cluster at {address} died or was lost while computing "
                         f"({type(exc).__name__}); check the workers' memory and logs and run again") from None
    finally:
        client.cancel([f for f in futures if not f.done()])
    return out


_CLIENTS: dict = {}


def connect(address: str):
    """A Dask client of the scheduler at ``address`` with at least one worker that runs this roletrail.

    Made once per process and address and reused by every later batch.
    Problems become one-line :class:`tracker.errors.UsageError` naming the
    address and the fix: no Dask installed, scheduler unreachable (within
    ``$ROLETRAIL_SCHEDULER_TIMEOUT`` seconds, default 10), no workers, or
    workers without this version of roletrail.
    """
    from tracker.errors import UsageError

    client = _CLIENTS.get(address)
    if client is not None and client.status == "running":
        return client
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - depends on the install
        raise UsageError(f"--scheduler {address} needs Dask distributed, which is not installed; "
                         "pip install 'roletrail[cluster]', or leave out --scheduler to run on this machine") from None
    timeout = float(os.environ.get(CONNECT_TIMEOUT_ENV) or 10)
    fix = (f"start a scheduler there (dask scheduler) or correct --scheduler / ${SCHEDULER_ENV}, "
           "or leave it out to run on this machine")
    try:
        client = Client(address, set_as_default=False, timeout=timeout)
    except Exception as exc:  # noqa: BLE001 - OSError, TimeoutError, ValueError for a malformed address ...
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise UsageError(f"cannot reach the Dask scheduler at {address} ({_short(reason)}); {fix}") from None
    try:
        try:
            client.wait_for_workers(1, timeout=timeout)
        except Exception:  # noqa: BLE001 - distributed raises TimeoutError or its own
            raise UsageError(f"the Dask scheduler at {address} has no workers; start some there "
                             f"(dask worker {address}) and try again") from None
        _check_workers(client, address)
    except BaseException:
        client.close()
        raise
    if not _CLIENTS:
        atexit.register(_close_clients)
    _CLIENTS[address] = client
    return client


def _close_clients() -> None:
    for client in _CLIENTS.values():
        with contextlib.suppress(Exception):
            client.close()
    _CLIENTS.clear()


def _check_workers(client, address: str) -> None:
    """Refuse a cluster whose workers cannot import this roletrail (tasks would fail one by one)."""
    from tracker import __version__
    from tracker.errors import UsageError

    try:
        versions = client.run(_worker_version)
    except Exception:  # noqa: BLE001 - an import error raised on a worker comes back as itself
        versions = {"?": None}
    wrong = {w: v for w, v in versions.items() if v != __version__}
    if wrong:
        worker, version = next(iter(wrong.items()))
        found = "no roletrail" if version is None else f"roletrail {version}"
        raise UsageError(f"the Dask worker {worker} of {address} has {found}; install roletrail {__version__} "
                         "in the workers' environment (pip install 'roletrail[cluster]') and restart them")


def _worker_version() -> str | None:
    try:
        from tracker import __version__
    except ImportError:
        return None
    return __version__


def _short(text: str, limit: int = 120) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _describe(fn: Callable) -> str:
    """A bar label from a task function: the first line of its docstring, else its name."""
    doc = (getattr(fn, "__doc__", None) or "").strip().splitlines()
    if doc and len(doc[0]) <= 60:
        return doc[0].rstrip(".")
    return getattr(fn, "__name__", "tasks").strip("_").replace("_", " ")


def _in_task(fn: Callable, task: tuple):
    """Run one task in a worker, marking the process so nested :func:`map_tasks` stay serial."""
    os.environ[_IN_TASK_ENV] = "1"
    return fn(*task)
