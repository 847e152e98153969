"""Recovery of planted positions, moves and births, per method and for the default pipeline.

Not a test: ``python tests/benchmarks/bench_recovery.py [--seeds 101-120] [--also 101-105] [--methods dynamic,sbm,...]``.

The generator below was written and its settings fixed before any method was
run on it; reported seeds are 101-105 (development used others).  Each study:
``N`` actors over ``T`` yearly periods in 4 planted positions; a fifth
position is founded in period ``T // 2`` by a new actor (absent before, not
isolated) and recruits 4 actors from the others over the next periods; 15
other actors make one single move each at a random period; 5 actors enter
late (absent before).  Ties are undirected event counts: a pair of positions
``(k, l)`` meets with Poisson rate ``r_in`` inside a position and ``r_out``
between positions (an assortative blockmodel; Holland, Laskey & Leinhardt
1983).  Settings: dense (mean degree ~16), sparse (~2% of pairs tied per
period) and weak-contrast sparse (same density, ``r_in / r_out`` 4 instead
of 10).

Printed per method and setting, mean over seeds: position ARI (per period,
present actors), move precision and recall (a move counts when actor and
period are exact), ECE (5 equal-width bins of confidence; |share real - mean
confidence| weighted by bin size), the share of confidence >= 0.8 moves that
are real, and birth timing (period of the new position's track birth minus
its founding period; the track is the one holding the founder at the end).
For the dynamic model, which reports a change only where its probability is
>= 0.5, ``n_left_out`` is the number of candidate changes left out (stored
with the alignment as ``uncertain_changes``) and ``recall_all`` the recall of
reported and left-out candidates together, ``ece_all`` the ECE over both.

Calibration is measured on the moves of all seeds pooled (one study has too
few moves for an ECE of its own): ``moves`` is the number of reported moves
over all seeds, ``ece`` their pooled ECE with a 90% bootstrap interval over
studies (``ece_lo``, ``ece_hi``: percentile interval of 2,000 resamples of the
seeds with replacement; Efron & Tibshirani 1993, ch. 13), ``n_conf_0.8`` the
number of moves with confidence >= 0.8 and ``real_at_0.8`` the share real
among them (pooled); ``ece_null`` is the ECE the same confidences would
show if they were exactly calibrated (:func:`null_ece`).  For the dynamic model ``candidates`` counts every
candidate change (reported or left out) and ``ece_all`` (with its interval)
is over them.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.metrics import adjusted_rand_score

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tracker.api import Study  # noqa: E402

N, T, K = 120, 8, 4
SETTINGS = {  # (r_in, r_out): expected events per pair and period
    "dense": (0.40, 0.04),
    "sparse": (0.060, 0.006),
    "weak-sparse": (0.048, 0.012),
}


def generate(seed: int, r_in: float, r_out: float):
    """Events and the planted truth: labels[t][actor] (absent actors missing), moves {(actor, t)}, founding t."""
    rng = np.random.default_rng(seed)
    n = N + 1  # actor N is the founder of position K
    home = rng.integers(K, size=n)
    home[N] = K
    labels = np.tile(home, (T, 1))
    present = np.ones((T, n), dtype=bool)
    found = T // 2
    present[:found, N] = False
    late = rng.choice(N, size=5, replace=False)
    for a in late:
        present[: rng.integers(1, T // 2), a] = False
    others = np.setdiff1d(np.arange(N), late)
    picked = rng.choice(others, size=19, replace=False)
    recruits, movers = picked[:4], picked[4:]
    moves = set()
    for i, a in enumerate(recruits):
        t = found + 1 + i % (T - found - 1)
        labels[t:, a] = K
        moves.add((int(a), t))
    for a in movers:
        t = int(rng.integers(1, T))
        new = (home[a] + rng.integers(1, K)) % K
        labels[t:, a] = new
        moves.add((int(a), t))
    rows = []
    iu = np.triu_indices(n, k=1)
    for t in range(T):
        z = labels[t]
        rate = np.where(z[iu[0]] == z[iu[1]], r_in, r_out) * present[t, iu[0]] * present[t, iu[1]]
        counts = rng.poisson(rate)
        for p in np.flatnonzero(counts):
            rows += [(f"a{iu[0][p]:03d}", f"a{iu[1][p]:03d}", 2001 + t)] * int(counts[p])
    events = pd.DataFrame(rows, columns=["source", "target", "year"])
    roster = pd.DataFrame({"actor": [f"a{i:03d}" for i in range(n)],
                           "first": [2001 + int(np.argmax(present[:, i])) for i in range(n)],
                           "last": 2001 + T - 1})
    truth = {2001 + t: {f"a{i:03d}": int(labels[t, i]) for i in np.flatnonzero(present[t])} for t in range(T)}
    planted_moves = {(f"a{a:03d}", str(2001 + t)) for a, t in moves}
    return events, roster, truth, planted_moves, str(2001 + found)


def ece(conf: np.ndarray, real: np.ndarray, bins: int = 5) -> float:
    if conf.size == 0:
        return float("nan")
    idx = np.minimum((conf * bins).astype(int), bins - 1)
    total = 0.0
    for b in range(bins):
        sel = idx == b
        if sel.any():
            total += sel.sum() * abs(real[sel].mean() - conf[sel].mean())
    return total / conf.size


def _with_left_out(conf, real, left_out, planted):
    """Confidence and truth of the reported moves and of the candidate changes left out."""
    extra = np.array([d["confidence"] for d in left_out], dtype=float)
    truth = np.array([(d["actor"], d["to_period"]) in planted for d in left_out], dtype=bool)
    return np.concatenate([conf, extra]), np.concatenate([real, truth])


def run(method: str, seed: int, setting: str, workdir: Path) -> dict:
    events, roster, truth, planted, founded = generate(seed, *SETTINGS[setting])
    ev, ro = workdir / f"e{seed}{setting}.csv", workdir / f"r{seed}{setting}.csv"
    events.to_csv(ev, index=False)
    roster.to_csv(ro, index=False)
    db = workdir / f"{method}-{seed}-{setting}.db"
    with Study(db) as study:
        study.import_events(ev, source="source", target="target", date="year", period="year", undirected=True,
                            relation_name="meets")
        study.import_actors(ro, actor="actor", first="first", last="last")
        kwargs = {} if method == "default" else {"method": method}
        study.fit(positions=K + 1, draws=0, seed=0, **kwargs)
        aligned = study.align(draws=20, seed=0)
        members = study.memberships()
        left_out = (study.store.alignment_params(aligned["fit"]) or {}).get("uncertain_changes") or []
        tracks, moves = aligned["tracks"], aligned["moves"]
    aris = []
    for period, group in members.groupby("period"):
        want = truth[int(period)]
        got = group[group["actor"].isin(want)]
        aris.append(adjusted_rand_score([want[a] for a in got["actor"]], got["track"]))
    found = {(a, str(t)) for a, t in zip(moves["actor"], moves["to_period"])}
    real = np.array([(a, str(t)) in planted for a, t in zip(moves["actor"], moves["to_period"])])
    conf = moves["confidence"].to_numpy(dtype=float)
    ok = np.isfinite(conf)
    conf_all, real_all = _with_left_out(conf[ok], real[ok], left_out, planted)
    founder = members[(members["actor"] == f"a{N:03d}")]
    track = int(founder.sort_values("period")["track"].iloc[-1])
    born = tracks.set_index("track").loc[track, "first_period"]
    return {
        "ari": float(np.mean(aris)),
        "precision": float(real.mean()) if real.size else float("nan"),
        "recall": len(found & planted) / len(planted),
        "birth_lag": int(born) - int(founded),
        "n_left_out": len(left_out),
        "recall_all": len((found | {(d["actor"], d["to_period"]) for d in left_out}) & planted) / len(planted),
        "_conf": conf[ok], "_real": real[ok], "_conf_all": conf_all, "_real_all": real_all,
    }


def pooled_ece(confs: list, reals: list, boot: int = 2000, seed: int = 0) -> tuple[float, float, float]:
    """ECE of all studies' moves pooled, and a 90% percentile bootstrap interval resampling studies."""
    conf, real = np.concatenate(confs), np.concatenate(reals).astype(float)
    point = ece(conf, real)
    if conf.size == 0:
        return point, float("nan"), float("nan")
    rng = np.random.default_rng(seed)
    values = []
    for _ in range(boot):
        pick = rng.integers(len(confs), size=len(confs))
        c = np.concatenate([confs[i] for i in pick])
        if c.size:
            values.append(ece(c, np.concatenate([reals[i] for i in pick]).astype(float)))
    lo, hi = np.percentile(values, [5, 95])
    return point, float(lo), float(hi)


