"""Shared steps of the execution tests: a small planted study, one analysis through the CLI, its stored results."""

from __future__ import annotations

import os

import numpy as np
import pandas as pd
from click.testing import CliRunner

from tracker.api import Study
from tracker.cli import main


def planted_events(path, n_actors: int = 36, years=(2018, 2019, 2020, 2021), seed: int = 5):
    """Events of a planted stochastic blockmodel (Holland, Laskey & Leinhardt 1983): three positions,
    dense inside (p = 0.5), sparse between (p = 0.05), and four actors who change position in 2020."""
    rng = np.random.default_rng(seed)
    labels = np.repeat(np.arange(3), n_actors // 3)
    names = np.array([f"office {i:02d}" for i in range(n_actors)])
    rows = []
    for year in years:
        if year == 2020:
            labels = labels.copy()
            labels[:4] = (labels[:4] + 1) % 3
        prob = np.where(labels[:, None] == labels[None, :], 0.5, 0.05)
        ties = rng.random((n_actors, n_actors)) < prob
        np.fill_diagonal(ties, False)
        src, dst = np.nonzero(ties)
        events = 1 + rng.poisson(1.0, src.size)
        for s, d, e in zip(src, dst, events):
            rows += [(names[s], names[d], f"{year}-06-01")] * int(e)
    pd.DataFrame(rows, columns=["from_office", "to_office", "day"]).to_csv(path, index=False)
    return path


def run_cli(db, *args, env=None, ok=True):
    result = CliRunner().invoke(main, ["--db", str(db), *args], env=env)
    if ok:
        assert result.exit_code == 0, result.output
    return result


def analyse(db, events_file, *extra, method: str = "dynamic", smooth: str | None = None):
    """Import, fit (with its p-value draws), structures and align with move confidence, all with ``extra`` options.

    ``method`` and ``smooth`` choose the fit: the dynamic model (one model over all periods, no
    ``--smooth``), or a descriptive method with ``--smooth off`` (each period alone, one task per
    period) or ``auto`` (periods fitted together with a change penalty).
    """
    run_cli(db, "import", str(events_file), "--source", "from_office", "--target", "to_office", "--date", "day")
    fit = ["--method", method] + ([] if smooth is None else ["--smooth", smooth])
    run_cli(db, "fit", "--positions", "3", "--seed", "3", "--draws", "19", *fit, *extra)
    structures = run_cli(db, "structures", "--draws", "19", "--format", "csv", *extra).stdout
    run_cli(db, "align", "--draws", "3", *extra)
    return structures


def stored(db) -> dict:
    """What the study holds after :func:`analyse`, read back through the API."""
    with Study(db, create=False) as study:
        return {
            "memberships": study.memberships(),
            "fit_periods": study.fit_periods().drop(columns=["diagnostics"]),
            "diagnostics": study.fit_periods()["diagnostics"].tolist(),
            "blocks": study.blocks(),
            "moves": study.moves(),
            "tracks": study.tracks(),
        }


def assert_same(a: dict, b: dict) -> None:
    for key in a:
        if isinstance(a[key], pd.DataFrame):
            pd.testing.assert_frame_equal(a[key], b[key], check_exact=True, obj=key)
        else:
            assert a[key] == b[key], key


def draw(seed: int, n: int):
    """A randomised task: ``n`` normal draws from its own seed."""
    return np.random.default_rng(seed).normal(size=n)


def draw_where(seed: int, n: int):
    """:func:`draw` and the id of the process that drew it."""
    return os.getpid(), draw(seed, n)


def nested(seed: int):
    """A task that maps tasks itself: inside a task they run serially, with the same answer."""
    from tracker.execution import current, map_tasks, task_seeds

    return current().workers, map_tasks(draw, [(s, 2) for s in task_seeds(seed, 3)])
