"""Charts: valid Vega-Lite, drawn offline, and showing what the tables say.

Counts drawn by the flow chart are checked against counts made directly from
the memberships with pandas (brute force over the definition: a band from
track a to track b holds the actors in a in one period and in b in the next).
"""

from __future__ import annotations

import json

import altair as alt
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.report.report_data import ACTORS, HOSTILE, make_tables
from tracker.errors import UsageError
from tracker.report import charts
from tracker.report.anonymise import actor_codes, anonymise_tables, anonymise_text


def _values(spec: dict) -> list[dict]:
    """Every inline data row of a spec (altair gathers them under "datasets")."""
    rows = [row for values in spec.get("datasets", {}).values() for row in values]

    def walk(node):
        if isinstance(node, dict):
            data = node.get("data")
            if isinstance(data, dict) and "values" in data:
                rows.extend(data["values"])
            for value in node.values():
                walk(value)
        elif isinstance(node, list):
            for value in node:
                walk(value)

    walk(spec)
    return rows


def _rows(spec: dict, node: dict) -> list[dict]:
    """The data rows of one view of ``spec``."""
    data = node.get("data", spec.get("data"))
    return data["values"] if "values" in data else spec["datasets"][data["name"]]


@pytest.mark.parametrize("name", sorted(charts.CHARTS))
def test_every_chart_is_valid_and_renders(name, report_tables, tmp_path):
    tables, periods, _ = report_tables
    chart = charts.make_chart(name, tables, periods)
    spec = chart.to_dict()  # validates against the Vega-Lite schema
    assert spec["$schema"].endswith(f"{alt.SCHEMA_VERSION}.json")
    assert _values(spec), "charts carry their data inline"
    # Rendering compiles to Vega and runs it, which schema validation alone
    # does not (it catches, e.g., facets whose sizes cannot be resolved).
    out = charts.save_chart(chart, tmp_path / f"{name}.svg")
    assert out.read_text(encoding="utf-8").lstrip().startswith("<svg")


def test_flow_bands_and_bars_count_actors(report_tables):
    tables, periods, _ = report_tables
    m = tables["memberships"]
    spec = charts.flow_chart(m, periods).to_dict()
    layers = {layer["mark"]["type"]: layer for layer in spec["layer"]}
    bars = pd.DataFrame(_rows(spec, layers["rect"]))
    expected = m.groupby(["period", "track"]).size()
    got = bars.assign(height=bars["y1"] - bars["y0"]).set_index(["period", "track_label"])["height"]
    for (period, track), n in expected.items():
        assert got[(str(period), charts.track_label(track))] == pytest.approx(n)

    bands = pd.DataFrame(_rows(spec, layers["area"]))
    widths = bands.groupby("link").agg(
        n=("n", "first"), width=("y2", "first"), y=("y", "first"), flow=("flow", "first"),
        from_period=("from_period", "first"), to_period=("to_period", "first"),
    )
    assert np.allclose(widths["width"] - widths["y"], widths["n"])
    wide = m.pivot(index="actor", columns="period", values="track")
    for a, b in zip(periods[:-1], periods[1:]):
        both = wide[[a, b]].dropna()
        step = widths[(widths["from_period"] == a) & (widths["to_period"] == b)]
        assert step["n"].sum() == len(both)
        assert step.loc[step["flow"] == "moved", "n"].sum() == int((both[a] != both[b]).sum())


def test_flow_bands_stay_inside_their_bars(report_tables):
    tables, periods, _ = report_tables
    spec = charts.flow_chart(tables["memberships"], periods).to_dict()
    layers = {layer["mark"]["type"]: layer for layer in spec["layer"]}
    bars = pd.DataFrame(_rows(spec, layers["rect"]))
    bands = pd.DataFrame(_rows(spec, layers["area"]))
    first = bands.sort_values("x").groupby("link").first()
    for _, band in first.iterrows():
        bar = bars[(bars["period"] == band["from_period"])
                   & (bars["track_label"] == band["from_label"])].iloc[0]
        assert bar["y0"] - 1e-9 <= band["y"] and band["y2"] <= bar["y1"] + 1e-9


def test_charts_follow_the_given_period_order():
    tables, periods, _ = make_tables()
    # a non-lexical order: the charts must not sort period labels themselves
    relabel = {"2019": "wave 9", "2020": "wave 10", "2021": "wave 11", "2022": "wave 12"}
    for frame in tables.values():
        for col in ("period", "from_period", "to_period"):
            if col in frame:
                frame[col] = frame[col].map(relabel)
    order = [relabel[p] for p in periods]
    spec = charts.network_measures_chart(tables["summary"], order).to_dict()
    assert spec["spec"]["encoding"]["x"]["sort"] == order
    flow = charts.flow_chart(tables["memberships"], order).to_dict()
    heads = [layer for layer in flow["layer"] if layer["encoding"].get("text", {}).get("field")
             == "period"][0]
    assert [row["period"] for row in _rows(flow, heads)] == order


