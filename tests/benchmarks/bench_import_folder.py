"""Bigger than memory: a folder of CSV or Parquet files imported in bounded memory.

Generates a folder of event files (``--events`` in total, files of
``--per-file`` events, CSV or ``--format parquet``) over a fixed set of pairs (``--actors`` actors, each
tied to ``--partners`` others, over ``--years`` years), so the number of
ties stays the same while the number of events grows.  Then imports the
folder into a new SQLite study in a child process and prints the time, the
peak memory of that process (DuckDB included) and events per second.  Run it
at several sizes (each in its own process; the smaller sizes import the
first files of the largest one): peak memory should stay flat as events grow::

    python tests/benchmarks/bench_import_folder.py --events 10000000
    python tests/benchmarks/bench_import_folder.py --format parquet --events 10000000,30000000,100000000 --memory-limit 256MB

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


def make_folder(folder: Path, n_events: int, per_file: int, n_actors: int, partners: int, years: int,
                seed: int = 0, kind: str = "csv") -> None:
    """Write ``n_events`` events in files of ``per_file`` events (CSV text, or Parquet with dictionary-coded text)."""
    folder.mkdir(parents=True, exist_ok=True)
    marker = folder / f".complete-{n_events}-{kind}"
    if marker.exists():
        return
    rng = np.random.default_rng(seed)
    src = np.repeat(np.arange(n_actors), partners)
    dst = (src + rng.integers(1, n_actors, src.size)) % n_actors
    names = np.array([f"agency {i}" for i in range(n_actors)], dtype=object)
    months = np.array([f"{2000 + y}-{m:02d}-15" for y in range(years) for m in range(1, 13)], dtype=object)
    for number, start in enumerate(range(0, n_events, per_file)):
        m = min(per_file, n_events - start)
        pick = rng.integers(0, src.size, m)
        month = rng.integers(0, months.size, m)
        weight = rng.integers(1, 4, m)
        if kind == "parquet":
            import pyarrow as pa
            import pyarrow.parquet as pq

            text = pa.array(names.tolist(), type=pa.string())
            table = pa.table({
                "source": pa.DictionaryArray.from_arrays(pa.array(src[pick].astype(np.int32)), text),
                "target": pa.DictionaryArray.from_arrays(pa.array(dst[pick].astype(np.int32)), text),
                "date": pa.DictionaryArray.from_arrays(pa.array(month.astype(np.int32)), pa.array(months.tolist(), type=pa.string())),
                "weight": pa.array(weight.astype(np.int64)),
            })
            pq.write_table(table, folder / f"events-{number:05d}.parquet")
            continue
        lines = names[src[pick]] + "," + names[dst[pick]] + "," + months[month] + "," + weight.astype(str).astype(object) + "\n"
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


def _subset(folder: Path, base: Path, n_events: int, per_file: int, kind: str) -> Path:
    """A folder of links to the first files of ``folder`` holding ``n_events`` events (sizes share one generated folder)."""
    files = sorted(folder.glob(f"events-*.{kind}"))[: -(-n_events // per_file)]
    if len(files) == len(list(folder.glob(f"events-*.{kind}"))):
        return folder
    part = base / f"first-{n_events}-{kind}"
    shutil.rmtree(part, ignore_errors=True)
    part.mkdir()
    for path in files:
        (part / path.name).symlink_to(path)
    return part


def _run(folder: Path, db: Path, memory_limit: str) -> dict:
    db.unlink(missing_ok=True)
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    child = ctx.Process(target=_import, args=(str(folder), str(db), memory_limit, queue))
    child.start()
    result = queue.get()
    child.join()
    db.unlink(missing_ok=True)
    return result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--events", default="10000000",
                        help="events in the folder; several sizes separated by commas share one generated folder")
    parser.add_argument("--per-file", type=int, default=2_000_000)
    parser.add_argument("--format", choices=["csv", "parquet"], default="csv")
    parser.add_argument("--actors", type=int, default=5000)
    parser.add_argument("--partners", type=int, default=5)
    parser.add_argument("--years", type=int, default=10)
    parser.add_argument("--memory-limit", default="1GB")
    parser.add_argument("--dir", default=None, help="folder for the generated files (default: a temporary one, deleted afterwards)")
    args = parser.parse_args()
    sizes = [int(x.replace("_", "")) for x in args.events.split(",")]
    tmp = None if args.dir else tempfile.mkdtemp(prefix="roletrail-bench-")
    base = Path(args.dir or tmp)
    try:
        largest = max(sizes)
        folder = base / f"events-{largest}-{args.format}"
        start = time.perf_counter()
        make_folder(folder, largest, args.per_file, args.actors, args.partners, args.years, kind=args.format)
        files = sorted(folder.glob(f"events-*.{args.format}"))
        size = sum(p.stat().st_size for p in files) / 1e9
        print(f"folder: {largest:,} events in {len(files)} {args.format} files, {size:.2f} GB "
              f"(generated or found in {time.perf_counter() - start:.0f} s)")
        rows = []
        for n in sizes:
            r = _run(_subset(folder, base, n, args.per_file, args.format), base / f"study-{n}.db", args.memory_limit)
            rows.append(r)
            print(f"{r['events']:,} events ({r['files']} files): {r['seconds']:.1f} s, {r['events'] / r['seconds']:,.0f} events/s, "
                  f"peak memory {r['peak_mb']:.0f} MB; stored {r['stored']:,} summed rows, {r['ties']:,} ties", flush=True)
        print(f"\n| events | files | time | events/s | peak memory |  (DuckDB memory limit {args.memory_limit})")
        print("|---|---|---|---|---|")
        for r in rows:
            print(f"| {r['events']:,} | {r['files']} | {r['seconds']:.1f} s | {r['events'] / r['seconds']:,.0f} | {r['peak_mb']:.0f} MB |")
    finally:
        if tmp:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
