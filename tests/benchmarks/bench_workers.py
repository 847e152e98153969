"""Speed-up of 2 workers against 1: import, fits, structure tests, an alignment and the report.

One run measures both settings on copies of the same imported study, so the
ratio holds even when the machine's speed drifts::

    python tests/benchmarks/bench_workers.py [n_actors] [n_periods] [draws]

Steps (each a new copy of the imported study, same seed, same results):

- ``fit`` with its defaults (the dynamic model, 39 fit-test draws);
- ``fit --method structural --smooth off`` (one task per period, fit-test draws inside);
- ``structures`` (one task per period: ideal-image draws and core-periphery restarts);
- ``align --draws D`` after the default fit (simulated refits for move confidence);
- ``import`` (timed apart, into an empty study) and ``report`` (of the aligned fit).

``bench_scaling.py --workers 1,2`` gives the same comparison step by step
over a grid of sizes, each step in a process of its own.

The pool of worker processes is started (and timed) before the steps, as in a
command that runs several batches.  The results of both runs are compared.
"""

from __future__ import annotations

import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_fit import make_events  # noqa: E402

from tracker.api import Study  # noqa: E402
from tracker.execution import map_tasks  # noqa: E402


def run(db: Path, csv: Path, workers: int, draws: int) -> tuple[dict, dict]:
    times, results = {}, {}
    start = time.perf_counter()
    map_tasks(abs, [(-1,)] * workers, workers=workers)
    times["start workers"] = time.perf_counter() - start
    with Study(db.with_name(f"import{workers}.db"), workers=workers) as fresh:
        start = time.perf_counter()
        fresh.import_events(csv, source="source", target="target", date="year")
        times["import"] = time.perf_counter() - start
    with Study(db, workers=workers) as study:
        for label, call in (
            ("fit --method structural --smooth off", lambda: study.fit(method="structural", positions=4, smoothing=0)),
            ("structures", lambda: study.structures(draws=199)),
            ("fit (defaults)", lambda: study.fit(positions=4)),
            (f"align --draws {draws}", lambda: study.align(draws=draws)),
            ("report", lambda: study.report(db.with_suffix(".html"))),
        ):
            start = time.perf_counter()
            out = call()
            times[label] = time.perf_counter() - start
            results[label] = out
        results["memberships"] = study.memberships()
        results["moves"] = study.moves()
    return times, results


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1200
    periods = int(sys.argv[2]) if len(sys.argv) > 2 else 20
    draws = int(sys.argv[3]) if len(sys.argv) > 3 else 20
    print(f"{n} actors x {periods} periods, {os.cpu_count()} cores; align with {draws} bootstrap draws")
    with tempfile.TemporaryDirectory() as tmp:
        csv = Path(tmp) / "events.csv"
        make_events(csv, n, periods)
        base = Path(tmp) / "base.db"
        with Study(base) as study:
            study.import_events(csv, source="source", target="target", date="year")
        timings, outputs = {}, {}
        for workers in (1, 2):
            db = Path(tmp) / f"w{workers}.db"
            shutil.copy(base, db)
            timings[workers], outputs[workers] = run(db, csv, workers, draws)
    print(f"{'step':<24} {'1 worker':>10} {'2 workers':>10} {'speed-up':>9}")
    for step in timings[1]:
        one, two = timings[1][step], timings[2][step]
        print(f"{step:<24} {one:>9.1f}s {two:>9.1f}s {one / two:>8.2f}x")
    total_one = sum(v for k, v in timings[1].items() if k != "start workers")
    total_two = sum(v for k, v in timings[2].items() if k != "start workers")
    print(f"{'all steps':<24} {total_one:>9.1f}s {total_two:>9.1f}s {total_one / total_two:>8.2f}x")
    same = outputs[1]["memberships"].equals(outputs[2]["memberships"]) and outputs[1]["moves"].equals(outputs[2]["moves"])
    print(f"identical memberships and moves: {same}")


if __name__ == "__main__":
    main()