def test_matrix_orders_positions_by_track_and_shows_image(report_tables):
    tables, periods, _ = report_tables
    spec = charts.matrix_chart(tables["blocks"], periods, value="image").to_dict()
    inner = spec["vconcat"][0]
    assert inner["facet"]["sort"] == periods
    layer = inner["spec"]["layer"][0]
    assert layer["encoding"]["y"]["sort"] == {"field": "from_key", "op": "min"}
    assert layer["encoding"]["color"]["field"] == "image"
    rows = pd.DataFrame(_rows(spec, inner))
    # positions of a lower track sort first whatever their position number
    t1 = rows[rows["from_label"].str.startswith("T1")]["from_key"]
    t2 = rows[rows["from_label"].str.startswith("T2")]["from_key"]
    assert t1.max() < t2.min()
    with pytest.raises(UsageError):
        charts.matrix_chart(tables["blocks"], periods, value="colour")


def test_block_density_pools_blocks_of_one_pair_of_tracks():
    # two positions aligned to track 1 in one period: density of the pair of
    # tracks = (ties) / (possible) summed over the blocks, by definition
    # (Wasserman & Faust 1994, sec. 10.2); hand-computed here
    blocks = pd.DataFrame(
        dict(period=["p"] * 4, relation=["r"] * 4, from_position=[1, 1, 2, 2],
             to_position=[1, 2, 1, 2], from_track=[1, 1, 1, 1], to_track=[1, 1, 1, 1],
             ties=[2, 1, 0, 3], possible=[6, 9, 9, 6], density=[2 / 6, 1 / 9, 0, 3 / 6],
             image=[1, 1, 0, 1])
    )
    spec = charts.block_density_chart(blocks, ["p"]).to_dict()
    (row,) = _rows(spec, spec)
    assert row["density"] == pytest.approx(6 / 30)
    assert row["ties"] == 6 and row["possible"] == 30


def test_network_measures_share_of_isolates(report_tables):
    tables, periods, _ = report_tables
    s = tables["summary"]
    spec = charts.network_measures_chart(s, periods).to_dict()
    rows = pd.DataFrame(_rows(spec, spec))
    share = rows[rows["measure"] == "Share with no tie"].set_index("period")["value"]
    for rec in s.to_dict("records"):
        assert share[rec["period"]] == pytest.approx(rec["isolates"] / rec["actors"])


def test_trajectory_has_a_dropdown_of_every_actor(report_tables):
    tables, periods, _ = report_tables
    spec = charts.trajectory_chart(tables["memberships"], periods, actor="Tide Lab").to_dict()
    (param,) = spec["params"]
    assert param["bind"]["input"] == "select"
    assert sorted(param["bind"]["options"]) == sorted(ACTORS)
    assert param["value"] == "Tide Lab"
    # the filter compares a field with the parameter; no label enters an expression
    filters = [t["filter"] for layer in spec["layer"] for t in layer.get("transform", [])]
    filters += [t["filter"] for t in spec.get("transform", [])]
    assert filters and all("actor_pick" in f and HOSTILE not in f for f in filters)


def test_timeline_groups_actors_by_starting_track(report_tables):
    tables, periods, _ = report_tables
    spec = charts.timeline_chart(tables["memberships"], periods).to_dict()
    order = spec["encoding"]["y"]["sort"]
    m = tables["memberships"]
    start = m.sort_values("period").groupby("actor")["track"].first()
    ranks = [0 if start[a] == 1 else 1 if start[a] == 2 else 2 for a in order]
    assert ranks == sorted(ranks)  # track 1 starters, then track 2, then no tie


def test_fit_and_structure_charts(report_tables):
    tables, periods, _ = report_tables
    fit = charts.fit_chart(tables["diagnostics"], tables["permutation"], periods).to_dict()
    assert "hconcat" in fit
    values = _values(fit)
    assert {"chosen", "tried"} <= {v.get("picked") for v in values}
    p = {v["period"]: v["verdict"] for v in values if "verdict" in v}
    for rec in tables["permutation"].to_dict("records"):
        assert (p[rec["period"]] == "better than random") == (rec["p_value"] < 0.05)
    only_perm = charts.fit_chart(None, tables["permutation"]).to_dict()
    assert "hconcat" not in only_perm
    structure = charts.structure_chart(tables["structures"], periods).to_dict()
    rows = _rows(structure, structure)
    assert all((r["significant"] == "yes") == (r["p_value"] < 0.05) for r in rows)


def test_empty_tables_give_a_message_not_an_error():
    empty = pd.DataFrame(columns=["period", "actor", "track"])
    for fn in (charts.flow_chart, charts.timeline_chart, charts.trajectory_chart):
        spec = fn(empty, ["a"]).to_dict()
        assert _rows(spec, spec)[0]["message"]


