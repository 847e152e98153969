"""align / tracks / name-track / moves / transitions / export through the CLI, reading the study back."""

from __future__ import annotations

import io
import json

import networkx as nx
import numpy as np
import pandas as pd
from click.testing import CliRunner

from tracker.api import Study
from tracker.cli import main


def _run(db, *args):
    result = CliRunner().invoke(main, ["--db", str(db), *args], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result.output


def moving_events(path, years=(2016, 2017, 2018, 2019), mover="agency 05", move_year=2018, seed=1):
    """Two positions with distinct roles (a dense core sending to a periphery that sends nothing back);
    one peripheral agency joins the core from ``move_year`` on."""
    rng = np.random.default_rng(seed)
    core = [f"agency {i:02d}" for i in range(5)]
    edge = [f"agency {i:02d}" for i in range(5, 12)]
    rows = []
    for year in years:
        c = core + ([mover] if year >= move_year else [])
        e = [a for a in edge if a not in c]
        for a in c:
            for b in c + e:
                if a != b:
                    rows.append((a, b, f"{year}-{rng.integers(1, 13):02d}-01"))
    pd.DataFrame(rows, columns=["a", "b", "d"]).to_csv(path, index=False)


def test_align_finds_the_planted_move_and_keeps_earlier_tracks(tmp_path, new_db):
    moving_events(tmp_path / "early.csv", years=(2016, 2017, 2018))
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "early.csv"), "--source", "a", "--target", "b", "--date", "d")
    # incremental alignment of a per-period fit (a dynamic fit is refitted and re-aligned whole)
    _run(db, "fit", "--method", "structural", "--positions", "2", "--draws", "0")
    out = _run(db, "align", "--draws", "10")
    assert "3 periods aligned (3 new)" in out
    moves = pd.read_csv(io.StringIO(_run(db, "moves", "--format", "csv")))
    assert {"actor", "from_period", "to_period", "from_track", "to_track", "confidence"} <= set(moves.columns)
    assert moves[["actor", "from_period", "to_period"]].values.tolist() == [["agency 05", 2017, 2018]]
    assert moves["confidence"].between(0, 1).all() and moves["confidence"].iloc[0] >= 0.5
    _run(db, "name-track", str(moves["to_track"].iloc[0]), "coordinating core")
    before = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))

    # next year's events arrive: import, fit that period, align again
    moving_events(tmp_path / "later.csv", years=(2019,))
    _run(db, "import", str(tmp_path / "later.csv"), "--source", "a", "--target", "b", "--date", "d")
    _run(db, "fit", "--method", "structural", "--positions", "2", "--draws", "0", "--periods", "2019")
    assert "4 periods aligned (1 new)" in _run(db, "align", "--draws", "0")
    after = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    earlier = after[after["period"] < 2019].reset_index(drop=True)
    pd.testing.assert_frame_equal(earlier[["period", "actor", "position", "track"]],
                                  before[["period", "actor", "position", "track"]])
    tracks = pd.read_csv(io.StringIO(_run(db, "tracks", "--format", "csv")))
    assert "coordinating core" in set(tracks["name"])
    # the core track continues into 2019 with the mover in it
    core = tracks.loc[tracks["name"] == "coordinating core", "track"].iloc[0]
    assert after.loc[(after["period"] == 2019) & (after["actor"] == "agency 05"), "track"].iloc[0] == core


def test_names_survive_a_rebuild_and_transitions_add_up(tmp_path, new_db):
    moving_events(tmp_path / "e.csv")
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "e.csv"), "--source", "a", "--target", "b", "--date", "d")
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    _run(db, "name-track", "1", "senders")
    _run(db, "align", "--rebuild", "--draws", "0")
    tracks = json.loads(_run(db, "tracks", "--format", "json"))
    assert any(t["name"] == "senders" for t in tracks)
    traj = pd.read_csv(io.StringIO(_run(db, "export", "trajectories"))).set_index("actor")
    assert traj.loc["agency 05", "entry"] == 2016 and traj.loc["agency 05", "exit"] == 2019
    assert traj.loc["agency 05", "2017"] != traj.loc["agency 05", "2018"]  # the planted move
    mobility = pd.read_csv(io.StringIO(_run(db, "export", "mobility")))
    assert mobility["movers"].sum() == 1
    trans = pd.read_csv(io.StringIO(_run(db, "transitions", "--format", "csv")))
    per_step = trans[trans["from_period"] != "all"]
    # row shares of each transition matrix sum to 1; counts against pandas.crosstab of memberships
    sums = per_step.groupby(["from_period", "to_period", "from_track"])["share"].sum()
    assert np.allclose(sums, 1.0)
    members = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    wide = members.pivot(index="actor", columns="period", values="track")
    reference = pd.crosstab(wide[2016], wide[2017])
    step = per_step[(per_step["from_period"] == "2016") & (per_step["to_period"] == "2017")]
    for row in step.itertuples():
        assert reference.loc[row.from_track, row.to_track] == row.count