def null_ece(conf: np.ndarray, draws: int = 1000, seed: int = 0) -> float:
    """Mean ECE of these confidences if they were exactly calibrated (each move real with its confidence).

    The ECE of a finite set of moves is positive even for a perfect
    confidence (each bin's share real is a binomial estimate); this is that
    floor for the same number and spread of moves, the yardstick for the
    measured ECE (common practice: a parametric null by simulation).
    """
    if conf.size == 0:
        return float("nan")
    rng = np.random.default_rng(seed)
    return float(np.mean([ece(conf, (rng.random(conf.size) < conf).astype(float)) for _ in range(draws)]))


def summarise(rows: list) -> dict:
    """Means over studies of the per-study figures; calibration pooled over studies (see the docstring)."""
    frame = pd.DataFrame([{k: v for k, v in r.items() if not k.startswith("_")} for r in rows])
    out = frame.mean(numeric_only=True).to_dict()
    out["birth_on_time"] = f"{int((frame['birth_lag'].between(0, 1)).sum())}/{len(frame)}"
    for suffix, key in (("", "_conf"), ("_all", "_conf_all")):
        confs = [r[key] for r in rows]
        reals = [r["_real" + key[5:]] for r in rows]
        out["ece" + suffix], out["ece" + suffix + "_lo"], out["ece" + suffix + "_hi"] = pooled_ece(confs, reals)
        conf, real = np.concatenate(confs), np.concatenate(reals)
        out["ece_null" + suffix] = null_ece(conf)
        out["moves" if not suffix else "candidates"] = int(conf.size)
        high = conf >= 0.8
        out["n_conf_0.8" + suffix] = int(high.sum())
        out["real_at_0.8" + suffix] = float(real[high].mean()) if high.any() else float("nan")
    return out


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", default="101-105")
    parser.add_argument("--methods", default="default,dynamic,sbm,structural,concor,optimize")
    parser.add_argument("--settings", default=",".join(SETTINGS))
    parser.add_argument("--also", default="", help="a sub-range of --seeds summarised on its own too (101-105)")
    args = parser.parse_args()
    lo, hi = (int(x) for x in args.seeds.split("-"))
    sub = tuple(int(x) for x in args.also.split("-")) if args.also else None
    out, out_sub = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for setting in args.settings.split(","):
            for method in args.methods.split(","):
                start = time.time()
                rows = [run(method, seed, setting, Path(tmp)) for seed in range(lo, hi + 1)]
                summary = summarise(rows)
                summary.update(setting=setting, method=method, seconds=round(time.time() - start, 1))
                out.append(summary)
                print(pd.DataFrame([summary]).round(3).to_string(index=False), flush=True)
                if sub:
                    part = summarise([r for seed, r in zip(range(lo, hi + 1), rows) if sub[0] <= seed <= sub[1]])
                    out_sub.append({**part, "setting": setting, "method": method, "seconds": float("nan")})
    if sub:
        _print(pd.DataFrame(out_sub), args.also)
    _print(pd.DataFrame(out), args.seeds)


def _print(table: pd.DataFrame, seeds: str) -> None:
    print(f"seeds {seeds}")
    print(table[["setting", "method", "ari", "precision", "recall", "recall_all", "birth_lag", "birth_on_time",
                 "seconds"]].round(3).to_string(index=False))
    print(table[["setting", "method", "moves", "ece", "ece_lo", "ece_hi", "ece_null", "n_conf_0.8", "real_at_0.8",
                 "candidates", "ece_all", "ece_all_lo", "ece_all_hi", "ece_null_all", "n_conf_0.8_all",
                 "real_at_0.8_all"]].round(3).to_string(index=False), flush=True)


if __name__ == "__main__":
    main()
