"""Whole-network measures of imported data against networkx's own functions."""

from __future__ import annotations

import networkx as nx
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tracker.api import Study

edges = st.lists(st.tuples(st.integers(0, 7), st.integers(0, 7), st.sampled_from(["2019", "2020"])), min_size=1, max_size=40)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(rows=edges, undirected=st.booleans())
def test_density_reciprocity_isolates_match_networkx(tmp_path_factory, rows, undirected):
    tmp = tmp_path_factory.mktemp("m")
    frame = pd.DataFrame(rows, columns=["s", "t", "year"]).astype(str)
    frame["s"] = "actor " + frame["s"]
    frame["t"] = "actor " + frame["t"]
    frame.to_csv(tmp / "e.csv", index=False)
    if (frame["s"] == frame["t"]).all():
        return  # only self-ties: nothing to import
    with Study(tmp / "s.db") as study:
        study.import_events(tmp / "e.csv", source="s", target="t", date="year", relation_name="x", undirected=undirected)
        summary = study.summary().set_index("period")
    # Self-ties are dropped on import, so a year with nothing else has no period.
    kept = frame[frame["s"] != frame["t"]]
    assert sorted(summary.index.unique()) == sorted(kept["year"].unique())
    for year, part in kept.groupby("year"):
        # Reference graph built straight from the file rows, not from our snapshot.
        graph = nx.Graph() if undirected else nx.DiGraph()
        graph.add_nodes_from(pd.unique(pd.concat([part["s"], part["t"]])))
        graph.add_edges_from(zip(part["s"], part["t"]))
        row = summary.loc[year]
        assert row["actors"] == graph.number_of_nodes()
        assert row["ties"] == graph.number_of_edges()
        assert row["density"] == pytest.approx(nx.density(graph))  # networkx.density
        assert row["isolates"] == nx.number_of_isolates(graph)  # networkx.number_of_isolates
        if not undirected and graph.number_of_edges():
            assert row["reciprocity"] == pytest.approx(nx.reciprocity(graph))  # networkx.reciprocity


def test_snapshot_to_networkx_keeps_isolates_and_weights():
    import numpy as np

    from tracker.snapshot import Relation, build_snapshot

    snap = build_snapshot("p", ["a", "b", "c"], [Relation("r", False)], [(np.array([0]), np.array([1]), np.array([2.0]))])
    graph = snap.to_networkx()
    assert isinstance(graph, nx.Graph) and not graph.is_directed()
    assert set(graph.nodes) == {"a", "b", "c"} and graph["a"]["b"]["weight"] == 2.0
