"""Time and peak memory of each step as the study grows, as ratios to a baseline of the same run.

For every size (actors x periods) it generates planted events (four positions,
mean degree about 5 per period: 2.5 events per actor and period, between
positions with probability 0.4, inside with 0.6; 1% of the actors move to
another position before each period after the first), then runs each step in a
process of its own and records its wall time and peak resident memory:

    import     Study.import_events of the CSV
    fit-off    Study.fit(method="structural", positions=4, smoothing=0)
               (fit --method structural --smooth off: each period alone, structural
               equivalence, exact up to 8,000 tied actors, the embedding above)
    align-off  Study.align() of that fit
    report     Study.report() of that fit (HTML; its size is recorded)
    fit        Study.fit(positions=4)                        (defaults: the dynamic model)
    align      Study.align() of the default fit

The step keeps its name ``fit-off`` (in the rows and ``--steps``); the table's
column heading says what ran (:data:`HEADINGS`).  Before this was a structural
fit, ``fit-off`` ran ``Study.fit(positions=4, smoothing=0)``, which was the
dynamic model with the smoothing ignored (now refused): its rows measured the
same fit as ``fit``.

Absolute times on a shared machine drift, so the run also times a fixed
baseline (a 2,000 x 2,000 numpy matrix product plus scipy's Ward linkage of
3,000 points in 8 dimensions, best of three) before each size, and every time
of that size is printed also as a multiple of it.  The scaling exponents of a
step are fitted on those multiples by least squares: the slope of log(time) on
log(actors) (at each number of periods) and on log(periods) (at each number of
actors), and one joint fit ``time ~ actors^a * periods^b`` over every size.

``--workers 1,2`` runs each step with one worker first, on a copy of the study
that is then thrown away, and with two on the study itself, so the speed-up
of 2 workers against 1 is measured step by step, minutes apart, on the same
data (the results are the same for any number of workers).

    python tests/benchmarks/bench_scaling.py --actors 300,1200 --periods 5,20,50
    python tests/benchmarks/bench_scaling.py --actors 1200 --periods 20 --workers 1,2
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
import shutil
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
STEPS = ("import", "fit-off", "align-off", "report", "fit", "align")
MOVE_RATE = 0.01  # share of actors planted as moving before each period after the first
NEEDS = {"fit-off": "import", "align-off": "fit-off", "report": "align-off", "fit": "import", "align": "fit"}
#: Column headings of the table: what each fit step ran.
HEADINGS = {"fit-off": "fit-off (structural, --smooth off)", "fit": "fit (defaults: dynamic)"}


def make_events(path: Path, n: int, periods: int, *, degree: float = 5.0, positions: int = 4, seed: int = 0,
                move_rate: float = MOVE_RATE) -> int:
    """Planted events: ``degree * n / 2`` per period, 60% inside positions (vectorised; returns the count).

    Before every period after the first, a share ``move_rate`` of the actors
    moves to another position drawn uniformly, so ``align`` has planted moves
    to find and its calibration has moves to learn from.
    """
    import pandas as pd

    history = []
    total = 0
    with open(path, "w") as handle:
        handle.write("source,target,year\n")
        for year, (truth, src, dst) in enumerate(planted_ties(n, periods, degree=degree, positions=positions,
                                                              seed=seed, move_rate=move_rate), start=2000):
            history.append(truth)
            frame = pd.DataFrame({"source": src, "target": dst})
            frame["source"] = "actor " + frame["source"].astype(str)
            frame["target"] = "actor " + frame["target"].astype(str)
            frame["year"] = year
            frame.to_csv(handle, header=False, index=False)
            total += int(src.size)
    np.save(truth_path(path), np.asarray(history, dtype=np.int8))
    return total


def planted_ties(n: int, periods: int, *, degree: float = 5.0, positions: int = 4, seed: int = 0,
                 move_rate: float = MOVE_RATE):
    """Per period ``(planted positions, sources, targets)``: the draws behind :func:`make_events`, in memory."""
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, positions, n)
    for t in range(periods):
        if t and move_rate > 0:
            movers = rng.random(n) < move_rate
            truth[movers] = (truth[movers] + rng.integers(1, positions, int(movers.sum()))) % positions
        members = [np.flatnonzero(truth == k) for k in range(positions)]
        k = int(degree * n / 2)
        src = rng.integers(0, n, k)
        inside = rng.random(k) < 0.6
        dst = rng.integers(0, n, k)
        for p in range(positions):
            pick = inside & (truth[src] == p)
            dst[pick] = members[p][rng.integers(0, members[p].size, int(pick.sum()))]
        keep = src != dst
        yield truth.copy(), src[keep], dst[keep]


def truth_path(csv: Path) -> Path:
    """Where :func:`make_events` keeps the planted positions (periods x actors) beside the events."""
    return csv.with_name(csv.stem + "-truth.npy")


def move_recovery(moves, truth: np.ndarray, first_year: int = 2000) -> dict:
    """Reported moves against the planted ones: precision, recall (exact period) and the >= 0.8 moves.

    A planted move is an actor whose planted position differs from the
    period before; a reported move (``actor``, ``to_period``, ``confidence``
    columns of ``Study.align``'s moves) is real when the same actor has a
    planted move into the same period.  Moves between periods that are not
    consecutive (an actor without ties in between) count as real when any
    planted move falls in the gap.
    """
    changed = np.flatnonzero((truth[1:] != truth[:-1]).ravel())
    planted = {(int(i % truth.shape[1]), first_year + 1 + int(i // truth.shape[1])) for i in changed}
    actors = moves["actor"].str.slice(len("actor ")).astype(int).to_numpy()
    start = moves["from_period"].astype(int).to_numpy()
    end = moves["to_period"].astype(int).to_numpy()
    real = np.array([any((a, y) in planted for y in range(s + 1, e + 1)) for a, s, e in zip(actors, start, end)],
                    dtype=bool)
    found = {(a, y) for a, s, e in zip(actors, start, end) for y in range(s + 1, e + 1)} & planted
    confidence = moves["confidence"].to_numpy(dtype=float)
    sure = confidence >= 0.8
    return {"planted_moves": len(planted), "precision": float(real.mean()) if real.size else None,
            "recall": len(found) / len(planted) if planted else None,
            "mean_confidence": float(np.nanmean(confidence)) if confidence.size else None,
            "sure": int(sure.sum()), "sure_real": float(real[sure].mean()) if sure.any() else None}


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


def run_step(step: str, db: Path, csv: Path, report: Path, workers: int | None = None) -> dict:
    """One step in this process; returns its seconds and peak memory."""
    sys.path.insert(0, str(ROOT))
    from tracker.api import Study

    start = time.perf_counter()
    out: dict = {}
    with Study(db, workers=workers) as study:
        if step == "import":
            study.import_events(csv, source="source", target="target", date="year")
        elif step in ("fit-off", "fit"):
            draws = os.environ.get("BENCH_FIT_DRAWS")
            kwargs = {} if draws is None else {"draws": int(draws)}
            if step == "fit-off":
                kwargs.update(method="structural", smoothing=0)  # each period alone (the dynamic model refuses --smooth)
            out["notes"] = len(study.fit(positions=4, **kwargs)["notes"])
        elif step in ("align-off", "align"):
            draws = os.environ.get("BENCH_ALIGN_DRAWS")
            kwargs = {} if draws is None else {"draws": int(draws)}
            moves = study.align(**kwargs)["moves"]
            out["moves"] = len(moves)
            if truth_path(csv).exists():
                out.update(move_recovery(moves, np.load(truth_path(csv))))
        elif step == "report":
            study.report(report)
            out["report_mb"] = report.stat().st_size / 2**20
    out["seconds"] = time.perf_counter() - start
    out["peak_mb"] = peak_mb()
    return out


def peak_mb() -> float:
    """This process's peak resident memory in MB: ``VmHWM`` of /proc/self/status where there is one.

    ``getrusage``'s ``ru_maxrss`` is kept across ``exec``, so a step started
    from a large parent would report at least the parent's size; ``VmHWM``
    belongs to the program's own memory map, which ``exec`` makes new.
    """
    try:
        with open("/proc/self/status") as handle:
            for line in handle:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def measure(n: int, periods: int, steps, timeout: float, base: float | None = None, env: dict | None = None,
            workers: Sequence[int] = ()) -> list[dict]:
    """Every step at one size, each in a process of its own; ``base`` None times the baseline first.

    With two worker counts in ``workers`` each step runs with the first on a
    scratch copy of the study (kept as ``seconds_<w>``), then with the last
    on the study the next steps use.
    """
    if base is None:
        base = baseline()
        print(f"{n:>6} x {periods:>2}  baseline {base:.2f} s", flush=True)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        csv, db, report = tmp / "events.csv", tmp / "study.db", tmp / "report.html"
        events = make_events(csv, n, periods)
        done: set = set()
        for step in STEPS:
            if step not in steps:
                continue
            row = {"actors": n, "periods": periods, "events": events, "step": step, "baseline_s": base,
                   "commit": _commit(), "load": round(os.getloadavg()[0], 1)}
            if NEEDS.get(step) and NEEDS[step] not in done:
                row["status"] = f"skipped (needs {NEEDS[step]})"
                rows.append(row)
                print(_line(row), flush=True)
                continue
            for w in list(workers)[:-1]:  # the comparison runs on a copy, thrown away
                scratch = tmp / "scratch.db"
                if db.exists():
                    shutil.copy(db, scratch)
                else:
                    scratch.unlink(missing_ok=True)
                other = _run(step, scratch, csv, tmp / "scratch.html", timeout, env, w)
                scratch.unlink(missing_ok=True)
                row[f"seconds_{w}"] = other.get("seconds")
                row[f"status_{w}"] = other["status"]
            row.update(_run(step, db, csv, report, timeout, env, workers[-1] if workers else None))
            if row["status"] == "ok":
                row["ratio"] = row["seconds"] / base
                done.add(step)
                if workers:
                    row["workers"] = workers[-1]
            rows.append(row)
            print(_line(row), flush=True)
    return rows


def _run(step: str, db: Path, csv: Path, report: Path, timeout: float, env: dict | None, workers: int | None) -> dict:
    """One step in a child process: its JSON result with ``status`` "ok", or the reason it has none."""
    cmd = [sys.executable, __file__, "--step", step, str(db), str(csv), str(report)]
    if workers is not None:
        cmd.append(str(workers))
    try:
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env)
    except subprocess.TimeoutExpired:
        return {"status": f">{timeout:.0f} s"}
    if proc.returncode:
        last = (proc.stderr.strip().splitlines() or [f"exit status {proc.returncode}"])[-1]
        return {"status": "failed: " + last[:200]}
    return {**json.loads(proc.stdout.strip().splitlines()[-1]), "status": "ok"}


def _commit() -> str:
    """The code measured: ``git describe`` of the checkout (``-dirty`` with uncommitted changes)."""
    try:
        return subprocess.run(["git", "describe", "--always", "--dirty"], cwd=ROOT, capture_output=True,
                              text=True, timeout=30).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return ""


def speedup(row: dict) -> float | None:
    """Seconds with the fewest workers over seconds with the most (None without a comparison)."""
    fewer = [k for k in row if k.startswith("seconds_")]
    if not fewer or row.get("status") != "ok" or not row.get(fewer[0]):
        return None
    return row[fewer[0]] / row["seconds"]


def _line(row: dict) -> str:
    if row.get("status") != "ok":
        return f"{row['actors']:>6} x {row['periods']:>2}  {row['step']:<9}  {row['status']}"
    extra = f"  report {row['report_mb']:.1f} MB" if "report_mb" in row else ""
    if row.get("planted_moves"):
        extra += (f"  {row['moves']} moves of {row['planted_moves']} planted: precision {_fmt(row['precision'])}, "
                  f"recall {_fmt(row['recall'])}, mean confidence {_fmt(row['mean_confidence'])}, "
                  f">= 0.8: {row['sure']} ({_fmt(row['sure_real'])} real)")
    gain = speedup(row)
    if gain is not None:
        extra += f"  {row['workers']} vs 1 worker: {gain:.2f}x"
    return (f"{row['actors']:>6} x {row['periods']:>2}  {row['step']:<9}  {row['seconds']:8.1f} s"
            f"  ({row['ratio']:7.1f} x baseline)  peak {row['peak_mb']:7.0f} MB{extra}")


def _fmt(value) -> str:
    return "-" if value is None else f"{value:.3f}"


def exponents(rows: list[dict]) -> list[str]:
    """Least-squares exponents of time (as a multiple of the baseline) and peak memory, per step.

    Per fixed number of periods: the slope of log time on log actors; per fixed
    number of actors: on log periods; and, where at least three sizes with two
    actor counts and two period counts were measured, one joint fit
    ``log time = c + a log actors + b log periods`` over all of them.
    """
    ok = [r for r in rows if r.get("status") == "ok"]
    lines = []
    for step in STEPS:
        mine = [r for r in ok if r["step"] == step]
        for by, other in (("actors", "periods"), ("periods", "actors")):
            for fixed in sorted({r[other] for r in mine}):
                part = [r for r in mine if r[other] == fixed]
                if len({r[by] for r in part}) < 2:
                    continue
                x = np.log([r[by] for r in part])
                slope = np.polyfit(x, np.log([r["ratio"] for r in part]), 1)[0]
                mem = np.polyfit(x, np.log([r["peak_mb"] for r in part]), 1)[0]
                lines.append(f"{step:<9} time ~ {by}^{slope:.2f}, peak memory ~ {by}^{mem:.2f}  (at {fixed} {other})")
        joint = joint_exponents(mine)
        if joint is not None:
            (a, b), (am, bm) = joint
            lines.append(f"{step:<9} time ~ actors^{a:.2f} periods^{b:.2f}, peak memory ~ actors^{am:.2f} "
                         f"periods^{bm:.2f}  (joint, {len(mine)} sizes)")
    return lines


def joint_exponents(rows: list[dict]) -> tuple[tuple[float, float], tuple[float, float]] | None:
    """(a, b) of ``time ~ actors^a periods^b`` and of peak memory, by least squares on logs; None if underdetermined."""
    if len({r["actors"] for r in rows}) < 2 or len({r["periods"] for r in rows}) < 2 or len(rows) < 3:
        return None
    design = np.column_stack([np.ones(len(rows)), np.log([r["actors"] for r in rows]),
                              np.log([r["periods"] for r in rows])])
    out = []
    for key in ("ratio", "peak_mb"):
        coef = np.linalg.lstsq(design, np.log([r[key] for r in rows]), rcond=None)[0]
        out.append((float(coef[1]), float(coef[2])))
    return out[0], out[1]


def table(rows: list[dict]) -> str:
    """A markdown table: one row per size, one column pair per step."""
    sizes = sorted({(r["actors"], r["periods"]) for r in rows})
    steps = [s for s in STEPS if any(r["step"] == s for r in rows)]
    head = "| actors x periods | events | baseline | " + " | ".join(HEADINGS.get(s, s) for s in steps) + " |"
    out = [head, "|" + "---|" * (len(steps) + 3)]
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
                gain = speedup(r)
                if gain is not None:
                    extra += f", {r['workers']} vs 1 worker {gain:.2f}x"
                if r.get("planted_moves"):
                    extra += (f", {r['moves']:,} moves for {r['planted_moves']:,} planted (precision "
                              f"{_fmt(r['precision'])}, recall {_fmt(r['recall'])}; {r['sure']:,} at >= 0.8, "
                              f"{_fmt(r['sure_real'])} real)")
                ratio = f"{r['ratio']:.1f}" if r["ratio"] < 10 else f"{r['ratio']:.0f}"
                cells.append(f"{r['seconds']:.1f} s = {ratio}x, {r['peak_mb']:.0f} MB{extra}")
        first = next(r for r in rows if (r["actors"], r["periods"]) == (n, t))
        out.append(f"| {n:,} x {t} | {first['events']:,} | {first['baseline_s']:.2f} s | " + " | ".join(cells) + " |")
    return "\n".join(out)


def main() -> None:
    if sys.argv[1:] == ["--peak"]:  # this process's own peak, for the tests
        print(peak_mb())
        return
    if len(sys.argv) > 1 and sys.argv[1] == "--step":
        step, db, csv, report = sys.argv[2], Path(sys.argv[3]), Path(sys.argv[4]), Path(sys.argv[5])
        workers = int(sys.argv[6]) if len(sys.argv) > 6 else None
        limit = os.environ.get("BENCH_MEMORY_GB")
        if limit:  # a step that needs more stops with MemoryError instead of starving the machine
            cap = int(float(limit) * 2**30)
            resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
        print(json.dumps(run_step(step, db, csv, report, workers)))
        return
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--actors", default="300,1200,5000", help="comma-separated actor counts")
    parser.add_argument("--periods", default="5,20,50", help="comma-separated period counts")
    parser.add_argument("--steps", default=",".join(STEPS), help=f"comma-separated, of {', '.join(STEPS)}")
    parser.add_argument("--timeout", type=float, default=1800.0, help="seconds per step")
    parser.add_argument("--json", help="append the rows to this JSON file (one list)")
    parser.add_argument("--align-draws", type=int, help="bootstrap draws of align (default: the API's)")
    parser.add_argument("--fit-draws", type=int, help="null draws of the fit test in both fits (default: the API's)")
    parser.add_argument("--memory-limit", type=float, help="GB of address space per step (RLIMIT_AS)")
    parser.add_argument("--workers", help="worker processes of every step (default: all cores); "
                                          "'1,2' also runs each step with 1 worker on a copy and prints the speed-up")
    args = parser.parse_args()
    steps = [s.strip() for s in args.steps.split(",") if s.strip()]
    unknown = set(steps) - set(STEPS)
    if unknown:
        parser.error(f"unknown steps {sorted(unknown)}; use of {', '.join(STEPS)}")
    env = dict(os.environ)
    if args.align_draws is not None:
        env["BENCH_ALIGN_DRAWS"] = str(args.align_draws)
    if args.fit_draws is not None:
        env["BENCH_FIT_DRAWS"] = str(args.fit_draws)
    if args.memory_limit:
        env["BENCH_MEMORY_GB"] = str(args.memory_limit)
    workers = [int(w) for w in args.workers.split(",")] if args.workers else []
    print(f"baseline: 2,000^2 matmul + Ward of 3,000 points, timed before each size; cores: {os.cpu_count()}; "
          f"load average: {os.getloadavg()[0]:.1f}", flush=True)
    path = Path(args.json) if args.json else None
    old = json.loads(path.read_text()) if path is not None and path.exists() else []
    rows = []
    for n in (int(a) for a in args.actors.split(",")):
        for t in (int(p) for p in args.periods.split(",")):
            rows += measure(n, t, steps, args.timeout, None, env, workers)
            if path is not None:  # after every size, so a stopped run keeps what it measured
                path.write_text(json.dumps(old + rows, indent=1))
    rows = old + rows
    print()
    print(table(rows))
    print()
    print("\n".join(exponents(rows)))


if __name__ == "__main__":
    main()