def test_graphml_has_position_and_track(tmp_path, new_db):
    moving_events(tmp_path / "e.csv")
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "e.csv"), "--source", "a", "--target", "b", "--date", "d")
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    _run(db, "export", "graphml", "-o", str(tmp_path / "g"))
    graph = nx.read_graphml(tmp_path / "g" / "2018.graphml")  # networkx's GraphML reader
    members = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    m2018 = members[members["period"] == 2018].set_index("actor")
    assert set(graph.nodes) == set(m2018.index)
    for node, data in graph.nodes(data=True):
        assert data["position"] == m2018.loc[node, "position"] and data["track"] == m2018.loc[node, "track"]
    with Study(db, create=False) as study:
        assert graph.number_of_edges() == study.snapshot("2018").matrix("tie").nnz


def test_moves_before_align_is_a_clear_error(tmp_path, new_db):
    moving_events(tmp_path / "e.csv")
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "e.csv"), "--source", "a", "--target", "b", "--date", "d")
    _run(db, "fit", "--positions", "2", "--draws", "0")
    for args in (["moves"], ["report", "-o", str(tmp_path / "r.html")], ["chart", "flow", "-o", str(tmp_path / "f.svg")]):
        result = CliRunner().invoke(main, ["--db", str(db), *args])
        assert result.exit_code == 2 and "run roletrail align first" in result.output, result.output


def test_joint_sbm_fit_gives_posterior_confidence(tmp_path, new_db):
    moving_events(tmp_path / "e.csv")
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "e.csv"), "--source", "a", "--target", "b", "--date", "d")
    result = CliRunner().invoke(main, ["--db", str(db), "fit", "--method", "sbm", "--joint", "--positions", "2",
                                       "--model", "bernoulli", "--draws", "0"], catch_exceptions=False)
    assert result.exit_code == 0 and "deprecated" in result.output and "--method dynamic" in result.output
    with Study(db, create=False) as study:
        assert study.fit_info()["params"]["method"] == "dynamic"  # what actually ran
        assert study.fit_info()["params"]["options"] == {"model": "bernoulli"}
    members = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    assert members["confidence"].between(0, 1).all()
    _run(db, "align")
    moves = pd.read_csv(io.StringIO(_run(db, "moves", "--format", "csv")))
    assert moves[["actor", "to_period"]].values.tolist() == [["agency 05", 2018]]
    assert 0.5 <= moves["confidence"].iloc[0] <= 1


def test_report_chart_and_demo(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    out = CliRunner().invoke(main, ["demo", "--out", str(tmp_path / "demo"), "--draws", "2"], catch_exceptions=False)
    assert out.exit_code == 0, out.output
    report = tmp_path / "demo" / "coastal-agencies-report.html"
    assert report.exists() and "report:" in out.output
    html = report.read_text()
    assert "<script src=" not in html and "vega" in html.lower()
    db = tmp_path / "demo" / "coastal-agencies.db"
    _run(db, "report", "-o", str(tmp_path / "anon.html"), "--anonymise", "--structure-draws", "9")
    anon = (tmp_path / "anon.html").read_text()
    with Study(db, create=False) as study:
        labels = study.actors()["actor"].tolist()
    assert not any(label in anon for label in labels)
    for suffix in ("svg", "json", "png"):
        _run(db, "chart", "flow", "-o", str(tmp_path / f"flow.{suffix}"))
    assert (tmp_path / "flow.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert json.loads((tmp_path / "flow.json").read_text())["$schema"].startswith("https://vega.github.io/schema/vega-lite")
    bad = CliRunner().invoke(main, ["--db", str(db), "chart", "pie", "-o", str(tmp_path / "x.png")])
    assert bad.exit_code == 2 and "unknown chart" in bad.output
