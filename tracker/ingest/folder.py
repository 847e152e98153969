"""Folders and globs of event files, aggregated in bounded memory with DuckDB.

A folder (or glob pattern) of CSV or Parquet files may hold more events than
fit in memory.  DuckDB (an embedded analytical database) scans the files in
parallel and sums them to one row per (source, target, relation, period):
value = sum of weights, n_events = number of events.  Its hash aggregation
spills to disk beyond ``memory_limit``, so memory follows the number of
distinct values and of distinct pairs per period (the ties), not the number
of events.  Two passes read the files: one for the distinct values of every
column, one for the sums, joined to integer codes of the checked values (see
:func:`_aggregate`; measured in tests/benchmarks/bench_import_folder.py).

The checks are those of a single file (:mod:`tracker.ingest.block`), run on
the distinct values of each column (labels, dates or periods; weights in
SQL), so every value is checked once however often it occurs.  The first bad
value is traced back to its file and editor line.  The store then keeps the
aggregated rows as events with a count (``events.n_events``), without dates:
such batches cannot be re-cut into other periods (import the files again).
"""

from __future__ import annotations

import csv
import glob
import hashlib
import sys
import tempfile
from pathlib import Path
from typing import Iterator

import numpy as np
import pandas as pd
import pyarrow as pa

from tracker.errors import InputError
from tracker.ingest.block import EventBlock, _Checks, _column_periods, _dated_periods, _labels
from tracker.ingest.events import MAX_WEIGHT, EventMapping
from tracker.ingest.periods import PeriodScheme
from tracker.ingest.reader import file_hash, open_table

__all__ = ["is_many", "list_files", "aggregate_files", "files_hash"]

_KINDS = {".csv": "csv", ".txt": "csv", ".tsv": "csv", ".parquet": "parquet", ".pq": "parquet"}
#: Aggregated rows handed to the store at a time.
FETCH_ROWS = 1_000_000


def is_many(path) -> bool:
    """Whether ``path`` names several files: a folder, or a glob pattern that is not a file."""
    text = str(path)
    if Path(text).is_dir():
        return True
    return not Path(text).exists() and any(ch in text for ch in "*?[")


def list_files(path) -> list[Path]:
    """The CSV or Parquet files of a folder (not its subfolders) or a glob, sorted; all of one kind."""
    text = str(path)
    if Path(text).is_dir():
        files = sorted(p for p in Path(text).iterdir() if p.is_file() and p.suffix.lower() in _KINDS)
    else:
        files = sorted(Path(p) for p in glob.glob(text, recursive=True) if Path(p).is_file())
    if not files:
        raise InputError("holds no CSV or Parquet files", file=text, fix="give a folder of .csv or .parquet files, or a glob such as 'data/*.csv'")
    kinds = {_KINDS.get(p.suffix.lower()) for p in files}
    if None in kinds or len(kinds) > 1:
        odd = [p.name for p in files if _KINDS.get(p.suffix.lower()) != _KINDS.get(files[0].suffix.lower())][:3]
        raise InputError(f"mixes kinds of files ({', '.join(odd)})", file=text,
                         fix="put only .csv files or only .parquet files in the folder, or narrow the glob")
    return files


def files_hash(files: list[Path]) -> str:
    """SHA-256 over the names and SHA-256 of every file (identifies a folder's content)."""
    digest = hashlib.sha256()
    for path in files:
        digest.update(path.name.encode() + b"\0" + file_hash(path).encode() + b"\n")
    return digest.hexdigest()


