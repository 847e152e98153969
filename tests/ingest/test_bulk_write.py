"""The fast write path of an import: ties summed in numpy, rows written many to a statement, folders summed in two passes.

References: pandas ``groupby(...).sum()`` for the sums (a reference library),
the rows as read back by SQL for the writes, pandas for the folder sums.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sqlalchemy import create_engine, text

from tracker.errors import InputError
from tracker.store import events as store_events
from tracker.store.events import _sqlite_insert_many, _sum_by_key

KEY = ["period_id", "relation_id", "source_id", "target_id"]


def _reference(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.groupby(KEY, as_index=False)[["value", "n_events"]].sum().sort_values(KEY).reset_index(drop=True)


@settings(max_examples=25)
@given(
    rows=st.lists(st.tuples(*[st.integers(0, 6)] * 4, st.integers(0, 9), st.integers(1, 5)), min_size=1, max_size=60),
    wide=st.booleans(),
)
def test_sums_by_key_match_pandas_groupby(rows, wide):
    frame = pd.DataFrame(rows, columns=[*KEY, "value", "n_events"]).astype(np.int64)
    if wide:  # ids too large to pack into one int64: the lexsort path
        frame["source_id"] += 1 << 40
        frame["target_id"] += 1 << 40
    frame["value"] = frame["value"] / 4  # exact in binary, so any order of addition gives the same sum
    got = _sum_by_key([frame[k].to_numpy() for k in KEY], {c: frame[c].to_numpy() for c in ("value", "n_events")},
                      ["value", "n_events"])
    pd.testing.assert_frame_equal(pd.DataFrame(got)[[*KEY, "value", "n_events"]], _reference(frame), check_dtype=False)


@pytest.mark.parametrize("n", [0, 1, 110, 111, 112, 2 * 111 * 3 + 5])
def test_many_rows_a_statement_write_every_row_once(n, monkeypatch):
    monkeypatch.setattr(store_events, "_SQLITE_CHUNK", 3)  # several chunks, and a last statement of fewer rows
    engine = create_engine("sqlite://")
    rng = np.random.default_rng(7)
    ids = rng.integers(-5, 10**12, n)
    weights = rng.random(n)
    labels = np.array([None if i % 7 == 0 else f"é {i}" for i in range(n)], dtype=object)
    with engine.begin() as conn:
        conn.exec_driver_sql("CREATE TABLE t (a INTEGER, b INTEGER, c REAL, d TEXT, e INTEGER, f INTEGER, g INTEGER, h INTEGER, i INTEGER)")
        names = ["a", "b", "c", "d", "e", "f", "g", "h", "i"]  # 9 columns: 111 rows a statement
        columns = [np.arange(n), ids, weights, labels, 42, ids, ids, ids, ids]
        _sqlite_insert_many(conn, "t", names, columns, n)
        back = conn.execute(text("SELECT a, b, c, d, e FROM t ORDER BY a")).all()
    assert len(back) == n
    assert [r[0] for r in back] == list(range(n))
    assert [r[1] for r in back] == ids.tolist()
    assert [r[2] for r in back] == weights.tolist()  # doubles kept bit for bit
    assert [r[3] for r in back] == labels.tolist()
    assert all(r[4] == 42 for r in back)


def test_streamed_blocks_store_the_ties_pandas_sums(study, tmp_path, monkeypatch):
    """A file read in several blocks: each block's sums are summed again across blocks."""
    from tracker.ingest import columns

    rng = np.random.default_rng(3)
    n = 3000
    frame = pd.DataFrame({
        "source": [f"org {i}" for i in rng.integers(0, 15, n)],
        "target": [f"org {i}" for i in rng.integers(0, 15, n)],
        "date": [f"{y}-06-01" for y in rng.integers(2018, 2021, n)],
        "kind": rng.choice(["aid", "trade"], n),
        "weight": rng.integers(0, 4, n),
    })
    path = tmp_path / "e.csv"
    frame.to_csv(path, index=False)
    monkeypatch.setattr(columns, "WHOLE_FILE_BYTES", 1000)
    monkeypatch.setattr(columns, "_BLOCK", 8192)
    report = study.import_events(path, source="source", target="target", date="date", relation="kind", weight="weight")
    assert report["rows_read"] == n
    frame = frame[frame["source"] != frame["target"]]
    expected = frame.assign(period=frame["date"].str[:4]).groupby(["period", "kind", "source", "target"])["weight"].sum()
    expected = expected[expected > 0]
    with study.engine.connect() as conn:
        stored = pd.read_sql(
            "SELECT p.label AS period, r.name AS kind, s.label AS source, t.label AS target, ties.value AS weight "
            "FROM ties JOIN periods p ON p.id = ties.period_id JOIN relations r ON r.id = ties.relation_id "
            "JOIN actors s ON s.id = ties.source_id JOIN actors t ON t.id = ties.target_id", conn,
        ).set_index(["period", "kind", "source", "target"])["weight"]
    pd.testing.assert_series_equal(stored.sort_index(), expected.sort_index().astype(float), check_names=False)
    assert study.check() == []


def _folder(tmp_path, parts):
    folder = tmp_path / "many"
    folder.mkdir()
    for i, part in enumerate(parts):
        part.to_parquet(folder / f"p{i}.parquet", index=False)
    return folder


def test_a_parquet_folder_sums_numeric_weights(study, tmp_path):
    parts = [
        pd.DataFrame({"s": ["A", "A", "B", "Z"], "t": ["B", "B", "A", "Z"], "d": ["2019-01-01"] * 4, "w": [1.5, 2.0, 0.0, 4.0]}),
        pd.DataFrame({"s": ["A", "C"], "t": ["B", "A"], "d": ["2019-03-01", "2020-01-01"], "w": [0.25, 3.0]}),
    ]
    report = study.import_events(_folder(tmp_path, parts), source="s", target="t", date="d", weight="w")
    assert report["files"] == 2 and report["self_ties_dropped"] == 1
    # reference: pandas groupby of the same rows without the self-tie
    raw = pd.concat(parts)
    raw = raw[raw["s"] != raw["t"]].assign(y=lambda f: f["d"].str[:4])
    expected = raw.groupby(["y", "s", "t"])["w"].sum()
    snap = study.snapshot("2019")
    assert snap.actors == ("A", "B")  # Z only had a self-tie: not an actor of the study
    assert snap.matrices[0][0, 1] == expected[("2019", "A", "B")] == 3.75
    assert snap.matrices[0][1, 0] == 0  # a weight of 0 observes the pair without a tie
    assert study.store.counts()["actors"] == 3
    assert study.check() == []


@pytest.mark.parametrize("weights, problem, shown", [
    ([1.0, -2.0], "is negative", "-2.0"),
    ([1.0, None], "has no weight", "''"),
    ([1.0, float("inf")], "is not a finite number", "inf"),
])
def test_a_bad_numeric_weight_in_a_folder_names_file_column_and_value(study, tmp_path, weights, problem, shown):
    parts = [pd.DataFrame({"s": ["A"], "t": ["B"], "d": ["2019-01-01"], "w": [1.0]}),
             pd.DataFrame({"s": ["A", "B"], "t": ["B", "C"], "d": ["2019-01-01"] * 2, "w": weights})]
    with pytest.raises(InputError) as caught:
        study.import_events(_folder(tmp_path, parts), source="s", target="t", date="d", weight="w")
    message = str(caught.value)
    assert "p1.parquet" in message and "column 'w'" in message and problem in message and shown in message
    assert study.store.counts()["events"] == 0 and study.store.counts()["actors"] == 0
