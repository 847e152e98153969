"""Import speed and memory against a raw baseline, measured in one run.

For N events in one CSV file it times, each in a fresh child process (so each
peak memory is its own):

* baseline: ``pandas.read_csv`` of the file, then ``sqlite3`` ``executemany``
  of the same rows into a plain table, in one transaction;
* roletrail: ``Study.import_events`` of the same file into a new SQLite study
  (validation, periods, actors, events and ties).

and prints both, with the ratio (target: roletrail <= 1.5x the baseline)::

    python tests/benchmarks/bench_import.py 1000000
"""

from __future__ import annotations

import multiprocessing as mp
import resource
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def make_csv(path: Path, n_events: int, n_actors: int = 5000, seed: int = 0) -> None:
    rng = np.random.default_rng(seed)
    with open(path, "w") as handle:
        handle.write("source,target,date,kind,weight\n")
        step = 100_000
        for start in range(0, n_events, step):
            m = min(step, n_events - start)
            src = rng.integers(0, n_actors, m)
            dst = rng.integers(0, n_actors, m)
            year = rng.integers(2000, 2020, m)
            day = rng.integers(1, 28, m)
            kind = rng.choice(["aid", "trade", "dispute"], m)
            weight = rng.integers(1, 5, m)
            handle.writelines(
                f"org {s},org {d},{y}-03-{dd:02d},{k},{w}\n" for s, d, y, dd, k, w in zip(src, dst, year, day, kind, weight)
            )


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def baseline(csv: Path, db: Path) -> dict:
    import pandas as pd

    start, cpu = time.perf_counter(), _cpu()
    frame = pd.read_csv(csv)
    conn = sqlite3.connect(db)
    conn.execute("CREATE TABLE events (source TEXT, target TEXT, date TEXT, kind TEXT, weight REAL)")
    with conn:
        conn.executemany("INSERT INTO events VALUES (?, ?, ?, ?, ?)", frame.itertuples(index=False, name=None))
    conn.close()
    return {"seconds": time.perf_counter() - start, "cpu": _cpu() - cpu, "peak_mb": _peak_mb(), "rows": len(frame)}


def roletrail(csv: Path, db: Path) -> dict:
    from tracker.api import Study

    start, cpu = time.perf_counter(), _cpu()
    with Study(db) as study:
        report = study.import_events(csv, source="source", target="target", date="date", relation="kind", weight="weight")
    return {"seconds": time.perf_counter() - start, "cpu": _cpu() - cpu, "peak_mb": _peak_mb(), "rows": report["rows_loaded"]}


def _child(fn, csv, db, queue) -> None:
    queue.put(fn(csv, db))


def measure(fn, csv: Path, db: Path) -> dict:
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    child = ctx.Process(target=_child, args=(fn, csv, db, queue))
    child.start()
    result = queue.get()
    child.join()
    return result


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    with tempfile.TemporaryDirectory() as tmp:
        csv = Path(tmp) / "events.csv"
        make_csv(csv, n)
        size_mb = csv.stat().st_size / 1e6
        base = measure(baseline, csv, Path(tmp) / "baseline.db")
        ours = measure(roletrail, csv, Path(tmp) / "study.db")
        print(f"events: {n:,} ({size_mb:.0f} MB CSV); stored {ours['rows']:,} events")
        for name, r in (("baseline (pandas.read_csv + sqlite3 executemany)", base), ("roletrail import", ours)):
            print(f"{name:50s} {r['seconds']:6.2f} s wall, {r['cpu']:6.2f} s CPU, peak {r['peak_mb']:.0f} MB")
        print(f"ratio: {ours['seconds'] / base['seconds']:.2f}x wall time, {ours['cpu'] / base['cpu']:.2f}x CPU time, "
              f"{ours['peak_mb'] / base['peak_mb']:.2f}x peak memory (target <= 1.5x time)")


if __name__ == "__main__":
    main()
