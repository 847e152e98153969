"""Listing commands on a study of 100 periods and 5,000 actors: each should answer within a second.

Builds the study once (a generated CSV of monthly events imported through the
API, then a quick fit of a few periods without permutation draws), then times
each listing command through click's CliRunner, as a user would run it (the
study is opened and its schema checked every time)::

    python tests/benchmarks/bench_listing.py
    python tests/benchmarks/bench_listing.py --db postgresql+psycopg://user@host/postgres

With ``--db`` a server URL, the study is a new database on that server
(created and dropped by the script; the user needs CREATEDB).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

N_ACTORS = 5_000
N_PERIODS = 100  # months
EVENTS_PER_PERIOD = 4_000
LIMIT_S = 1.0


def make_csv(path: Path, seed: int = 0) -> int:
    """Monthly events among N_ACTORS actors over N_PERIODS months, with a roster-free label set."""
    rng = np.random.default_rng(seed)
    n = N_PERIODS * EVENTS_PER_PERIOD
    month = np.repeat(np.arange(N_PERIODS), EVENTS_PER_PERIOD)
    src = rng.integers(0, N_ACTORS, n)
    # Ties mostly within ten groups, so that fits have something to find.
    dst = np.where(rng.random(n) < 0.8, (src // 500) * 500 + rng.integers(0, 500, n), rng.integers(0, N_ACTORS, n))
    kind = np.array(["aid", "trade"])[rng.integers(0, 2, n)]
    with open(path, "w") as handle:
        handle.write("source,target,date,kind\n")
        handle.writelines(
            f"actor {s:04d},actor {d:04d},{2010 + m // 12}-{m % 12 + 1:02d}-15,{k}\n"
            for s, d, m, k in zip(src, dst, month, kind)
        )
    return n


def main() -> None:
    from click.testing import CliRunner

    from tracker.api import Study
    from tracker.cli import main as cli

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--db", default=None, help="PostgreSQL server URL (default: a SQLite file)")
    parser.add_argument("--fit-periods", type=int, default=3, help="periods fitted before the fit listings")
    args = parser.parse_args()
    drop = None
    with tempfile.TemporaryDirectory() as tmp:
        csv = Path(tmp) / "events.csv"
        n = make_csv(csv)
        if args.db:
            sys.path.insert(0, str(ROOT / "tests" / "benchmarks"))
            from bench_large_csv import _server_db

            db, drop = _server_db(args.db)
        else:
            db = str(Path(tmp) / "study.db")
        try:
            start = time.perf_counter()
            with Study(db) as study:
                study.import_events(csv, source="source", target="target", date="date", relation="kind", period="month")
                built = time.perf_counter() - start
                counts = study.store.counts()
                periods = study.periods()
                start = time.perf_counter()
                study.fit(positions=4, draws=0, periods=periods[: args.fit_periods])
                fitted = time.perf_counter() - start
            print(f"study: {counts['periods']} periods, {counts['actors']:,} actors, {n:,} events, {counts['ties']:,} ties "
                  f"(import {built:.1f} s; fit of {args.fit_periods} periods {fitted:.1f} s)")
            commands = [
                ["summary"], ["summary", "--format", "csv"], ["actors"], ["actors", "--format", "csv"], ["batches"],
                ["fits"], ["export", "memberships"], ["export", "blocks"], ["export", "fit-periods"],
            ]
            slow = []
            runner = CliRunner()
            for command in commands:
                start = time.perf_counter()
                result = runner.invoke(cli, ["--db", db, *command], catch_exceptions=False)
                elapsed = time.perf_counter() - start
                assert result.exit_code == 0, result.output
                lines = result.output.count("\n")
                flag = "" if elapsed <= LIMIT_S else "  SLOW"
                slow += [command] if flag else []
                print(f"{' '.join(command):32s} {elapsed:6.2f} s  ({lines:,} lines){flag}", flush=True)
            print("all within a second" if not slow else f"over {LIMIT_S:g} s: {', '.join(' '.join(c) for c in slow)}")
        finally:
            if drop is not None:
                drop()


if __name__ == "__main__":
    main()
