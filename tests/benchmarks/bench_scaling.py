"""Time and peak memory of each step as the study grows, as ratios to a baseline of the same run.

For every size (actors x periods) it generates planted events (four positions,
mean degree about 5 per period: 2.5 events per actor and period, between
positions with probability 0.4, inside with 0.6), then runs each step in a
process of its own and records its wall time and peak resident memory:

    import     Study.import_events of the CSV
    fit-off    Study.fit(positions=4, smoothing=0)           (--smooth off)
    align-off  Study.align() of that fit
    report     Study.report() of that fit (HTML; its size is recorded)
    fit        Study.fit(positions=4)                        (defaults: smoothing auto)
    align      Study.align() of the default fit

Absolute times on a shared machine drift, so the same run also times a fixed
baseline (a 2,000 x 2,000 numpy matrix product plus scipy's Ward linkage of
3,000 points in 8 dimensions, best of three) and every time is printed also as
a multiple of it.  The scaling exponent of a step is the slope of log(time) on
log(actors) (at each number of periods) and on log(periods) (at each number of
actors), by least squares over the sizes measured.

    python tests/benchmarks/bench_scaling.py --actors 300,1200 --periods 5,20
    python tests/benchmarks/bench_scaling.py --actors 50000 --periods 20 --steps import,fit-off,align-off
    python tests/benchmarks/bench_scaling.py --actors 300 --periods 5 --json out.json   # also keep the rows
    python tests/benchmarks/bench_scaling.py --actors 20000 --periods 5 --align-draws 0 --memory-limit 12

A step that runs past ``--timeout`` seconds (default 1800) is stopped and shown
as ``>T``; the steps after it that need it are skipped.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
STEPS = ("import", "fit-off", "align-off", "report", "fit", "align")
NEEDS = {"fit-off": "import", "align-off": "fit-off", "report": "align-off", "fit": "import", "align": "fit"}


def make_events(path: Path, n: int, periods: int, *, degree: float = 5.0, positions: int = 4, seed: int = 0) -> int:
    """Planted events: ``degree * n / 2`` per period, 60% inside positions (vectorised; returns the count)."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    truth = rng.integers(0, positions, n)
    members = [np.flatnonzero(truth == k) for k in range(positions)]
    total = 0
    with open(path, "w") as handle:
        handle.write("source,target,year\n")
        for year in range(2000, 2000 + periods):
            k = int(degree * n / 2)
            src = rng.integers(0, n, k)
            inside = rng.random(k) < 0.6
            dst = rng.integers(0, n, k)
            for p in range(positions):
                pick = inside & (truth[src] == p)
                dst[pick] = members[p][rng.integers(0, members[p].size, int(pick.sum()))]
            keep = src != dst
            frame = pd.DataFrame({"source": src[keep], "target": dst[keep]})
            frame["source"] = "actor " + frame["source"].astype(str)
            frame["target"] = "actor " + frame["target"].astype(str)
            frame["year"] = year
            frame.to_csv(handle, header=False, index=False)
            total += int(keep.sum())
    return total


def baseline() -> float:
    """Seconds of the fixed reference work (best of three)."""
    from scipy.cluster.hierarchy import linkage

    rng = np.random.default_rng(0)
    a = rng.standard_normal((2000, 2000))
    points = rng.standard_normal((3000, 8))
    best = np.inf
    for _ in range(3):
        start = time.perf_counter()
        a @ a
        linkage(points, method="ward")
        best = min(best, time.perf_counter() - start)
    return best


def run_step(step: str, db: Path, csv: Path, report: Path) -> dict:
    """One step in this process; returns its seconds and peak memory."""
    sys.path.insert(0, str(ROOT))
    from tracker.api import Study

    start = time.perf_counter()
    out: dict = {}
    with Study(db) as study:
        if step == "import":
            study.import_events(csv, source="source", target="target", date="year")
        elif step == "fit-off":
            out["notes"] = len(study.fit(positions=4, smoothing=0)["notes"])
        elif step == "fit":
            out["notes"] = len(study.fit(positions=4)["notes"])
        elif step in ("align-off", "align"):
            draws = os.environ.get("BENCH_ALIGN_DRAWS")
            kwargs = {} if draws is None else {"draws": int(draws)}
            out["moves"] = len(study.align(**kwargs)["moves"])
        elif step == "report":
            study.report(report)
            out["report_mb"] = report.stat().st_size / 2**20
    out["seconds"] = time.perf_counter() - start
    out["peak_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return out


def measure(n: int, periods: int, steps, timeout: float, base: float, env: dict | None = None) -> list[dict]:
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        csv, db, report = tmp / "events.csv", tmp / "study.db", tmp / "report.html"
        events = make_events(csv, n, periods)
        done: set = set()
        for step in STEPS:
            if step not in steps:
                continue
            row = {"actors": n, "periods": periods, "events": events, "step": step, "baseline_s": base}
            if NEEDS.get(step) and NEEDS[step] not in done:
                row["status"] = f"skipped (needs {NEEDS[step]})"
                rows.append(row)
                print(_line(row), flush=True)
                continue
            cmd = [sys.executable, __file__, "--step", step, str(db), str(csv), str(report)]
            try:
                proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env)
            except subprocess.TimeoutExpired:
                row["status"] = f">{timeout:.0f} s"
            else:
                if proc.returncode:
                    last = (proc.stderr.strip().splitlines() or [f"exit status {proc.returncode}"])[-1]
                    row["status"] = "failed: " + last[:200]
                else:
                    row.update(json.loads(proc.stdout.strip().splitlines()[-1]))
                    row["status"] = "ok"
                    row["ratio"] = row["seconds"] / base
                    done.add(step)
            rows.append(row)
            print(_line(row), flush=True)
    return rows


