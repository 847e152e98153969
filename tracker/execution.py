"""One way to run many independent tasks: in this process, on every core, or on a Dask cluster.

Per-period fits, refits on null-model draws, bootstrap refits and smoothing
restarts are all *independent tasks* of a pure function.  :func:`map_tasks`
runs them serially (``workers=1``), on local processes through joblib's loky
backend (the default: every core, when the batch is worth a pool; see
:func:`pool_pays`), or on an existing Dask distributed cluster
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
import time
from dataclasses import dataclass
from typing import Callable, Iterable, Iterator, Sequence

import numpy as np

__all__ = ["map_tasks", "task_seeds", "resolve_workers", "resolve_scheduler", "Progress", "Execution",
           "configured", "overriding", "current", "step_progress", "CONNECT_TIMEOUT_ENV", "pool_pays"]

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
        Most local processes; default from :func:`configured` (else every core;
        1 runs in this process).  Inside a task it is always 1.  More than one
        is an upper bound: the first task runs in this process and is timed,
        and the rest go to a pool only when :func:`pool_pays` says they finish
        sooner there, counting the pool's start and the shipping of their
        arguments (else the next task runs here and the question is asked
        again with its time).  A batch of cheap tasks thus never starts a
        pool.  Where a task runs never changes its result.
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
    out: list = []
    spent = 0.0
    sizes = _task_bytes(tasks) if n_workers > 1 else []
    warm = _pool_is_warm(n_workers)
    left_bytes = sum(sizes)
    with _worker_threads(n_workers):
        while len(out) < total:
            done = len(out)
            if n_workers > 1 and done and pool_pays(spent / done, total - done, n_workers, left_bytes, warm=warm):
                break
            start = _clock()
            out.append(fn(*tasks[done]))
            spent += _clock() - start
            left_bytes -= sizes[done] if sizes else 0
            if progress is not None:
                progress(len(out), total)
    if len(out) < total:
        out += _map_pool(fn, tasks[len(out):], n_workers, progress, offset=len(out), total=total)
    return out


#: Seconds to start a pool of local worker processes for a batch (loky, cold:
#: spawn the processes and import roletrail, numpy and scipy in each).  Measured on
#: the 2-core development machine, load average 3 (2026-12-02): 2 workers
#: running one task of ``tracker.api``'s import 3.1 s (twice); with a task that
#: imports nothing 0.5 s; under a load average of 15 the bare start took 3.6 s
#: (tests/benchmarks/README.md).  The heavy import is the usual case: a task's
#: function lives in a roletrail module.
POOL_START_SECONDS = 3.0
#: Seconds to hand a batch to a pool that an earlier batch of this process
#: started and that is still alive: 0.011-0.031 s for two trivial tasks
#: measured on the same machine.
POOL_WARM_SECONDS = 0.05
#: Seconds of dispatch per task on a warm pool (pickling a small task, the pipe,
#: the result back): 200 trivial tasks took 0.014 s; 2 ms per task leaves room
#: for results larger than a number.
TASK_DISPATCH_SECONDS = 0.002
#: Bytes per second of task arguments shipped to the workers (pickling, joblib's
#: memory-mapping of large arrays, the copy): two tasks each carrying a 50 MB
#: sparse matrix took 0.18 s on a warm pool (pickling alone 0.026 s), so about
#: 280 MB/s; taken as 100 MB/s.
SHIP_BYTES_PER_SECOND = 100e6
#: joblib stops loky workers idle this long (its ``idle_worker_timeout``, 300 s);
#: a pool used less than this ago, minus a minute's margin, counts as warm.
POOL_IDLE_SECONDS = 240.0

_clock = time.perf_counter  # the clock that times tasks run here (tests inject another)
_POOL_USED: dict[int, float] = {}  # pool size -> time.monotonic() of its last batch


def pool_pays(seconds_per_task: float, remaining: int, workers: int, payload_bytes: float = 0.0,
              *, warm: bool = False) -> bool:
    """Whether ``remaining`` tasks finish sooner on a pool of ``workers`` processes than here.

    The rule, with ``t`` the mean time of the batch's tasks run here so far,
    ``m`` the tasks left and ``w = min(workers, m)``::

        serial  = t * m
        pool    = t * ceil(m / w) + start + m * TASK_DISPATCH_SECONDS
                  + payload_bytes / SHIP_BYTES_PER_SECOND
        use the pool when pool < serial

    where ``start`` is :data:`POOL_START_SECONDS` (cold) or
    :data:`POOL_WARM_SECONDS` (``warm``: a pool of this size served a batch
    of this process within :data:`POOL_IDLE_SECONDS`).  The constants were
    measured on the 2-core development machine (see their comments).  Only the
    time depends on the answer, never the results.

    >>> pool_pays(0.01, 50, 2)        # half a second of work: not worth a pool
    False
    >>> pool_pays(2.0, 50, 2)         # 100 s of work: the pool halves it
    True
    >>> pool_pays(0.2, 50, 2, warm=True)
    True
    """
    if seconds_per_task < 0 or remaining < 0 or workers < 1:
        raise ValueError("seconds_per_task and remaining must be >= 0 and workers >= 1")
    w = min(workers, remaining)
    if w <= 1:
        return False
    serial = seconds_per_task * remaining
    start = POOL_WARM_SECONDS if warm else POOL_START_SECONDS
    pool = (seconds_per_task * -(-remaining // w) + start + remaining * TASK_DISPATCH_SECONDS
            + payload_bytes / SHIP_BYTES_PER_SECOND)
    return pool < serial


def _worker_threads(n_workers: int):
    """The thread limits of a pool worker, for tasks of a batch of ``n_workers`` run in this process.

    joblib gives each loky worker ``cores // n_workers`` threads of BLAS and
    OpenMP; a task timed here under the same limits predicts its time there.
    It also spares a loaded machine the spinning of idle OpenMP threads: on
    the 2-core development machine at load average 5-7 (2026-12-02), 25 null
    refits of a 300-actor period took 18.6-28.7 s with 2 OpenMP threads and
    3.9 s with 1.  With one worker nothing is limited (this process as it is).
    """
    if n_workers <= 1:
        return contextlib.nullcontext()
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=max(1, (os.cpu_count() or 1) // n_workers))


def _pool_is_warm(workers: int) -> bool:
    used = _POOL_USED.get(workers)
    return used is not None and time.monotonic() - used < POOL_IDLE_SECONDS


def _map_pool(fn: Callable, tasks: list[tuple], n_workers: int, progress: Progress | None,
              offset: int, total: int) -> list:
    """The tasks on joblib's loky pool of ``n_workers`` processes (reused across batches), in order."""
    from joblib import Parallel, delayed

    parallel = Parallel(n_jobs=n_workers, backend="loky", return_as="generator")
    out = []
    try:
        for result in parallel(delayed(_in_task)(fn, task) for task in tasks):
            out.append(result)
            if progress is not None:
                progress(offset + len(out), total)
    finally:
        _POOL_USED[n_workers] = time.monotonic()
    return out


