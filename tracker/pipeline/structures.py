"""Structure tests of one period, as a task that can run in another process or on a cluster.

:meth:`tracker.api.Study.structures` makes one task per period (its images
and raw ties) and runs them through :func:`tracker.execution.map_tasks`; the
heavy parts are the random images of the ideal-structure test and the
restarts of the core-periphery fit.  This module stays light to import (no
database, no pandas), so worker processes start quickly.
"""

from __future__ import annotations

__all__ = ["structure_tests", "core_periphery_check", "structure_workers", "POOL_TIES"]

#: Below this many ties in all tasks together the structure tests run in this
#: process: their work (about a second of CPU at 5,000 actors x 20 periods)
#: is less than starting worker processes, which import numpy, scipy and
#: roletrail each (2-4 s on a busy 2-core machine; a report at 300 actors x 5
#: periods took 15.4 s with two workers against 7.6 s with one).  At 50,000
#: actors x 20 periods (2.5 million ties) the core-periphery fits take about
#: a second per period and two workers pay.
POOL_TIES = 1_000_000


def structure_tests(period: str, images: list, draws: int, seed: int) -> list:
    """Per relation of one period: the closest ideal image and the core-periphery check.

    ``images`` holds ``(relation, image, raw matrix or None)``; returns
    ``(period, relation, best ideal fit, (discrete r, continuous r) or None)``
    in the same order.  The ideal fit is the first of
    :func:`tracker.structures.ideal.classify_image` (with ``draws`` random
    images for its p-value) or of :func:`~tracker.structures.ideal.closest_ideal`
    (``draws=0``); every period uses the same ``seed``, so the answer does
    not depend on where or in what order the periods run.

    BLAS runs on one thread here: the core-periphery fits are long chains of
    vector products of length n, and at tens of thousands of actors a
    two-thread dot product on a busy machine waits on its threads far longer
    than it computes (measured at 50,000 actors: 5.0 s against 0.46 s for the
    continuous fit, same result).  Periods run side by side through
    :func:`tracker.execution.map_tasks` instead.
    """
    from threadpoolctl import threadpool_limits

    from tracker.structures.coreperiphery import continuous_coreness, discrete_core_periphery
    from tracker.structures.ideal import classify_image, closest_ideal

    out = []
    with threadpool_limits(limits=1, user_api="blas"):
        for rel, img, matrix in images:
            best = (classify_image(img, draws=draws, seed=seed) if draws else closest_ideal(img, seed=seed))[0]
            checks = None if matrix is None else core_periphery_check(matrix, seed, discrete_core_periphery,
                                                                        continuous_coreness)
            out.append((period, rel, best, checks))
    return out


def structure_workers(tasks: list) -> int | None:
    """Workers for :func:`structure_tests` over ``tasks``: 1 below :data:`POOL_TIES` ties in all.

    Else None: the setting in force (``--workers``, all cores by default).
    Results do not depend on the number of workers, only the time does.

    >>> structure_workers([("2001", [("r", None, None)], 99, 0)])
    1
    """
    ties = 0
    for task in tasks:
        for _, _, matrix in task[1]:
            ties += int(getattr(matrix, "nnz", 0) or 0) if matrix is not None else 0
    return 1 if ties < POOL_TIES else None


def core_periphery_check(matrix, seed, discrete, continuous) -> tuple[float, float]:
    """Borgatti-Everett discrete and continuous correlations, NaN where undefined (too few actors)."""
    from tracker.errors import UsageError

    try:
        _, r_discrete = discrete(matrix, seed=seed)
    except UsageError:
        r_discrete = float("nan")
    try:
        _, r_continuous = continuous(matrix)
    except UsageError:
        r_continuous = float("nan")
    return float(r_discrete), float(r_continuous)
