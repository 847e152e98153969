"""Importing events and rosters: formats, mappings, refusals, and the store left unchanged on error."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tests.conftest import table_dump
from tracker.errors import InputError, RoletrailError, StoreError, UsageError

ROWS = [
    ("Harbour Office", "Coast Watch", "2019-03-01", "exercise"),
    ("Coast Watch", "Harbour Office", "2019-05-01", "exercise"),
    ("Coast Watch", "Fire Brigade", "2019-06-01", "aid"),
    ("Fire Brigade", "Fire Brigade", "2019-06-02", "aid"),
    ("Fire Brigade", "Harbour Office", "2020-01-01", "aid"),
    ("Port Police", "Harbour Office", "2020", "exercise"),
]


def _import(study, path, **kw):
    args = dict(source="source", target="target", date="date", relation="kind")
    args.update(kw)
    return study.import_events(path, **args)


def test_import_counts_self_ties_and_builds_periods(study, write_csv):
    report = _import(study, write_csv(ROWS))
    assert report["rows_read"] == 6 and report["rows_loaded"] == 5 and report["self_ties_dropped"] == 1
    assert study.periods() == ["2019", "2020"]
    snap = study.snapshot("2019", ["exercise"])
    assert snap.actors == ("Coast Watch", "Fire Brigade", "Harbour Office")
    dense = snap.matrix("exercise").toarray()
    assert dense[0, 2] == 1 and dense[2, 0] == 1 and dense.sum() == 2


def test_bom_semicolon_and_tab_files_read_alike(new_db, write_csv):
    from tracker.api import Study

    results = []
    for i, (delimiter, bom) in enumerate(((",", False), (";", True), ("\t", False))):
        path = write_csv(ROWS, name=f"e{i}.csv", delimiter=delimiter, bom=bom)
        with Study(new_db(f"s{i}.db")) as s:
            _import(s, path)
            results.append(s.summary())
    pd.testing.assert_frame_equal(results[0], results[1])
    pd.testing.assert_frame_equal(results[0], results[2])


def test_parquet_reads_like_csv(study, tmp_path, write_csv):
    frame = pd.DataFrame(ROWS, columns=["source", "target", "date", "kind"])
    frame["w"] = [1.0, 2.0, 0.5, 1.0, 3.0, 1.0]
    frame.to_parquet(tmp_path / "e.parquet")
    _import(study, tmp_path / "e.parquet", weight="w")
    assert study.snapshot("2020", ["aid"]).matrix("aid").sum() == 3.0


def test_weights_sum_and_zero_weight_observes_without_tie(study, write_csv):
    rows = [("a", "b", "2019", "2.5"), ("a", "b", "2019", "1.5"), ("c", "a", "2019", "0")]
    _import(study, write_csv(rows, header=("source", "target", "date", "w")), weight="w", relation=None, relation_name="rating")
    snap = study.snapshot("2019")
    assert snap.actors == ("a", "b", "c")  # c took part (rating 0), so it is present
    assert snap.matrix("rating").toarray().tolist() == [[0, 4.0, 0], [0, 0, 0], [0, 0, 0]]


def test_undirected_pairs_are_counted_once(study, write_csv):
    rows = [("a", "b", "2019", "x"), ("b", "a", "2019", "x"), ("a", "c", "2019", "x")]
    _import(study, write_csv(rows), undirected=True)
    summary = study.summary().iloc[0]
    assert summary["ties"] == 2 and summary["density"] == pytest.approx(2 / 3)
    mat = study.snapshot("2019").matrix("x").toarray()
    assert (mat == mat.T).all() and mat[0, 1] == 2


def test_period_column_and_quarters(new_db, write_csv):
    from tracker.api import Study

    rows = [("a", "b", "wave 2"), ("b", "c", "wave 1"), ("c", "a", "wave 10")]
    with Study(new_db("w.db")) as s:
        s.import_events(write_csv(rows, header=("s", "t", "wave")), source="s", target="t", period_column="wave")
        assert s.periods() == ["wave 1", "wave 2", "wave 10"]
    rows = [("a", "b", "2019-02-01", "x"), ("b", "c", "2019-11-30", "x")]
    with Study(new_db("q.db")) as s:
        _import(s, write_csv(rows, name="q.csv"), period="quarter")
        assert s.periods() == ["2019Q1", "2019Q4"]


def test_same_content_refused_then_replaced_atomically(study, write_csv):
    path = write_csv(ROWS)
    _import(study, path)
    before = table_dump(study)
    with pytest.raises(StoreError, match="already imported"):
        _import(study, path)
    assert table_dump(study) == before
    report = _import(study, path, replace=True)
    assert report["replaced"] == [1]
    assert len(study.batches()) == 1 and study.store.counts()["events"] == 5


def test_replace_by_file_name_swaps_corrected_file(study, write_csv):
    _import(study, write_csv(ROWS))
    fixed = [r for r in ROWS if r[0] != "Port Police"]
    _import(study, write_csv(fixed), replace=True)
    assert study.store.counts()["events"] == 4
    assert "Port Police" not in study.snapshot("2020").actors


@pytest.mark.parametrize(
    "rows, kw, message",
    [
        ([("a", "b", "2019-13-45", "x")], {}, r"events\.csv, line 2, column 'date': is not a date .*'2019-13-45'"),
        ([("a", "b", "2019", "x"), ("", "b", "2019", "x")], {}, r"line 3, column 'source': has no actor label"),
        ([("a", "b", "2019", "-1")], {"weight": "kind", "relation": None}, r"line 2, column 'kind': is negative"),
        ([("a", "b", "2019", "nan")], {"weight": "kind", "relation": None}, r"column 'kind': is not a (finite )?number"),
        ([("a", "b", "2019", "inf")], {"weight": "kind", "relation": None}, r"is not a finite number"),
        ([("a", "b", "2019", "1e300")], {"weight": "kind", "relation": None}, r"is larger than"),
        ([("a", "b", "2019", "x")], {"target": "to"}, r"has no column 'to' \(given by --target\).*'source', 'target'"),
        ([("a", "b", "3019", "x")], {}, r"not a date"),
    ],
)
def test_bad_rows_name_file_row_column_value_and_leave_study_unchanged(study, write_csv, rows, kw, message):
    _import(study, write_csv(ROWS, name="good.csv"))
    before = table_dump(study)
    with pytest.raises(RoletrailError, match=message):
        _import(study, write_csv(rows), **kw)
    assert table_dump(study) == before


def test_error_in_a_late_chunk_rolls_back_the_whole_file(study, tmp_path, monkeypatch):
    import tracker.ingest.reader as reader

    monkeypatch.setattr(reader, "CHUNK_ROWS", 50)
    path = tmp_path / "big.csv"
    lines = ["source,target,date,kind"] + [f"a{i},b{i},2019-01-01,x" for i in range(400)] + ["a,b,nope,x"]
    path.write_text("\n".join(lines) + "\n")
    before = table_dump(study)
    with pytest.raises(InputError, match="line 402"):
        _import(study, path)
    assert table_dump(study) == before


@pytest.mark.parametrize(
    "content, message",
    [
        (b"", "is empty"),
        (b"\xef\xbb\xbf\n\n", "is empty"),
        (b"source,target,date,kind\n", "no data rows"),
        (b"source,target,date,kind\na,\xff\xfeb,2019,x\n", "not valid UTF-8"),
        (b"\xff\xfes\x00o\x00", "UTF-16"),
        (b"source,source,date,kind\na,b,2019,x\n", "two columns named 'source'"),
        (b'source,target,date,kind\n"a,b,2019,x\nc,d,2019,x\n', "cannot be read as CSV|has no date|not a date"),
    ],
)
def test_unreadable_files_give_one_line_errors(study, tmp_path, content, message):
    path = tmp_path / "bad.csv"
    path.write_bytes(content)
    with pytest.raises(RoletrailError, match=message) as info:
        _import(study, path)
    assert "\n" not in str(info.value)
    assert study.store.counts()["events"] == 0


def test_missing_file(study, tmp_path):
    with pytest.raises(InputError, match="file not found"):
        _import(study, tmp_path / "nope.csv")


def test_blank_lines_keep_row_numbers(study, tmp_path):
    path = tmp_path / "gaps.csv"
    path.write_text("source,target,date,kind\na,b,2019,x\n\nc,d,20x9,x\n")
    with pytest.raises(InputError, match="line 4"):
        _import(study, path)


def test_period_scheme_is_study_wide(study, write_csv):
    _import(study, write_csv(ROWS))
    with pytest.raises(UsageError, match="cuts periods by year"):
        _import(study, write_csv([("a", "b", "2021-01-01", "x")], name="q.csv"), period="quarter")


def test_relation_direction_must_agree(study, write_csv):
    _import(study, write_csv(ROWS))
    with pytest.raises(UsageError, match="is directed"):
        _import(study, write_csv([("a", "b", "2021", "aid")], name="u.csv"), undirected=True)


def test_roster_tells_absent_from_isolated(study, write_csv):
    _import(study, write_csv(ROWS))
    roster = write_csv(
        [("Harbour Office", "2000", "", "port"), ("Coast Watch", "", "", "coast"),
         ("Lighthouse Trust", "2020", "", "heritage"), ("Fire Brigade", "", "2019", "fire")],
        name="actors.csv", header=("actor", "from", "until", "sector"),
    )
    study.import_actors(roster, actor="actor", first="from", last="until")
    # Lighthouse Trust exists from 2020: absent in 2019, present (isolated) in 2020.
    assert "Lighthouse Trust" not in study.snapshot("2019").actors
    snap = study.snapshot("2020")
    assert "Lighthouse Trust" in snap.actors
    assert not snap.tied()[snap.actors.index("Lighthouse Trust")]
    # Fire Brigade's roster ends in 2019 but it has a 2020 event: the data win.
    assert "Fire Brigade" in snap.actors
    actors = study.actors().set_index("actor")
    assert actors.loc["Lighthouse Trust", "attributes"] == '{"sector": "heritage"}'


def test_roster_errors(study, write_csv):
    bad = write_csv([("x", "2020", "2019")], name="r.csv", header=("actor", "from", "until"))
    with pytest.raises(InputError, match="line 2, column 'from': comes after the last period"):
        study.import_actors(bad, first="from", last="until")


def test_alias_merges_spellings_and_rebuilds_ties(study, write_csv):
    rows = [("Coast Watch", "Harbour Office", "2019", "x"), ("Coastwatch", "Harbour Office", "2019", "x"),
            ("Coastwatch", "Coast Watch", "2019", "x")]
    _import(study, write_csv(rows))
    result = study.alias("Coastwatch", "Coast Watch")
    assert result["merged"]
    snap = study.snapshot("2019")
    assert snap.actors == ("Coast Watch", "Harbour Office")
    assert snap.matrix("x").toarray()[0, 1] == 2  # both spellings' events, self-tie dropped
    # new imports under the old spelling land on the same actor
    _import(study, write_csv([("Coastwatch", "Harbour Office", "2020", "x")], name="later.csv"))
    assert study.snapshot("2020").actors == ("Coast Watch", "Harbour Office")


def test_recut_without_reimport(study, write_csv):
    rows = [("a", "b", "2019-02-01", "x"), ("b", "c", "2020-11-30", "x"), ("c", "d", "2021-06-30", "x")]
    _import(study, write_csv(rows))
    result = study.recut("2y")
    assert study.periods() == ["2018-2019", "2020-2021"] and result["events"] == 3
    assert study.snapshot("2020-2021").matrix("x").nnz == 2
    study.recut("year")
    assert study.periods() == ["2019", "2020", "2021"]
