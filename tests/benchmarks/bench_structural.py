"""Speed and memory of structural positions: 20 random periods of 1,200 actors.

Each period is a random directed graph with average degree about 10 (ties sent
plus received about 20), integer tie values 1-3, clustered into 8 positions::

    python tests/benchmarks/bench_structural.py            # both measures
    python tests/benchmarks/bench_structural.py 1200 20    # actors, periods

Prints wall and CPU seconds per measure (CPU time is the steadier figure on a
busy machine), milliseconds per period, the largest traced allocation peak
(tracemalloc, one period) and the process's peak resident set size.
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

from tracker.blockmodel.structural import StructuralPositions  # noqa: E402


def random_period(n: int, degree: float, rng: np.random.Generator) -> sp.csr_array:
    n_ties = int(n * degree)
    rows = rng.integers(0, n, n_ties)
    cols = rng.integers(0, n, n_ties)
    vals = rng.integers(1, 4, n_ties).astype(float)
    keep = rows != cols
    mat = sp.csr_array((vals[keep], (rows[keep], cols[keep])), shape=(n, n))
    mat.sum_duplicates()
    return mat


def main(n: int = 1200, periods: int = 20) -> None:
    rng = np.random.default_rng(0)
    data = [random_period(n, 10.0, rng) for _ in range(periods)]
    print(f"{periods} periods x {n} actors, {np.mean([m.nnz for m in data]):.0f} ties per period")
    for measure in ("euclidean", "correlation"):
        start, cpu = time.perf_counter(), time.process_time()
        for mat in data:
            StructuralPositions(8, measure=measure).fit([mat], [True])
        total, cpu = time.perf_counter() - start, time.process_time() - cpu
        tracemalloc.start()
        StructuralPositions(8, measure=measure).fit([data[0]], [True])
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        print(
            f"{measure:>11}: {total:6.2f} s wall ({cpu:.2f} s CPU) in all, "
            f"{total / periods * 1000:6.1f} ms per period, "
            f"traced peak {peak / 2**20:6.1f} MiB per period"
        )
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak resident set size {rss:.0f} MiB")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
