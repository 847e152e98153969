"""Speed-up of 2 workers against 1, step by step, and against an earlier commit's rule, in one run.

Each step runs in a process of its own, as a command does, so the start of the
worker pool counts where it happens.  The settings take turns step by step on
copies of one imported study, so the ratios hold while the machine's speed
drifts::

    python tests/benchmarks/bench_workers.py --actors 300,1200 --periods 5,20 --fit-draws 39
    python tests/benchmarks/bench_workers.py --actors 1200 --periods 20 --before 2dea9ae --repeat 3

With ``--repeat R`` every step runs R times per setting (on a copy of the
study as it was before the step; the order of the settings rotates) and the
fastest time counts: on a shared machine the load of other processes only
ever adds time.

Settings: ``1`` (one worker), ``2`` (two workers, this tree's code) and, with
``--before REV``, ``2@REV`` (two workers with the ``tracker`` package of
commit REV, extracted by ``git archive``; the same study schema is assumed).
Steps (same seed, same results; memberships and moves are compared at the end):

- ``import`` (into an empty study);
- ``fit-off``: ``fit --method structural --smooth off`` (one task per period) with ``--fit-draws`` null refits per period;
- ``structures`` (199 draws per period, core-periphery restarts);
- ``fit``: the defaults (the dynamic model) with ``--fit-draws``;
- ``align`` with ``--align-draws`` bootstrap refits;
- ``report`` (HTML) of the aligned fit.

The events come from ``bench_scaling.make_events`` (four planted positions,
mean degree about 5), so sizes match that benchmark's table.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
STEPS = ("import", "fit-off", "structures", "fit", "align", "report")


def child(step: str, db: Path, csv: Path, workers: int, fit_draws: int, align_draws: int) -> None:
    """One step in this process (its ``tracker`` is whatever ``PYTHONPATH`` names first); prints its seconds."""
    from tracker.api import Study

    start = time.perf_counter()
    with Study(db, workers=workers) as study:
        if step == "import":
            study.import_events(csv, source="source", target="target", date="year")
        elif step == "fit-off":
            study.fit(method="structural", positions=4, smoothing=0, draws=fit_draws)
        elif step == "structures":
            study.structures(draws=199)
        elif step == "fit":
            study.fit(positions=4, draws=fit_draws)
        elif step == "align":
            study.align(draws=align_draws)
        elif step == "report":
            study.report(db.with_suffix(".html"))
    print(json.dumps({"seconds": time.perf_counter() - start}))


def run(step: str, db: Path, csv: Path, workers: int, args, code: Path) -> float:
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(code), str(ROOT)]))
    cmd = [sys.executable, __file__, "--child", step, str(db), str(csv), str(workers),
           str(args.fit_draws), str(args.align_draws)]
    proc = subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=code)
    if proc.returncode:
        raise RuntimeError(f"{step} with {workers} workers failed:\n{proc.stderr[-3000:]}")
    return json.loads(proc.stdout.strip().splitlines()[-1])["seconds"]


def measure(n: int, periods: int, args, codes: dict[str, tuple[Path, int]], tmp: Path) -> dict:
    sys.path.insert(0, str(HERE))
    from bench_scaling import make_events

    from tracker.api import Study

    folder = tmp / f"{n}x{periods}"
    folder.mkdir()
    csv = folder / "events.csv"
    make_events(csv, n, periods)
    base = folder / "base.db"
    with Study(base) as study:
        study.import_events(csv, source="source", target="target", date="year")
    dbs = {name: folder / f"s{i}.db" for i, name in enumerate(codes)}
    for db in dbs.values():
        shutil.copy(base, db)
    times: dict = {name: {} for name in codes}
    names = list(codes)
    for step in args.steps.split(","):
        best = {name: float("inf") for name in codes}
        for r in range(args.repeat):
            for name in names[r % len(names):] + names[:r % len(names)]:
                code, workers = codes[name]
                db = folder / f"import-{dbs[name].stem}.db" if step == "import" else dbs[name]
                if step == "import":
                    db.unlink(missing_ok=True)
                elif r < args.repeat - 1:  # an earlier repeat works on a copy; the last one keeps its result
                    shutil.copy(dbs[name], folder / "repeat.db")
                    db = folder / "repeat.db"
                best[name] = min(best[name], run(step, db, csv, workers, args, code))
        for name in codes:
            times[name][step] = best[name]
        print(f"  {n} x {periods} {step:<11} " + "  ".join(f"{name}: {times[name][step]:.1f}s" for name in codes),
              flush=True)
    same = {}
    with Study(dbs["1"], create=False) as ref:
        expected = (ref.memberships(), ref.moves())
    for name, db in dbs.items():
        with Study(db, create=False) as study:
            same[name] = study.memberships().equals(expected[0]) and study.moves().equals(expected[1])
    return {"times": times, "same": same}


def main() -> None:
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        step, db, csv, workers, fit_draws, align_draws = sys.argv[2:8]
        child(step, Path(db), Path(csv), int(workers), int(fit_draws), int(align_draws))
        return
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--actors", default="300,1200")
    parser.add_argument("--periods", default="5,20")
    parser.add_argument("--fit-draws", type=int, default=39)
    parser.add_argument("--align-draws", type=int, default=20)
    parser.add_argument("--steps", default=",".join(STEPS), help="comma-separated, in this order: " + ",".join(STEPS))
    parser.add_argument("--repeat", type=int, default=1, help="runs of each step per setting; the fastest counts")
    parser.add_argument("--before", help="also run two workers with the tracker package of this commit")
    parser.add_argument("--json", help="write the times here")
    args = parser.parse_args()
    sys.path.insert(0, str(ROOT))
    with tempfile.TemporaryDirectory() as name:
        tmp = Path(name)
        codes = {"1": (ROOT, 1), "2": (ROOT, 2)}
        if args.before:
            old = tmp / "before"
            old.mkdir()
            archive = subprocess.run(["git", "archive", args.before, "tracker", "migrations", "scenarios"], cwd=ROOT, capture_output=True, check=True)
            subprocess.run(["tar", "-x", "-C", str(old)], input=archive.stdout, check=True)
            codes[f"2@{args.before}"] = (old, 2)
        print(f"{os.cpu_count()} cores; fit draws {args.fit_draws}, align draws {args.align_draws}, "
              f"best of {args.repeat}; "
              f"load average {os.getloadavg()[0]:.1f}; settings (name: workers) "
              + ", ".join(f"{k}: {w}" for k, (_, w) in codes.items()), flush=True)
        rows = {}
        for n in (int(a) for a in args.actors.split(",")):
            for periods in (int(p) for p in args.periods.split(",")):
                rows[f"{n}x{periods}"] = measure(n, periods, args, codes, tmp)
        print(f"load average {os.getloadavg()[0]:.1f}")
    others = [k for k in codes if k != "1"]
    print(f"\n{'size':<9} {'step':<11} {'1 worker':>9} " + " ".join(f"{k:>12}" for k in others)
          + "  " + " ".join(f"{'1 vs ' + k:>14}" for k in others))
    for size, row in rows.items():
        for step in row["times"]["1"]:
            one = row["times"]["1"][step]
            print(f"{size:<9} {step:<11} {one:>8.1f}s " + " ".join(f"{row['times'][k][step]:>11.1f}s" for k in others)
                  + "  " + " ".join(f"{one / row['times'][k][step]:>13.2f}x" for k in others))
        totals = {k: sum(row["times"][k].values()) for k in codes}
        print(f"{size:<9} {'all steps':<11} {totals['1']:>8.1f}s " + " ".join(f"{totals[k]:>11.1f}s" for k in others)
              + "  " + " ".join(f"{totals['1'] / totals[k]:>13.2f}x" for k in others))
        print(f"{size:<9} identical memberships and moves to 1 worker: {row['same']}")
    if args.json:
        Path(args.json).write_text(json.dumps(rows, indent=1))


if __name__ == "__main__":
    main()
