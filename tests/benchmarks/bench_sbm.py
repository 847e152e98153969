"""Speed and memory of the blockmodels: 10,000 actors over 20 periods.

A planted dynamic blockmodel (seeded): 4 positions, each actor keeps its
position from one period to the next with probability 0.9 and otherwise draws
one at random (Ghasemian et al. 2016); 85% of actors are present in a given
period; undirected ties with average degree 5 per period and signal
``c lambda^2 = 2`` (above the one-period limit of Decelle et al. 2011).  Fits
the Poisson blockmodel to each period alone and the dynamic blockmodel to all
periods jointly::

    python tests/benchmarks/bench_sbm.py                 # 10000 actors, 20 periods
    python tests/benchmarks/bench_sbm.py 2000 10         # actors, periods

Prints seconds for each part, the mean adjusted Rand index against the planted
positions, and the process's peak resident set size.
"""

from __future__ import annotations

import resource
import sys
import time
from pathlib import Path

import numpy as np
import scipy.sparse as sp
from sklearn.metrics import adjusted_rand_score

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tracker.blockmodel.sbm import SBMPositions  # noqa: E402
from tracker.models.dynamic import DynamicSBM  # noqa: E402


def planted_period(z: np.ndarray, B: int, c_in: float, c_out: float, rng) -> sp.csr_array:
    """Sparse SBM: Poisson number of ties per block pair, endpoints drawn uniformly."""
    n = z.size
    members = [np.flatnonzero(z == k) for k in range(B)]
    rows, cols = [], []
    for k in range(B):
        for l in range(k, B):
            pairs = members[k].size * (members[k].size - 1) / 2 if k == l else members[k].size * members[l].size
            m = rng.poisson((c_in if k == l else c_out) / n * pairs)
            rows.append(rng.choice(members[k], m))
            cols.append(rng.choice(members[l], m))
    r, c = np.concatenate(rows), np.concatenate(cols)
    keep = r != c
    lo, hi = np.minimum(r[keep], c[keep]), np.maximum(r[keep], c[keep])
    upper = sp.csr_array((np.ones(lo.size), (lo, hi)), shape=(n, n))
    upper.sum_duplicates()
    upper.data[:] = 1.0
    return sp.csr_array(upper + upper.T)


def planted(n_actors: int, n_periods: int, B: int = 4, c: float = 5.0, snr: float = 2.0, eta: float = 0.9, seed: int = 0):
    rng = np.random.default_rng(seed)
    lam = np.sqrt(snr / c)
    c_in, c_out = c * (1 + (B - 1) * lam), c * (1 - lam)
    z = rng.integers(B, size=n_actors)
    names = np.array([f"actor {i}" for i in range(n_actors)], dtype=object)
    periods, truth = [], []
    for t in range(n_periods):
        if t:
            z = np.where(rng.random(n_actors) < eta, z, rng.integers(B, size=n_actors))
        idx = np.flatnonzero(rng.random(n_actors) < 0.85)
        periods.append((names[idx].tolist(), [planted_period(z[idx], B, c_in, c_out, rng)], [False]))
        truth.append(z[idx].copy())
    return periods, truth


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main(n_actors: int = 10_000, n_periods: int = 20) -> None:
    B = 4
    t0 = time.perf_counter()
    periods, truth = planted(n_actors, n_periods, B)
    nnz = sum(p[1][0].nnz for p in periods)
    print(f"data: {n_actors} actors, {n_periods} periods, {nnz // 2} ties, {time.perf_counter() - t0:.1f} s")
    print(f"peak RSS after data: {peak_mb():.0f} MB")

    t0 = time.perf_counter()
    scores = []
    for (actors, mats, directed), z in zip(periods, truth):
        fit = SBMPositions(B, seed=0).fit(mats, directed)
        scores.append(adjusted_rand_score(z, fit.labels_))
    sec = time.perf_counter() - t0
    print(f"per-period SBM (5 restarts): {sec:.1f} s ({sec / n_periods:.2f} s a period), mean ARI {np.mean(scores):.3f}")
    print(f"peak RSS: {peak_mb():.0f} MB")

    t0 = time.perf_counter()
    dyn = DynamicSBM(B, seed=0).fit(periods)
    sec = time.perf_counter() - t0
    joint = [adjusted_rand_score(z, dyn.labels_[t]) for t, z in enumerate(truth)]
    print(
        f"dynamic SBM (3 restarts): {sec:.1f} s, {dyn.n_iter_} EM iterations in the winning start, "
        f"mean ARI {np.mean(joint):.3f}"
    )
    print(f"peak RSS: {peak_mb():.0f} MB")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
