"""Bigger than memory: a folder of CSV files imported in bounded memory.

Generates a folder of event files (``--events`` in total, files of
``--per-file`` events) over a fixed set of pairs (``--actors`` actors, each
tied to ``--partners`` others, over ``--years`` years), so the number of
ties stays the same while the number of events grows.  Then imports the
folder into a new SQLite study in a child process and prints the time, the
peak memory of that process (DuckDB included) and events per second.  Run it
at several sizes: peak memory should stay flat as events grow::

    python tests/benchmarks/bench_import_folder.py --events 10000000
    python tests/benchmarks/bench_import_folder.py --events 100000000 --dir /big/disk

The generated folder is reused when it exists (pass --dir to keep it).
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))


def make_folder(folder: Path, n_events: int, per_file: int, n_actors: int, partners: int, years: int, seed: int = 0) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    marker = folder / f".complete-{n_events}"
    if marker.exists():
        return
    rng = np.random.default_rng(seed)
    src = np.repeat(np.arange(n_actors), partners)
    dst = (src + rng.integers(1, n_actors, src.size)) % n_actors
    names = np.array([f"agency {i}" for i in range(n_actors)], dtype=object)
    for number, start in enumerate(range(0, n_events, per_file)):
        m = min(per_file, n_events - start)
        pick = rng.integers(0, src.size, m)
        year = rng.integers(2000, 2000 + years, m).astype(str).astype(object)
        month = np.char.zfill(rng.integers(1, 13, m).astype(str), 2).astype(object)
        weight = rng.integers(1, 4, m).astype(str).astype(object)
        lines = names[src[pick]] + "," + names[dst[pick]] + "," + year + "-" + month + "-15," + weight + "\n"
        with open(folder / f"events-{number:05d}.csv", "w") as handle:
            handle.write("source,target,date,weight\n")
            handle.write("".join(lines.tolist()))
    marker.touch()


def _import(folder: str, db: str, memory_limit: str, queue) -> None:
    from tracker.api import Study

    start = time.perf_counter()
    with Study(db) as study:
        report = study.import_events(folder, source="source", target="target", date="date", weight="weight",
                                     memory_limit=memory_limit)
        ties = study.store.counts()["ties"]
    queue.put({
        "seconds": time.perf_counter() - start,
        "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
        "events": report["rows_loaded"], "stored": report["rows_stored"], "ties": ties, "files": report["files"],
    })


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--events", type=int, default=10_000_000)
    parser.add_argument("--per-file", type=int, default=2_000_000)
    parser.add_argument("--actors", type=int, default=5000)
    parser.add_argument("--partners", type=int, default=5)
    parser.add_argument("--years", type=int, default=10)
    parser.add_argument("--memory-limit", default="1GB")
    parser.add_argument("--dir", default=None, help="folder for the generated files (default: a temporary one)")
    args = parser.parse_args()
    tmp = None if args.dir else tempfile.mkdtemp(prefix="roletrail-bench-")
    base = Path(args.dir or tmp)
    try:
        folder = base / f"events-{args.events}"
        start = time.perf_counter()
        make_folder(folder, args.events, args.per_file, args.actors, args.partners, args.years)
        size = sum(p.stat().st_size for p in folder.glob("*.csv")) / 1e9
        print(f"folder: {args.events:,} events in {len(list(folder.glob('*.csv')))} files, {size:.2f} GB "
              f"(generated or found in {time.perf_counter() - start:.0f} s)")
        db = base / f"study-{args.events}.db"
        db.unlink(missing_ok=True)
        ctx = mp.get_context("spawn")
        queue = ctx.Queue()
        child = ctx.Process(target=_import, args=(str(folder), str(db), args.memory_limit, queue))
        child.start()
        r = queue.get()
        child.join()
        print(f"import: {r['seconds']:.1f} s, {r['events'] / r['seconds']:,.0f} events/s, peak memory {r['peak_mb']:.0f} MB "
              f"(DuckDB memory limit {args.memory_limit})")
        print(f"stored: {r['stored']:,} summed rows standing for {r['events']:,} events; {r['ties']:,} ties")
    finally:
        if tmp:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
