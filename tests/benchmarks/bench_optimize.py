"""Direct optimisation speed and memory: 200 actors, 4 positions, 50 restarts.

The data are a planted four-position directed network (a core, two semi-
peripheries and a periphery) with noise.  Run in its own process::

    python tests/benchmarks/bench_optimize.py            # 200 actors
    python tests/benchmarks/bench_optimize.py 1000       # another size
"""

from __future__ import annotations

import resource
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
import scipy.sparse as sp

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tracker.blockmodel.optimize import OptimizedPositions, partition_cost  # noqa: E402

# Tie probabilities between the four planted positions.
PROB = np.array(
    [
        [0.60, 0.30, 0.30, 0.05],
        [0.30, 0.10, 0.02, 0.02],
        [0.30, 0.02, 0.50, 0.02],
        [0.05, 0.02, 0.02, 0.01],
    ]
)


def planted(n: int, seed: int = 0) -> tuple[sp.csr_array, np.ndarray]:
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, 4, n)
    rows, cols = [], []
    # Block by block, so that memory stays proportional to the ties.
    for k in range(4):
        for l in range(4):
            src, dst = np.flatnonzero(truth == k), np.flatnonzero(truth == l)
            m = rng.binomial(src.size * dst.size, PROB[k, l])
            cells = rng.choice(src.size * dst.size, size=m, replace=False)
            rows.append(src[cells // dst.size])
            cols.append(dst[cells % dst.size])
    rows, cols = np.concatenate(rows), np.concatenate(cols)
    keep = rows != cols
    a = sp.csr_array((np.ones(int(keep.sum())), (rows[keep], cols[keep])), shape=(n, n))
    return a, truth


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 200
    a, truth = planted(n)
    base = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    planted_cost = partition_cost([a], [True], truth, 4)
    print(f"actors: {n}, ties: {a.nnz}, positions: 4, restarts: 50")
    for init in ("random", "structural"):
        wall, cpu = time.perf_counter(), time.process_time()
        model = OptimizedPositions(4, seed=0, restarts=50, init=init).fit([a], [True])
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        print(f"  init={init}: {wall:.2f} s wall, {cpu:.2f} s CPU; "
              f"inconsistencies {model.cost_:.0f} (planted partition: {planted_cost:.0f})")
    # Traced separately: tracemalloc slows numpy's many small allocations several-fold.
    tracemalloc.start()
    OptimizedPositions(4, seed=0, restarts=5, init="random").fit([a], [True])
    _, traced = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak traced allocations of one fit: {traced / 1e6:.2f} MB")
    print(f"peak memory: {peak:.0f} MB (before fitting: {base:.0f} MB)")


if __name__ == "__main__":
    main()
