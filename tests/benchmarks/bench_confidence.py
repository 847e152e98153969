"""Move confidence of the descriptive methods on planted studies: ECE and share of confident moves that are real.

    python tests/benchmarks/bench_confidence.py [--methods structural,concor,optimize,regular,sbm]
        [--settings weak,strong] [--seeds 5] [--draws 10] [--smooth auto]

Settings (tests/helpers/planted.py): ``weak`` is sparse with weak contrast (4 positions,
about 2% density, 15 planted single moves, 160 actors, 6 periods); ``strong`` is 3
cohesive positions at densities 0.5/0.05 with 9 planted moves (90 actors, 6 periods).
Prints, per method and setting over all seeds: moves reported, real moves among them,
ECE (5 equal-width bins, moves of all seeds pooled) with a 90% bootstrap interval over
seeds and the ECE the same confidences would show if exactly calibrated (``floor``;
tests/benchmarks/bench_recovery.py: ``pooled_ece``, ``null_ece``), moves at confidence
>= 0.8 and the share of them that are real, and moves whose confidence is unknown (NaN:
the simulated studies reported no move).  Descriptive methods get their confidence from
the generic procedure of tracker.pipeline.calibration (simulated studies planted from the
fit, refitted with the method's own procedure, a calibrated logistic score of move features).
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tests.benchmarks.bench_recovery import null_ece, pooled_ece  # noqa: E402
from tests.helpers.planted_study import WEAK_SPARSE, planted_study, score_moves  # noqa: E402

SETTINGS = {
    "weak": WEAK_SPARSE,
    "strong": dict(n_actors=90, n_positions=3, n_periods=6, density_in=0.5, density_out=0.05, movers=9, core=False),
}


def run(method: str, setting: str, seeds: int, draws: int, smooth) -> dict:
    cfg = SETTINGS[setting]
    confs, reals = [], []
    start = time.perf_counter()
    for seed in range(seeds):
        with tempfile.TemporaryDirectory() as folder:
            study, truth = planted_study(Path(folder), seed=seed, **cfg)
            with study:
                study.fit(method=method, positions=cfg["n_positions"], draws=0, smoothing=smooth,
                          options={"restarts": 5} if method == "optimize" else {})
                found = study.align(draws=draws, seed=seed)["moves"]
        confs.append(found["confidence"].to_numpy(dtype=float))
        reals.append(score_moves(found, truth))
    unknown = int(sum(np.isnan(c).sum() for c in confs))  # no simulated move to learn from
    reals = [r[~np.isnan(c)] for c, r in zip(confs, reals)]
    confs = [c[~np.isnan(c)] for c in confs]
    ece, lo, hi = pooled_ece(confs, reals)
    conf, real = np.concatenate(confs), np.concatenate(reals)
    high = conf >= 0.8
    return {"method": method, "setting": setting, "moves": conf.size, "real": int(real.sum()),
            "ece": ece, "lo": lo, "hi": hi, "floor": null_ece(conf), "high": int(high.sum()),
            "high_real": float(real[high].mean()) if high.any() else float("nan"),
            "unknown": unknown, "seconds": time.perf_counter() - start}


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--methods", default="structural,concor,optimize,regular,sbm")
    parser.add_argument("--settings", default="weak,strong")
    parser.add_argument("--seeds", type=int, default=5)
    parser.add_argument("--draws", type=int, default=10)
    parser.add_argument("--smooth", default="auto")
    args = parser.parse_args()
    smooth = args.smooth if args.smooth == "auto" else float(args.smooth)
    print(f"{'method':<11}{'setting':<8}{'moves':>7}{'real':>6}{'ECE':>7}{'90% interval':>15}{'floor':>7}"
          f"{'>=0.8':>7}{'real':>7}{'NaN':>6}{'s':>7}")
    for setting in args.settings.split(","):
        for method in args.methods.split(","):
            r = run(method, setting, args.seeds, args.draws, smooth)
            print(f"{r['method']:<11}{r['setting']:<8}{r['moves']:>7}{r['real']:>6}{r['ece']:>7.3f}"
                  f"{'':>3}{r['lo']:.3f}-{r['hi']:.3f}{r['floor']:>7.3f}{r['high']:>7}"
                  f"{r['high_real']:>7.2f}{r['unknown']:>6}{r['seconds']:>7.0f}", flush=True)


if __name__ == "__main__":
    main()