def _line(row: dict) -> str:
    if row.get("status") != "ok":
        return f"{row['actors']:>6} x {row['periods']:>2}  {row['step']:<9}  {row['status']}"
    extra = f"  report {row['report_mb']:.1f} MB" if "report_mb" in row else ""
    return (f"{row['actors']:>6} x {row['periods']:>2}  {row['step']:<9}  {row['seconds']:8.1f} s"
            f"  ({row['ratio']:7.1f} x baseline)  peak {row['peak_mb']:7.0f} MB{extra}")


def exponents(rows: list[dict]) -> list[str]:
    """Least-squares slopes of log time against log actors and log periods, per step."""
    ok = [r for r in rows if r.get("status") == "ok"]
    lines = []
    for step in STEPS:
        mine = [r for r in ok if r["step"] == step]
        for by, other in (("actors", "periods"), ("periods", "actors")):
            for fixed in sorted({r[other] for r in mine}):
                pts = [(r[by], r["seconds"]) for r in mine if r[other] == fixed]
                if len({x for x, _ in pts}) < 2:
                    continue
                x, y = np.log([p[0] for p in pts]), np.log([p[1] for p in pts])
                slope = np.polyfit(x, y, 1)[0]
                mem = np.polyfit(x, np.log([r["peak_mb"] for r in mine if r[other] == fixed]), 1)[0]
                lines.append(f"{step:<9} time ~ {by}^{slope:.2f}, peak memory ~ {by}^{mem:.2f}  (at {fixed} {other})")
    return lines


def table(rows: list[dict]) -> str:
    """A markdown table: one row per size, one column pair per step."""
    sizes = sorted({(r["actors"], r["periods"]) for r in rows})
    steps = [s for s in STEPS if any(r["step"] == s for r in rows)]
    head = "| actors x periods | events | " + " | ".join(steps) + " |"
    out = [head, "|" + "---|" * (len(steps) + 2)]
    for n, t in sizes:
        cells = []
        for step in steps:
            r = next((r for r in rows if (r["actors"], r["periods"], r["step"]) == (n, t, step)), None)
            if r is None:
                cells.append("")
            elif r.get("status") != "ok":
                cells.append(r["status"])
            else:
                extra = f", {r['report_mb']:.1f} MB file" if "report_mb" in r else ""
                cells.append(f"{r['seconds']:.1f} s = {r['ratio']:.0f}x, {r['peak_mb']:.0f} MB{extra}")
        events = next(r["events"] for r in rows if (r["actors"], r["periods"]) == (n, t))
        out.append(f"| {n:,} x {t} | {events:,} | " + " | ".join(cells) + " |")
    return "\n".join(out)


def main() -> None:
    if len(sys.argv) > 1 and sys.argv[1] == "--step":
        step, db, csv, report = sys.argv[2], Path(sys.argv[3]), Path(sys.argv[4]), Path(sys.argv[5])
        limit = os.environ.get("BENCH_MEMORY_GB")
        if limit:  # a step that needs more stops with MemoryError instead of starving the machine
            cap = int(float(limit) * 2**30)
            resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
        print(json.dumps(run_step(step, db, csv, report)))
        return
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--actors", default="300,1200,5000", help="comma-separated actor counts")
    parser.add_argument("--periods", default="5,20", help="comma-separated period counts")
    parser.add_argument("--steps", default=",".join(STEPS), help=f"comma-separated, of {', '.join(STEPS)}")
    parser.add_argument("--timeout", type=float, default=1800.0, help="seconds per step")
    parser.add_argument("--json", help="append the rows to this JSON file (one list)")
    parser.add_argument("--align-draws", type=int, help="bootstrap draws of align (default: the API's)")
    parser.add_argument("--memory-limit", type=float, help="GB of address space per step (RLIMIT_AS)")
    args = parser.parse_args()
    steps = [s.strip() for s in args.steps.split(",") if s.strip()]
    unknown = set(steps) - set(STEPS)
    if unknown:
        parser.error(f"unknown steps {sorted(unknown)}; use of {', '.join(STEPS)}")
    env = dict(os.environ)
    if args.align_draws is not None:
        env["BENCH_ALIGN_DRAWS"] = str(args.align_draws)
    if args.memory_limit:
        env["BENCH_MEMORY_GB"] = str(args.memory_limit)
    base = baseline()
    print(f"baseline (2,000^2 matmul + Ward of 3,000 points): {base:.2f} s; cores: {os.cpu_count()}", flush=True)
    rows = []
    for n in (int(a) for a in args.actors.split(",")):
        for t in (int(p) for p in args.periods.split(",")):
            rows += measure(n, t, steps, args.timeout, base, env)
    if args.json:
        path = Path(args.json)
        old = json.loads(path.read_text()) if path.exists() else []
        path.write_text(json.dumps(old + rows, indent=1))
        rows = old + rows
    print()
    print(table(rows))
    print()
    print("\n".join(exponents(rows)))


if __name__ == "__main__":
    main()
