"""Import of large CSV files: time, events per second and peak memory by file size.

The files are written row block by row block (never held in memory), then each
is imported through the Python API in a fresh process, so that each process's
peak resident set size (``resource.getrusage``) is the import's own.  An import
streams the file in chunks (``tracker.ingest.reader.CHUNK_ROWS`` rows), so the
peak should not grow with the file: compare the 50 MB and 200 MB rows.

    python tests/benchmarks/bench_large_csv.py                 # 50 MB and 200 MB into SQLite
    python tests/benchmarks/bench_large_csv.py --sizes 20 80   # other sizes (MB)
    python tests/benchmarks/bench_large_csv.py --db postgresql+psycopg://user@host/postgres

With ``--db`` a server URL, each import goes into a new database on that
server (created and dropped by the script; the user needs CREATEDB).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

N_ACTORS = 20_000
BLOCK = 50_000  # rows generated and written at a time


def make_csv(path: Path, megabytes: float, seed: int = 0) -> int:
    """Write random dated events until the file reaches ``megabytes``; returns the number of rows."""
    rng = np.random.default_rng(seed)
    target = int(megabytes * 1e6)
    rows = 0
    with open(path, "w", newline="") as handle:
        handle.write("source,target,date,kind,weight\n")
        while handle.tell() < target:
            src = rng.integers(0, N_ACTORS, BLOCK)
            dst = rng.integers(0, N_ACTORS, BLOCK)
            year = rng.integers(2000, 2020, BLOCK)
            month = rng.integers(1, 13, BLOCK)
            day = rng.integers(1, 29, BLOCK)
            kind = np.array(["aid", "trade", "dispute"])[rng.integers(0, 3, BLOCK)]
            weight = rng.integers(1, 5, BLOCK)
            handle.writelines(
                f"org {s},org {d},{y}-{m:02d}-{dd:02d},{k},{w}\n"
                for s, d, y, m, dd, k, w in zip(src, dst, year, month, day, kind, weight)
            )
            rows += BLOCK
    return rows


def import_one(csv: Path, db: str) -> dict:
    """Import ``csv`` into a new study at ``db`` (a path or URL); the numbers of this process."""
    from tracker.api import Study

    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    start = time.perf_counter()
    with Study(db) as study:
        report = study.import_events(csv, source="source", target="target", date="date", relation="kind", weight="weight")
        elapsed = time.perf_counter() - start
        ties = study.store.counts()["ties"]
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {"mb": csv.stat().st_size / 1e6, "events": report["rows_loaded"], "ties": ties, "seconds": elapsed,
            "events_per_s": report["rows_loaded"] / elapsed, "peak_mb": peak, "before_mb": before}


def _server_db(server_url: str):
    """A new database on a PostgreSQL server and a function that drops it."""
    from sqlalchemy import create_engine
    from sqlalchemy.engine import make_url

    admin = create_engine(server_url, isolation_level="AUTOCOMMIT")
    name = "bench_" + uuid.uuid4().hex[:12]
    with admin.connect() as conn:
        conn.exec_driver_sql(f'CREATE DATABASE "{name}"')

    def drop():
        with admin.connect() as conn:
            conn.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()

    return make_url(server_url).set(database=name).render_as_string(hide_password=False), drop


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", nargs="+", type=float, default=[50, 200], help="file sizes in MB")
    parser.add_argument("--db", default=None, help="PostgreSQL server URL (default: SQLite files)")
    parser.add_argument("--child", nargs=2, metavar=("CSV", "DB"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        print(json.dumps(import_one(Path(args.child[0]), args.child[1])))
        return
    with tempfile.TemporaryDirectory() as tmp:
        results = []
        for mb in args.sizes:
            csv = Path(tmp) / f"events_{mb:g}MB.csv"
            start = time.perf_counter()
            rows = make_csv(csv, mb)
            print(f"wrote {csv.name}: {rows:,} rows in {time.perf_counter() - start:.0f} s", flush=True)
            if args.db:
                db, drop = _server_db(args.db)
            else:
                db, drop = str(Path(tmp) / f"study_{mb:g}.db"), None
            try:
                out = subprocess.run([sys.executable, __file__, "--child", str(csv), db],
                                     check=True, capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(ROOT)})
            finally:
                if drop is not None:
                    drop()
            result = json.loads(out.stdout.strip().splitlines()[-1])
            results.append(result)
            print(f"{result['mb']:6.0f} MB  {result['events']:>10,} events  {result['ties']:>10,} ties  "
                  f"{result['seconds']:7.1f} s  {result['events_per_s']:>8,.0f} events/s  "
                  f"peak {result['peak_mb']:5.0f} MB (after start-up {result['before_mb']:.0f} MB)", flush=True)
            csv.unlink()
            if drop is None:
                for suffix in ("", "-wal", "-shm"):
                    Path(db + suffix).unlink(missing_ok=True)
        if len(results) > 1:
            small, large = results[0], results[-1]
            print(f"file x{large['mb'] / small['mb']:.1f}: peak memory x{large['peak_mb'] / small['peak_mb']:.2f} "
                  f"({small['peak_mb']:.0f} MB -> {large['peak_mb']:.0f} MB)")


if __name__ == "__main__":
    main()