def _quote(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _literal(text: str) -> str:
    """A SQL string literal (file names and the delimiter are not user SQL)."""
    return "'" + str(text).replace("'", "''") + "'"


def _text(values) -> pa.Table:
    return pa.table({"x": pa.array(pd.Series(values, dtype=object).fillna("").astype(str).tolist(), type=pa.string())})


class _Located(Exception):
    """A bad distinct value; carries the InputError to place in a file."""


def aggregate_files(
    files: list[Path], mapping: EventMapping, scheme: PeriodScheme, *, delimiter: str | None = None,
    memory_limit: str = "1GB", threads: int | None = None,
) -> Iterator[EventBlock]:
    """Aggregated event blocks of many files (one row per pair, relation and period).

    Every file must have the header of the first (same names; order may differ
    for Parquet).  Raises :class:`InputError` naming file, line, column, value
    and fix for the first bad value found.
    """
    import duckdb

    first = open_table(files[0], delimiter=delimiter)
    first.require(mapping.columns())
    wanted = {k: v for k, v in mapping.columns().items() if v is not None}
    with tempfile.TemporaryDirectory(prefix="roletrail-duckdb-") as spill:
        con = duckdb.connect(config={"memory_limit": memory_limit, "temp_directory": spill,
                                     "preserve_insertion_order": False, **({"threads": threads} if threads else {})})
        try:
            _small_build_sides(con)
            names = [str(p) for p in files]
            listed = "[" + ", ".join(_literal(n) for n in names) + "]"
            if first.kind == "csv":
                cols = ", ".join(f"{_literal(c)}: 'VARCHAR'" for c in first.columns)
                source = (f"read_csv({listed}, header=true, delim={_literal(first.delimiter or ',')}, quote='\"', escape='\"', "
                          f"columns={{{cols}}}, filename=true, strict_mode=true, null_padding=false, auto_detect=false)")
            else:
                source = f"read_parquet({listed}, filename=true, union_by_name=true)"
            numeric = _numeric_weight(con, source, mapping)
            select = ", ".join(_quote(c) if numeric and c == mapping.weight else f"coalesce(CAST({_quote(c)} AS VARCHAR), '') AS {_quote(c)}"
                               for c in wanted.values())
            try:
                con.execute(f"CREATE TEMP VIEW raw AS SELECT {select}, filename FROM {source}")
                yield from _aggregate(con, files, first, mapping, scheme, numeric)
            except duckdb.OutOfMemoryException:
                raise InputError(f"needed more memory than --memory-limit {memory_limit} to sum",
                                 file=str(Path(names[0]).parent), fix="raise --memory-limit (e.g. 2GB), or import the files in smaller groups") from None
            except duckdb.Error as exc:
                detail = str(exc).strip().splitlines()[0][:200]
                raise InputError(f"cannot be read as one table ({detail})", file=str(Path(names[0]).parent),
                                 fix="check that every file has the same header and delimiter, and valid UTF-8 text") from None
        finally:
            con.close()


def _small_build_sides(con) -> None:
    """Keep the joins in the order written, each hash table built on its (small) right side.

    DuckDB cannot count the rows of CSV files before reading them (it
    estimates a few thousand), so its optimiser may build a join's hash
    table on the events and the small value map probe it: memory then grows
    with the events (out of memory at 60M events and 256 MB).  The maps of
    distinct values are always the small side, so the order as written is
    the bounded one.  Optimisers this DuckDB does not know are skipped.
    """
    import duckdb

    for names in ("join_order,build_side_probe_side", "join_order"):
        try:
            con.execute(f"SET disabled_optimizers = '{names}'")
            return
        except duckdb.Error:
            continue


def _numeric_weight(con, source: str, mapping: EventMapping) -> bool:
    """Whether the weight column is stored as numbers (Parquet): then it is summed as such, not parsed from text."""
    if mapping.weight is None or not source.startswith("read_parquet"):
        return False
    types = {row[0]: str(row[1]).upper() for row in con.execute(f"DESCRIBE SELECT * FROM {source}").fetchall()}
    kind = types.get(mapping.weight, "")
    return kind in {"TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER",
                    "UBIGINT", "FLOAT", "DOUBLE"} or kind.startswith("DECIMAL")


def _weight_checks(w: str, number: str, numeric: bool = False):
    """(SQL condition, problem, fix) for bad weights, in the order the checks of a single file run."""
    return (
        (f"{w} IS NULL" if numeric else f"{w} = ''", "has no weight", "fill in a number (0 for an observed absence of a tie) or drop the row"),
        (f"{number} IS NULL OR isnan({number})", "is not a number", "use a plain number with a decimal point, such as 1 or 2.5"),
        (f"NOT isfinite({number})", "is not a finite number", "use a plain number such as 1 or 2.5"),
        (f"{number} < 0", "is negative", "weights count or rate ties and must be 0 or more"),
        (f"{number} > {MAX_WEIGHT!r}", f"is larger than {MAX_WEIGHT:.0e}", "check the value, or rescale the column"),
    )


def _code_map(con, name: str, raw: pd.Series, normalised: np.ndarray) -> np.ndarray:
    """Register ``name`` (raw text -> integer code of its normalised value) in DuckDB; returns the distinct normalised values."""
    codes, uniques = pd.factorize(pd.Series(normalised, dtype=object))
    con.register(name, pd.DataFrame({"raw": raw.to_numpy(dtype=object), "code": codes.astype(np.int32)}))
    return np.asarray(uniques, dtype=object)


def _aggregate(con, files, first, mapping: EventMapping, scheme: PeriodScheme, numeric: bool = False) -> Iterator[EventBlock]:
    """Two passes over the files: the distinct values of every column (and a count of bad weights), then the sums.

    The first pass gathers the distinct source, target, relation and date
    (or period) texts with one GROUPING SETS scan; they are checked in
    Python and mapped to small integer codes, so the second pass joins and
    groups on integers.  Memory: the distinct values, DuckDB's memory limit
    (its hash tables spill to its temporary folder beyond it) and one batch
    of summed rows, whatever the number of events.
    """
    q = _quote
    if mapping.date is not None:
        d = f"trim(raw.{q(mapping.date)})"
        # the length test first: the pattern is matched only on text longer than a date
        key = d if mapping.date_format else (f"CASE WHEN length({d}) > 10 AND regexp_matches({d}, '^\\d{{4}}-\\d\\d-\\d\\d[T ]') "
                                             f"THEN left({d}, 10) ELSE {d} END")
    else:
        key = f"trim(raw.{q(mapping.period_column)})"
    if mapping.weight is not None:
        w = f"raw.{q(mapping.weight)}" if numeric else f"trim(raw.{q(mapping.weight)})"
        number = f"CAST({w} AS DOUBLE)" if numeric else f"TRY_CAST({w} AS DOUBLE)"
        bad_weight = " OR ".join(f"({c})" for c, _, _ in _weight_checks(w, number, numeric))
        weight_expr = number
    else:
        w = number = None
        bad_weight, weight_expr = "false", "1.0"
    relation = f"raw.{q(mapping.relation)}" if mapping.relation is not None else "''"
    # -- pass 1: distinct values of each column, bad weights counted
    found = con.execute(
        f"WITH v AS (SELECT raw.{q(mapping.source)} AS s, raw.{q(mapping.target)} AS t, {relation} AS r, {key} AS d, "
        f"CASE WHEN coalesce({bad_weight}, true) THEN 1 ELSE 0 END AS b FROM raw) "
        "SELECT grouping(s, t, r, d) AS g, s, t, r, d, sum(b) AS bad FROM v GROUP BY GROUPING SETS ((s), (t), (r), (d))"
    ).fetch_df()
    part = {name: found[found["g"] == g] for name, g in (("s", 7), ("t", 11), ("r", 13), ("d", 14))}
    # -- weights: located and named only when a pass found a bad one
    if int(part["d"]["bad"].sum()):
        for condition, problem, fix in _weight_checks(w, number, numeric):
            bad = con.execute(f"SELECT {w}, filename FROM raw WHERE {condition} LIMIT 1").fetchone()
            if bad:
                value = "" if bad[0] is None else str(bad[0])
                raise _place(first, Path(bad[1]), mapping.weight, value,
                             InputError(problem, column=mapping.weight, value=value, fix=fix))
    # -- labels: checked once per distinct value, normalised in Python, coded for DuckDB
    labels = pd.Series(pd.unique(pd.concat([part["s"]["s"], part["t"]["t"]], ignore_index=True)), dtype=object).fillna("")
    codes, names = _checked(con, files, first, labels, "actor", [mapping.source, mapping.target], lambda t, c: _labels(t, "x", c, "actor"))
    actors = _code_map(con, "actor_map", labels, names.to_numpy(dtype=object)[codes])
    if mapping.relation is not None:
        rels = part["r"]["r"].reset_index(drop=True).fillna("").astype(object)
        codes, names = _checked(con, files, first, rels, "relation", [mapping.relation], lambda t, c: _labels(t, "x", c, "relation"))
        relations = _code_map(con, "relation_map", rels, names.to_numpy(dtype=object)[codes])
        rel_join, rel_expr = f"JOIN relation_map r ON raw.{q(mapping.relation)} = r.raw", "r.code"
    else:
        relations = np.array([mapping.fixed_relation()], dtype=object)
        rel_join, rel_expr = "", "0"
    # -- periods: from distinct dates (the day part of ISO date-times) or period labels
    if mapping.date is not None:
        def check_dates(t, c):
            return _dated_periods(t, _with_date(mapping, "x"), scheme, c)
    else:
        def check_dates(t, c):
            return _column_periods(t, "x", c)
    dates = part["d"]["d"].reset_index(drop=True).fillna("").astype(object)
    column = mapping.date or mapping.period_column
    codes, periods, _ = _checked(con, files, first, dates, "date", [column], check_dates, raw_column=True)
    table = periods.drop_duplicates("label").reset_index(drop=True)
    period_of = periods["label"].to_numpy(dtype=object)[np.asarray(codes)] if len(periods) else np.empty(0, dtype=object)
    con.register("period_map", pd.DataFrame({"raw": dates.to_numpy(dtype=object),
                                             "code": pd.Index(table["label"]).get_indexer(period_of).astype(np.int32)}))
    # -- pass 2: sum per pair, relation and period, on integer codes
    result = con.sql(
        f"SELECT a.code AS s, b.code AS t, {rel_expr} AS r, p.code AS p, sum({weight_expr}) AS weight, count(*) AS n "
        f"FROM raw JOIN actor_map a ON raw.{q(mapping.source)} = a.raw JOIN actor_map b ON raw.{q(mapping.target)} = b.raw "
        f"{rel_join} JOIN period_map p ON {key} = p.raw GROUP BY ALL"
    )
    reader = result.to_arrow_reader(FETCH_ROWS) if hasattr(result, "to_arrow_reader") else result.record_batch(FETCH_ROWS)
    for batch in reader:
        if not batch.num_rows:
            continue
        columns = {name: batch.column(name).to_numpy(zero_copy_only=False) for name in ("s", "t", "r", "p", "weight", "n")}
        self_tie = columns["s"] == columns["t"]
        selfies = int(columns["n"][self_tie].sum())
        columns = {name: values[~self_tie] for name, values in columns.items()}
        n = len(columns["s"])
        # the actors and relations of this batch only (one seen only in self-ties is not added)
        both, used = pd.factorize(np.concatenate([columns["s"], columns["t"]]))
        relation, used_relations = pd.factorize(columns["r"])
        yield EventBlock(
            rows=np.zeros(n, dtype=np.int64), actors=actors[np.asarray(used, dtype=np.int64)],
            source=both[:n], target=both[n:], relations=relations[np.asarray(used_relations, dtype=np.int64)], relation=relation,
            periods=table, period=columns["p"].astype(np.int64), dates=np.array([None], dtype=object), date=np.zeros(n, dtype=np.int64),
            weight=columns["weight"].astype(np.float64), n_events=columns["n"].astype(np.int64), self_ties=selfies,
        )


def _with_date(mapping: EventMapping, column: str) -> EventMapping:
    from dataclasses import replace

    return replace(mapping, date=column)


def _checked(con, files, first, values: pd.Series, what: str, columns: list[str], check, raw_column: bool = False):
    """Run a column check of :mod:`tracker.ingest.block` on distinct values; place the first bad one in its file."""
    checks = _Checks(np.arange(len(values), dtype=np.int64), first.name, collect=False)
    try:
        found = check(_text(values), checks)
        checks.raise_first()
        return found
    except InputError as exc:
        value = values.iloc[int(exc.row)]
        for column in columns:
            expression = f"trim({_quote(column)})" if raw_column else _quote(column)
            found = con.execute(
                f"SELECT filename FROM raw WHERE {expression} = $v OR ({expression} LIKE $v || '%' AND $raw) LIMIT 1",
                {"v": value, "raw": raw_column},
            ).fetchone()
            if found:
                raise _place(first, Path(found[0]), column, value,
                             InputError(exc.problem, column=column, value=exc.value, fix=exc.fix)) from None
        raise InputError(exc.problem, file=first.name, column=columns[0], value=exc.value, fix=exc.fix) from None


def _place(first, path: Path, column: str, value: str, exc: InputError) -> InputError:
    """The error at the editor line of the first row of ``path`` whose ``column`` holds ``value``."""
    line = None
    if first.kind == "csv":
        limit = csv.field_size_limit()
        csv.field_size_limit(min(sys.maxsize, 2**31 - 1))
        try:
            table = open_table(path, delimiter=first.delimiter)
            with open(path, encoding=table.encoding, newline="", errors="replace") as handle:
                records = csv.reader(handle, delimiter=table.delimiter or ",")
                header = [c.strip() for c in next(records, [])]
                at = header.index(column) if column in header else None
                start = records.line_num + 1
                for record in records:
                    if at is not None and at < len(record) and (record[at] == value or record[at].strip() == value
                                                                 or record[at].strip().startswith(value)):
                        line = start
                        break
                    start = records.line_num + 1
        finally:
            csv.field_size_limit(limit)
    return InputError(exc.problem, file=path.name, line=line, column=column, value=exc.value, fix=exc.fix)
