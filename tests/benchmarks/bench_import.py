"""Import speed and memory: N events from a CSV into a fresh SQLite study.

Run each size in its own process to compare peak memory across file sizes::

    python tests/benchmarks/bench_import.py 250000
    python tests/benchmarks/bench_import.py 1000000
"""

from __future__ import annotations

import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tracker.api import Study  # noqa: E402


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


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    with tempfile.TemporaryDirectory() as tmp:
        csv = Path(tmp) / "events.csv"
        make_csv(csv, n)
        size_mb = csv.stat().st_size / 1e6
        base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        start = time.perf_counter()
        with Study(Path(tmp) / "bench.db") as study:
            report = study.import_events(csv, source="source", target="target", date="date", relation="kind", weight="weight")
        elapsed = time.perf_counter() - start
        peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(f"events: {report['rows_loaded']:,} ({size_mb:.0f} MB CSV)")
        print(f"import: {elapsed:.1f} s, {report['rows_loaded'] / elapsed:,.0f} events/s")
        print(f"peak memory: {peak:.0f} MB (before import: {base:.0f} MB)")


if __name__ == "__main__":
    main()