def test_track_names_and_colours_are_stable():
    names = {2: "harbour group"}
    assert charts.track_label(2, names) == "harbour group"
    assert charts.track_label(0) == charts.NO_TIE_LABEL
    # track 3 gets the same colour whether or not tracks 1 and 2 are shown
    a = charts._track_scale([3], None).to_dict()
    b = charts._track_scale([0, 1, 2, 3], None).to_dict()
    assert a["range"][0] == b["range"][b["domain"].index("T3")]


def test_no_row_limit_and_caller_settings_untouched():
    n_actors, n_periods = 260, 20  # 5200 rows, over altair's default limit of 5000
    periods = [str(1990 + i) for i in range(n_periods)]
    rng = np.random.default_rng(0)
    m = pd.DataFrame(
        {
            "period": np.repeat(periods, n_actors),
            "actor": np.tile([f"a{i}" for i in range(n_actors)], n_periods),
            "position": 1,
            "track": rng.integers(0, 4, n_actors * n_periods),
            "isolate": False,
            "confidence": 1.0,
        }
    )
    before = alt.data_transformers.active
    spec = charts.timeline_chart(m, periods).to_dict()
    assert len(_rows(spec, spec)) == len(m)
    assert alt.data_transformers.active == before


def test_anonymised_tables_leave_no_label_in_charts(report_tables):
    tables, periods, _ = report_tables
    anon, codes = anonymise_tables(tables)
    assert set(codes) == set(ACTORS)
    for name in charts.CHARTS:
        text = json.dumps(charts.make_chart(name, anon, periods).to_dict(), ensure_ascii=False)
        for actor in ACTORS:
            assert actor not in text, (name, actor)
    timeline = json.dumps(charts.make_chart("timeline", anon, periods).to_dict())
    assert all(code in timeline for code in codes.values())


def test_anonymise_text_replaces_whole_labels_only():
    codes = {"Port": "A001", "Port Office": "A002"}
    text = "Port Office and Port met; the Report was late; Portside too."
    assert anonymise_text(text, codes) == "A002 and A001 met; the Report was late; Portside too."


@settings(max_examples=60, deadline=None)
@given(st.lists(st.text(min_size=1, max_size=12), max_size=40), st.integers(0, 2**32 - 1))
def test_actor_codes_are_a_stable_bijection(labels, seed):
    codes = actor_codes(labels, seed=seed)
    distinct = {str(x) for x in labels}
    assert set(codes) == distinct
    assert len(set(codes.values())) == len(distinct)
    assert all(c.startswith("A") and c[1:].isdigit() for c in codes.values())
    assert actor_codes(list(reversed(labels)), seed=seed) == codes


@pytest.mark.parametrize("suffix", [".png", ".svg", ".json"])
def test_save_chart_formats(report_tables, tmp_path, suffix):
    tables, periods, _ = report_tables
    chart = charts.make_chart("flow", tables, periods)
    path = charts.save_chart(chart, tmp_path / f"flow{suffix}")
    data = path.read_bytes()
    if suffix == ".png":
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
    elif suffix == ".svg":
        assert data.lstrip().startswith(b"<svg") and b"</svg>" in data
    else:
        assert json.loads(data)["layer"]


def test_save_chart_and_make_chart_refuse_unknown_names(report_tables, tmp_path):
    tables, periods, _ = report_tables
    chart = charts.make_chart("measures", tables, periods)
    with pytest.raises(UsageError, match=r"\.png, \.svg or \.json"):
        charts.save_chart(chart, tmp_path / "chart.gif")
    with pytest.raises(UsageError, match="unknown chart"):
        charts.make_chart("pie", tables, periods)


def test_per_actor_charts_keep_the_actors_who_moved_most():
    # Brute force over the definition: with more actors than the limit, the
    # timeline rows and the trajectory choices are the actors with the most
    # changes of track (counted here with pandas), and the title says so.
    periods = [str(2000 + i) for i in range(6)]
    rng = np.random.default_rng(1)
    n = charts.ACTOR_LIMIT + 50
    tracks = np.tile(rng.integers(1, 4, n), (6, 1))
    movers = rng.choice(n, 40, replace=False)
    tracks[3:, movers] = tracks[3:, movers] % 3 + 1  # 40 actors move once
    m = pd.DataFrame({"period": np.repeat(periods, n), "actor": np.tile([f"a{i:03d}" for i in range(n)], 6),
                      "position": 1, "track": tracks.ravel(), "isolate": False, "confidence": 1.0})
    timeline = charts.timeline_chart(m, periods).to_dict()
    shown = set(r["actor"] for r in _rows(timeline, timeline))
    assert len(shown) == charts.ACTOR_LIMIT
    assert {f"a{i:03d}" for i in movers} <= shown
    assert f"{charts.ACTOR_LIMIT:,} of {n:,} actors" in timeline["title"]
    trajectory = charts.trajectory_chart(m, periods, actor="a349").to_dict()
    (param,) = trajectory["params"]
    assert "a349" in param["bind"]["options"] and len(param["bind"]["options"]) <= charts.ACTOR_LIMIT + 1
    assert {f"a{i:03d}" for i in movers} <= set(param["bind"]["options"])
