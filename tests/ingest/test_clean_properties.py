"""Properties of the fast importer, checked on random inputs (hypothesis).

* ``--errors report``: the rows imported and the rows reported are exactly the
  good and the bad rows the test wrote, each bad row at its editor line;
* a folder of files summed with DuckDB gives the same ties as the same rows
  imported as one file (the reference: the row-by-row importer);
* names: normalising is idempotent and gives equal names for canonically
  equivalent text (Unicode Standard Annex #15);
* likely duplicates: the pairs found are those a brute-force Levenshtein
  distance (the dynamic programme of Wagner & Fischer 1974) finds.
"""

from __future__ import annotations

import csv
import unicodedata

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tracker.api import Study
from tracker.ingest.block import normalise_names
from tracker.names import name_key, similar_names

SETTINGS = settings(max_examples=25, deadline=None, derandomize=True,
                    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])

GOOD_LABELS = ["Port Unit", "Coast Watch", "Fire Brigade", "Relief Board", "Hill Council"]
GOOD_DATES = ["2019-03-01", "2020-07-15", "2021", "2019-12-31T23:00:00"]
BAD = {"source": ["", "   "], "date": ["2019-13-45", "soon", ""], "w": ["-1", "x", "inf", ""]}

row = st.tuples(
    st.one_of(st.sampled_from(GOOD_LABELS), st.sampled_from(BAD["source"])),
    st.sampled_from(GOOD_LABELS),
    st.one_of(st.sampled_from(GOOD_DATES), st.sampled_from(BAD["date"])),
    st.one_of(st.sampled_from(["1", "2.5", "0"]), st.sampled_from(BAD["w"])),
)


@SETTINGS
@given(st.lists(row, min_size=1, max_size=40))
def test_errors_report_splits_good_and_bad_rows(tmp_path_factory, rows):
    tmp = tmp_path_factory.mktemp("rep")
    path = tmp / "e.csv"
    with open(path, "w", newline="") as handle:
        out = csv.writer(handle)
        out.writerow(["source", "target", "date", "w"])
        out.writerows(rows)
    bad_lines = [i + 2 for i, (s, _, d, w) in enumerate(rows) if s in BAD["source"] or d in BAD["date"] or w in BAD["w"]]
    good = [(i + 1, s, t) for i, (s, t, d, w) in enumerate(rows) if i + 2 not in bad_lines and s != t]
    report = tmp / "bad.csv"
    with Study(tmp / "s.db") as study:
        try:
            result = study.import_events(path, source="source", target="target", date="date", weight="w", errors_file=report)
        except Exception as exc:  # every row bad or a self-tie: nothing to import, the study unchanged
            assert not good, exc
            assert study.store.counts()["events"] == 0
        else:
            assert result["rows_rejected"] == len(bad_lines)
            with study.engine.connect() as conn:
                stored = pd.read_sql("SELECT e.row, s.label AS s, t.label AS t FROM events e JOIN actors s ON s.id = e.source_id "
                                     "JOIN actors t ON t.id = e.target_id ORDER BY e.row", conn)
            assert list(stored.itertuples(index=False, name=None)) == good
            assert study.check() == []
    listed = [int(r["line"]) for r in csv.DictReader(report.open())]
    assert listed == bad_lines


event = st.tuples(st.sampled_from(GOOD_LABELS), st.sampled_from(GOOD_LABELS),
                  st.sampled_from(["2018-05-01", "2019-01-01", "2019-11-30", "2020"]), st.integers(0, 3))


def _ties(study) -> dict:
    found = {}
    for period in study.periods():
        snap = study.snapshot(period)
        for rel, matrix in zip(snap.relations, snap.matrices):
            coo = matrix.tocoo()
            for i, j, v in zip(coo.row, coo.col, coo.data):
                found[(period, rel.name, snap.actors[i], snap.actors[j])] = v
    return found


@SETTINGS
@given(st.lists(event, min_size=1, max_size=30), st.integers(1, 3), st.booleans())
def test_folder_sums_equal_the_file_import(tmp_path_factory, events, n_files, undirected):
    tmp = tmp_path_factory.mktemp("fold")
    frame = pd.DataFrame(events, columns=["source", "target", "date", "w"])
    if (frame["source"] == frame["target"]).all():
        return
    frame.to_csv(tmp / "all.csv", index=False)
    folder = tmp / "parts"
    folder.mkdir()
    for k, at in enumerate(np.array_split(np.arange(len(frame)), n_files)):
        frame.iloc[at].to_csv(folder / f"p{k}.csv", index=False)
    options = dict(source="source", target="target", date="date", weight="w", undirected=undirected)
    with Study(tmp / "one.db") as one, Study(tmp / "many.db") as many:
        a = one.import_events(tmp / "all.csv", **options)
        b = many.import_events(folder, **options)
        assert (a["rows_loaded"], a["self_ties_dropped"]) == (b["rows_loaded"], b["self_ties_dropped"])
        assert _ties(one) == _ties(many)
        assert many.check() == []


@given(st.text(max_size=20))
def test_normalising_is_idempotent_and_canonical(text):
    once = normalise_names(pd.Series([text])).iloc[0]
    assert normalise_names(pd.Series([once])).iloc[0] == once
    for form in ("NFD", "NFC"):
        assert normalise_names(pd.Series([unicodedata.normalize(form, text)])).iloc[0] == once
    assert once == once.strip() and "  " not in once


def _levenshtein(a: str, b: str) -> int:
    """Wagner & Fischer (1974) dynamic programme: the brute-force reference."""
    previous = list(range(len(b) + 1))
    for i, ca in enumerate(a, 1):
        current = [i]
        for j, cb in enumerate(b, 1):
            current.append(min(previous[j] + 1, current[j - 1] + 1, previous[j - 1] + (ca != cb)))
        previous = current
    return previous[-1]


@settings(max_examples=40, deadline=None, derandomize=True)
@given(st.lists(st.text("abcAB .-", min_size=1, max_size=8), min_size=1, max_size=12, unique=True))
def test_similar_pairs_match_brute_force(labels):
    got = {(r.name, r.other) for r in similar_names(labels, max_edits=1, min_length=3).itertuples()}
    names = sorted(set(labels))
    keys = {x: name_key(x) for x in names}
    # one representative per key for the spelling pairs, as documented: the first name of each key
    first = {}
    for x in names:
        first.setdefault(keys[x], x)
    expected = set()
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            if keys[a] == keys[b]:
                expected.add((a, b))
            elif (first[keys[a]] == a and first[keys[b]] == b and min(len(keys[a]), len(keys[b])) >= 3
                  and _levenshtein(keys[a], keys[b]) <= 1):
                expected.add((a, b))
    assert got == expected
