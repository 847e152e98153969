"""A plain `fit` with default options: 20 periods of 1,200 actors, through the Python API.

Prints the time of the import, of `fit` with its defaults (the dynamic model,
39-draw fit test per period) and of `fit --method structural --smooth off`
(structural positions, each period alone), and the peak memory::

    python tests/benchmarks/bench_fit.py [n_actors] [n_periods]
"""

from __future__ import annotations

import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tracker.api import Study  # noqa: E402


def make_events(path: Path, n: int, periods: int, degree: float = 6.0, positions: int = 4, seed: int = 0) -> None:
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, positions, n)
    p_in, p_out = degree * 0.6 / (n / positions), degree * 0.4 / (n - n / positions)
    with open(path, "w") as handle:
        handle.write("source,target,year\n")
        for year in range(2000, 2000 + periods):
            k = rng.poisson(degree * n)
            src = rng.integers(0, n, 3 * k)
            dst = rng.integers(0, n, 3 * k)
            same = truth[src] == truth[dst]
            keep = rng.random(3 * k) < np.where(same, p_in, p_out) / max(p_in, p_out)
            src, dst = src[keep][:k], dst[keep][:k]
            handle.writelines(f"actor {s},actor {d},{year}\n" for s, d in zip(src, dst) if s != d)


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1200
    periods = int(sys.argv[2]) if len(sys.argv) > 2 else 20
    with tempfile.TemporaryDirectory() as tmp:
        csv = Path(tmp) / "events.csv"
        make_events(csv, n, periods)
        with Study(Path(tmp) / "bench.db") as study:
            start = time.perf_counter()
            study.import_events(csv, source="source", target="target", date="year")
            print(f"import: {time.perf_counter() - start:.1f} s")
            alone = {"method": "structural", "smoothing": 0}  # the dynamic model refuses --smooth
            for label, kwargs in (("fit (defaults: dynamic model, 39 draws)", {}),
                                  ("fit --method structural --smooth off", alone),
                                  ("fit --method structural --smooth off --draws 0", {**alone, "draws": 0})):
                start = time.perf_counter()
                study.fit(positions=4, **kwargs)
                print(f"{label}: {time.perf_counter() - start:.1f} s for {periods} periods of {n} actors")
    print(f"peak memory: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


if __name__ == "__main__":
    main()
