"""Time and profile the dynamic fit and the fit test's one-start blockmodel refit, against a baseline of the same run.

Planted data as in ``bench_scaling.make_events`` (four positions, mean degree
about 5 per period, 60% of the ties inside positions, 1% of the actors moving
before each period after the first), built directly as one sparse directed
count matrix per period over the actors tied in it, then:

    dynamic   DynamicSBM(4) with the default settings (3 starts, births, EM to tol 1e-6),
              the dynamic fit of ``roletrail fit --method dynamic`` (draws=0)
    sbm-data  tied_statistic of the last period with Procedure(method="sbm", positions=4,
              options={"restarts": 1}): the fit test's refit on the data (one spectral start)
    sbm-null  the same on one null draw (fit_test.null_draw with the default null model)

Each is timed (``time.perf_counter``) with one worker (so the profile sees all
the work), its peak traced memory is recorded (``tracemalloc``) in a second
run when ``--memory`` is given, and ``--profile N`` prints the top N functions
of a cProfile run by cumulative and by own time.  The baseline (a 2,000 x
2,000 matrix product plus Ward's linkage of 3,000 points, best of three, as in
``bench_scaling.baseline``) is timed before and after, and every time is also
printed as a multiple of the mean of the two.

    python tests/benchmarks/bench_dynamic_speed.py --actors 5000 --periods 20
    python tests/benchmarks/bench_dynamic_speed.py --actors 10000 --periods 20 --steps dynamic --profile 25
"""

from __future__ import annotations

import argparse
import cProfile
import io
import pstats
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import scipy.sparse as sp

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_scaling import MOVE_RATE, baseline, planted_ties  # noqa: E402

STEPS = ("dynamic", "sbm-data", "sbm-null")


def planted_periods(n: int, periods: int, *, degree: float = 5.0, positions: int = 4, seed: int = 0,
                    move_rate: float = MOVE_RATE) -> list[tuple]:
    """``(actors, [matrix], [True])`` per period: the generator of ``bench_scaling.make_events``, in memory.

    The same draws in the same order as ``make_events`` (so the same ties for
    the same seed); each period's matrix counts the events between the actors
    tied in that period (an actor with no tie in a period is absent from it,
    as after an import of events).
    """
    out = []
    for _, src, dst in planted_ties(n, periods, degree=degree, positions=positions, seed=seed,
                                    move_rate=move_rate):
        tied = np.unique(np.concatenate([src, dst]))
        local = np.full(n, -1)
        local[tied] = np.arange(tied.size)
        mat = sp.csr_array((np.ones(src.size), (local[src], local[dst])), shape=(tied.size, tied.size))
        mat.sum_duplicates()
        out.append(([f"actor {i}" for i in tied], [mat], [True]))
    return out


def step_function(step: str, periods: list[tuple], seed: int):
    """A no-argument callable running ``step`` on ``periods``; returns a short summary of its answer."""
    from tracker.inference.fit_test import DEFAULT_NULL, Procedure, null_draw, tied_statistic
    from tracker.models.dynamic import DynamicSBM

    if step == "dynamic":
        def run():
            fit = DynamicSBM(4, seed=seed).fit(periods)
            return f"elbo {fit.elbo_:.6f} iters {fit.n_iter_}"
        return run
    _, matrices, directed = periods[-1]
    procedure = Procedure(method="sbm", positions=4, seed=seed, options={"restarts": 1})
    if step == "sbm-data":
        return lambda: f"statistic {tied_statistic(matrices, directed, procedure):.9f}"
    draw = null_draw(matrices, directed, DEFAULT_NULL, np.random.default_rng(seed))
    return lambda: f"statistic {tied_statistic(draw, directed, procedure):.9f}"


def warm_up() -> None:
    """Import what the steps import (scikit-learn takes seconds), so that no step's time holds an import."""
    import sklearn.cluster  # noqa: F401
    import scipy.sparse.linalg  # noqa: F401

    from tracker.blockmodel import goodness, positions, sbm  # noqa: F401
    from tracker.inference import fit_test  # noqa: F401


def profile(fn, top: int) -> str:
    prof = cProfile.Profile()
    prof.enable()
    fn()
    prof.disable()
    out = io.StringIO()
    stats = pstats.Stats(prof, stream=out)
    stats.sort_stats("cumulative").print_stats(top)
    stats.sort_stats("tottime").print_stats(top)
    return out.getvalue()


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--actors", type=int, default=5000)
    parser.add_argument("--periods", type=int, default=20)
    parser.add_argument("--seed", type=int, default=0, help="seed of the data and of the fits")
    parser.add_argument("--steps", default=",".join(STEPS))
    parser.add_argument("--profile", type=int, default=0, help="print the top N functions of a profiled run")
    parser.add_argument("--memory", action="store_true", help="also a run under tracemalloc for peak memory")
    args = parser.parse_args(argv)
    from tracker.execution import configured

    warm_up()
    base0 = baseline()
    periods = planted_periods(args.actors, args.periods, seed=args.seed)
    ties = sum(p[1][0].nnz for p in periods)
    print(f"{args.actors} actors x {args.periods} periods, {ties} tied pairs; baseline {base0:.3f} s", flush=True)
    rows = []
    with configured(workers=1):
        for step in args.steps.split(","):
            fn = step_function(step, periods, args.seed)
            start = time.perf_counter()
            answer = fn()
            seconds = time.perf_counter() - start
            peak = ""
            if args.memory:
                tracemalloc.start()
                fn()
                peak = f"  peak {tracemalloc.get_traced_memory()[1] / 2**20:.0f} MB"
                tracemalloc.stop()
            rows.append((step, seconds, answer, peak))
            print(f"{step:<9} {seconds:8.2f} s{peak}  {answer}", flush=True)
            if args.profile:
                print(profile(fn, args.profile), flush=True)
    base1 = baseline()
    base = 0.5 * (base0 + base1)
    print(f"baseline before {base0:.3f} s, after {base1:.3f} s")
    for step, seconds, answer, peak in rows:
        print(f"RESULT {args.actors} x {args.periods} {step:<9} {seconds:8.2f} s  ratio {seconds / base:8.1f}{peak}  {answer}")


if __name__ == "__main__":
    main()