def _task_bytes(tasks: list[tuple]) -> list[int]:
    """Approximate bytes each task would ship to a worker: its arrays, strings and containers."""
    return [_nbytes(task, set(), 0) for task in tasks]


def _nbytes(obj, seen: set, depth: int) -> int:
    """Bytes of numpy arrays (and scipy sparse ones, through their attributes), strings and their containers.

    An approximation for :func:`pool_pays`: long sequences are sized from their
    first 16 items, and nesting deeper than 6 levels counts nothing.
    """
    if id(obj) in seen or depth > 6:
        return 0
    seen.add(id(obj))
    if isinstance(obj, np.ndarray):
        return int(obj.nbytes)
    if isinstance(obj, (str, bytes, bytearray)):
        return len(obj)
    if isinstance(obj, (int, float, bool, complex, type(None))):
        return 8
    if isinstance(obj, dict):
        items = list(obj.values())
    elif isinstance(obj, (list, tuple, set, frozenset)):
        items = list(obj) if len(obj) <= 16 else list(obj)[:16]
        if len(obj) > 16:
            head = sum(_nbytes(item, seen, depth + 1) for item in items)
            return head * len(obj) // 16
    elif hasattr(obj, "__dict__") and not callable(obj):
        items = list(vars(obj).values())
    elif hasattr(obj, "__slots__"):
        items = [getattr(obj, name, None) for name in obj.__slots__]
    else:
        return 64
    return sum(_nbytes(item, seen, depth + 1) for item in items)


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
