"""Property: any valid event table round-trips through import and snapshot unchanged."""

from __future__ import annotations

import unicodedata

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tracker.api import Study

label = st.text(
    alphabet=st.characters(blacklist_categories=("Cs", "Cc", "Zl", "Zp"), blacklist_characters="\x00"),
    min_size=1, max_size=12,
).map(str.strip).filter(bool)

event = st.tuples(
    label, label,
    st.dates(min_value=pd.Timestamp("1990-01-01").date(), max_value=pd.Timestamp("2030-12-31").date()),
    st.sampled_from(["aid", "trade", "dispute"]),
    st.floats(0.0, 1000.0, allow_nan=False).map(lambda x: round(x, 3)),
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(st.lists(event, min_size=1, max_size=60), st.booleans(), st.sampled_from([",", ";", "\t"]))
def test_events_round_trip_through_import_and_snapshot(tmp_path_factory, events, undirected, delimiter):
    tmp = tmp_path_factory.mktemp("rt")
    frame = pd.DataFrame(events, columns=["src", "dst", "when", "kind", "w"])
    frame["when"] = pd.to_datetime(frame["when"]).dt.strftime("%Y-%m-%d")
    path = tmp / "events.csv"
    frame.to_csv(path, index=False, sep=delimiter, encoding="utf-8-sig")
    with Study(tmp / "s.db") as study:
        report = study.import_events(path, source="src", target="dst", date="when", relation="kind", weight="w",
                                     undirected=undirected)
        # Names are stored normalised (NFC, inner whitespace collapsed; Unicode Standard Annex #15).
        for column in ("src", "dst"):
            frame[column] = [" ".join(unicodedata.normalize("NFC", v).split()) for v in frame[column]]
        kept = frame[frame["src"] != frame["dst"]].copy()
        assert report["self_ties_dropped"] == len(frame) - len(kept)
        # Expected ties: pandas groupby on the file's own rows (reference aggregation).
        kept["year"] = kept["when"].str[:4]
        if undirected:
            lo = np.minimum(kept["src"].to_numpy(dtype=object), kept["dst"].to_numpy(dtype=object))
            hi = np.maximum(kept["src"].to_numpy(dtype=object), kept["dst"].to_numpy(dtype=object))
            kept["src"], kept["dst"] = lo, hi
        expected = kept.groupby(["year", "kind", "src", "dst"])["w"].sum()
        expected = expected[expected > 0]
        got = {}
        present = {}
        for year in study.periods():
            snap = study.snapshot(year)
            present[year] = set(snap.actors)
            for rel, mat in zip(snap.relations, snap.matrices):
                coo = mat.tocoo()
                for i, j, v in zip(coo.row, coo.col, coo.data):
                    if undirected and snap.actors[i] > snap.actors[j]:
                        continue
                    got[(year, rel.name, snap.actors[i], snap.actors[j])] = v
        assert set(got) == set(expected.index)
        for key, value in expected.items():
            assert np.isclose(got[key], value)
        for year, part in frame.assign(year=frame["when"].str[:4]).groupby("year"):
            if (part["src"] != part["dst"]).any():
                assert present[year] == set(part.loc[part["src"] != part["dst"], ["src", "dst"]].stack())
