"""An analyst's day without surprises, through the CLI runner, reading the study back.

Safe commands (option table, degenerate requests, closed pipes, recut and
alias merges that keep or refuse), readable output (show, --positions auto,
integers, nested JSON, track names, fits), compare, and safe data out (CSV
injection, anonymised report with a key file).
"""

from __future__ import annotations

import io
import json
import re
from itertools import combinations

import click
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy.special import comb

from tests.cli.test_cli_fit import planted_events
from tests.cli.test_cli_tracks import moving_events
from tests.conftest import table_dump
from tracker.api import Study
from tracker.blockmodel.positions import METHOD_OPTIONS
from tracker.cli import main


def _invoke(db, *args):
    return CliRunner().invoke(main, ["--db", str(db), *args])


def _run(db, *args):
    result = _invoke(db, *args)
    assert result.exit_code == 0, result.output
    return result.output


def _dump(db):
    with Study(db) as study:
        return table_dump(study)


@pytest.fixture
def planted(tmp_path, new_db):
    truth = planted_events(tmp_path / "events.csv")
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "events.csv"), "--source", "a", "--target", "b", "--date", "d", "--relation", "kind")
    return db, truth, tmp_path


@pytest.fixture
def moving(tmp_path, new_db):
    moving_events(tmp_path / "e.csv")
    db = new_db("m.db")
    _run(db, "import", str(tmp_path / "e.csv"), "--source", "a", "--target", "b", "--date", "d")
    return db, tmp_path


# ---------------------------------------------------------------- option table

#: Every option of ``fit`` that depends on the method, with a valid value (the --help text lists them).
_METHOD_FLAGS = [
    ("--linkage", "average"), ("--linkage", "ward"), ("--measure", "correlation"), ("--restarts", "2"),
    ("--exact", None), ("--degree-corrected", None), ("--model", "bernoulli"), ("--joint", None),
    ("--smooth", "1.5"), ("--k-range", "2-3"), ("--alpha", "0.2"), ("--cut", "1"),
]


@pytest.mark.parametrize("method", ["structural", "concor", "regular", "optimize", "sbm"])
def test_every_option_with_every_method_is_a_result_or_a_usage_error(planted, method):
    db, _, _ = planted
    combos = [[flag] + ([value] if value else []) for flag, value in _METHOD_FLAGS]
    combos += [a + b for a, b in combinations(combos, 2) if a[0] != b[0]][:: 7]  # a spread of pairs
    combos += [["--criterion", c] for c in ("one-block", "density", "max-value", "mean-value")]
    combos += [["--criterion", "density", "--alpha", "0.2"], ["--criterion", "max-value", "--cut", "1"],
               ["--positions", "auto", "--k-range", "2-3"], ["--smooth", "off"], ["--linkage", "ward", "--measure", "correlation"],
               ["--model", "bernoulli", "--degree-corrected"], ["--joint", "--smooth", "2"], ["--smooth", "auto"]]
    # smoothing off in the base (an option later in the line wins) keeps the walk fast
    base = ["fit", "--method", method, "--draws", "0", "--smooth", "off", "--periods", "2019"]
    base += ["--restarts", "2"] if method in ("optimize", "sbm") else []
    base += ["--positions", "3"]
    accepted = 0
    for extra in combos:
        args = base + extra
        if "--exact" in extra or "--k-range" in extra:
            args = [a if a != "3" else "auto" for a in args]
        if "--positions" in extra:
            args = base[:-2] + extra
        result = _invoke(db, *args)
        assert "internal error" not in result.output, (args, result.output)
        assert result.exit_code in (0, 2), (args, result.output)
        if result.exit_code == 2:
            # the refusal names one of the options given
            assert any(flag in result.output for flag in extra if flag.startswith("--")), (args, result.output)
        else:
            accepted += 1
    # read back: every stored fit only holds options its method declares
    with Study(db) as study:
        fits = study.fits()
    for params in fits["params"]:
        params = json.loads(params)
        assert set(params["options"]) <= set(METHOD_OPTIONS[params["method"]])
    assert len(fits) >= 1 and accepted >= 1


@pytest.mark.parametrize("method, args, flag", [
    ("structural", ["--restarts", "3"], "--restarts"),
    ("concor", ["--model", "poisson"], "--model"),
    ("sbm", ["--linkage", "average"], "--linkage"),
    ("optimize", ["--exact"], "--exact"),
    ("regular", ["--exact", "--positions", "4"], "--exact"),
    ("structural", ["--k-range", "2-5"], "--k-range"),
    ("structural", ["--positions", "10"], "--positions"),
    ("structural", ["--alpha", "0.3"], "--alpha"),
    ("regular", ["--smooth", "2"], "--smooth"),
    ("dynamic", ["--smooth", "off"], "--smooth"),
    ("sbm", ["--restarts", "0"], "--restarts"),
])
def test_refusals_name_the_option_and_leave_the_study_unchanged(planted, method, args, flag):
    db, _, _ = planted
    before = _dump(db)
    result = _invoke(db, "fit", "--method", method, "--draws", "0", *args)
    assert result.exit_code == 2 and flag in result.output and "internal error" not in result.output
    assert _dump(db) == before


def test_degenerate_positions_refused_against_the_tied_actors(planted):
    db, truth, _ = planted
    tied = len(truth)  # 18 tied actors per period in the planted data
    result = _invoke(db, "fit", "--positions", str(tied // 2 + 1), "--draws", "0")
    assert result.exit_code == 2 and f"{tied} actors with ties" in result.output
    _run(db, "fit", "--positions", str(tied // 2), "--draws", "0")  # the same (default) method as the refusal
    with Study(db) as study:
        assert study.fits()["fit"].tolist() == [1]


def test_chart_option_of_another_chart_is_refused(planted):
    db, _, tmp = planted
    _run(db, "fit", "--positions", "3", "--draws", "0")
    _run(db, "align", "--draws", "0")
    result = _invoke(db, "chart", "flow", "--actor", "agency 01", "-o", str(tmp / "f.json"))
    assert result.exit_code == 2 and "--actor" in result.output and "trajectory" in result.output
    assert not (tmp / "f.json").exists()


def test_closed_pipe_exits_quietly_and_keeps_the_work(planted, monkeypatch):
    db, _, _ = planted
    _run(db, "fit", "--positions", "3", "--draws", "0")

    def broken(*_a, **_k):
        raise BrokenPipeError(32, "Broken pipe")

    monkeypatch.setattr("tracker.output.write", broken)
    monkeypatch.setattr("tracker.cli.write", broken)
    result = _invoke(db, "export", "memberships")
    assert result.exit_code == 141  # 128 + SIGPIPE, what a shell reports for `cmd | head` (common practice)
    assert "error" not in result.output
    with Study(db) as study:
        assert len(study.memberships()) == 3 * 18  # the fit is still there


# ---------------------------------------------------------------- readable output

def test_show_fits_80_columns_lists_members_and_tie_counts(planted):
    db, truth, _ = planted
    _run(db, "fit", "--positions", "3", "--draws", "0", "--seed", "2")
    out = _run(db, "show", "2019", "--width", "80")
    assert max(len(line) for line in out.splitlines()) <= 80
    assert "…" not in out
    members_part = out.split("Image of")[0]
    for actor in truth:
        assert actor in members_part
    with Study(db) as study:
        blocks = study.blocks()
    blocks = blocks[(blocks["period"] == "2019") & (blocks["ties"] > 0)]
    # every block with ties appears with its tie count and possible pairs (read back from the store)
    listed = re.findall(r"^\s+P(\d+)\s+P(\d+)\s+(\d+)\s+(\d+)\s+([\d.]+)", out, flags=re.M)
    got = {(int(a), int(b)): (int(t), int(p)) for a, b, t, p, _ in listed}
    want = {(int(r.from_position), int(r.to_position)): (int(r.ties), int(r.possible)) for r in blocks.itertuples()}
    assert got == want
    # the grid: one row per position, # where the image has a tie block
    grid = [line for line in out.splitlines() if re.fullmatch(r"\s+P\d+\s+[#+. ]+", line)]
    assert len(grid) == 3 and sum(line.split(None, 1)[1].count("#") for line in grid) == 4  # 4 planted 1-blocks


def test_auto_prints_its_table_and_reason_and_exports_a_table(planted):
    db, _, tmp = planted
    out = _run(db, "fit", "--method", "structural", "--positions", "auto", "--k-range", "2-5", "--smooth", "off",
               "--draws", "0")
    assert "Numbers of positions tried" in out and "chosen number of positions:" in out
    table = pd.read_csv(io.StringIO(_run(db, "export", "positions-auto")))
    assert set(table["k"]) == {2, 3, 4, 5}
    assert (table.groupby("period")["chosen"].sum() == 1).all()
    with Study(db) as study:
        fp = study.fit_periods()
    chosen = table[table["chosen"]].set_index("period")["k"]
    assert all(chosen.loc[int(p)] == n for p, n in zip(fp["period"], fp["positions"]))  # no isolates here
    assert (chosen == 3).all()  # the planted three positions
    exported = json.loads(_run(db, "export", "fit-periods", "--format", "json"))
    assert isinstance(exported[0]["diagnostics"], dict) and isinstance(exported[0]["diagnostics"]["auto"], list)


def test_integers_print_as_integers(planted):
    db, _, _ = planted
    out = _run(db, "fit", "--positions", "3", "--draws", "0")
    assert not re.search(r"\b\d+\.000\b", out.split("inconsistencies")[1]), out
    csv_text = _run(db, "export", "fit-periods", "--format", "csv")
    frame = pd.read_csv(io.StringIO(csv_text))
    assert "inconsistencies" in frame and not re.search(r",\d+\.0,", csv_text)
    records = json.loads(_run(db, "export", "fit-periods", "--format", "json"))
    assert all(isinstance(r["inconsistencies"], int) for r in records)


def test_fits_tell_fits_apart(planted):
    db, _, _ = planted
    _run(db, "fit", "--method", "structural", "--positions", "3", "--draws", "0")
    _run(db, "fit", "--method", "structural", "--positions", "2", "--draws", "0", "--smooth", "off")
    fits = pd.read_csv(io.StringIO(_run(db, "fits", "--format", "csv")))
    assert fits["positions"].astype(str).tolist() == ["3", "2"]
    assert fits["smoothing"].tolist() == ["auto", "off"]
    table = _run(db, "fits")
    assert "positions" in table and "smoothing" in table
    records = json.loads(_run(db, "fits", "--format", "json"))
    assert isinstance(records[0]["params"], dict)  # nested, not a JSON string
    with Study(db) as study:
        assert len(study.fits()) == 2


def test_track_names_wherever_a_track_appears(moving):
    db, _ = moving
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    moves = pd.read_csv(io.StringIO(_run(db, "moves", "--format", "csv")))
    track = int(moves["to_track"].iloc[0])
    _run(db, "name-track", str(track), "senders")
    trans = pd.read_csv(io.StringIO(_run(db, "transitions", "--format", "csv")))
    assert (trans.loc[trans["to_track"] == track, "to_name"] == "senders").all()
    traj = pd.read_csv(io.StringIO(_run(db, "export", "trajectories"))).set_index("actor")
    assert traj.loc["agency 05", "2019"] == "senders"
    members = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    assert (members.loc[members["track"] == track, "track_name"] == "senders").all()
    with Study(db) as study:
        assert "senders" in set(study.tracks()["name"])


# ---------------------------------------------------------------- compare

def _ari_by_pairs(a, b) -> float:
    """Adjusted Rand index from its definition by pair counts (Hubert & Arabie 1985, eq. 5)."""
    table = pd.crosstab(np.asarray(a), np.asarray(b)).to_numpy()
    n = table.sum()
    index = comb(table, 2).sum()
    rows, cols = comb(table.sum(1), 2).sum(), comb(table.sum(0), 2).sum()
    expected = rows * cols / comb(n, 2)
    return (index - expected) / ((rows + cols) / 2 - expected)


def test_compare_two_fits(moving):
    db, _ = moving
    _run(db, "fit", "--positions", "2", "--draws", "0", "--seed", "1")
    _run(db, "align", "--draws", "0")
    _run(db, "fit", "--positions", "3", "--draws", "0", "--smooth", "off", "--method", "concor")
    _run(db, "align", "--draws", "0")
    periods = pd.read_csv(io.StringIO(_run(db, "compare", "1", "2", "--format", "csv", "--part", "periods")))
    with Study(db) as study:
        a, b = study.memberships(1), study.memberships(2)
        moves_a, moves_b = study.moves(1), study.moves(2)
    for row in periods.itertuples():
        pa = a[a["period"] == str(row.period)].set_index("actor")["position"]
        pb = b[b["period"] == str(row.period)].set_index("actor")["position"]
        assert row.ari == pytest.approx(_ari_by_pairs(pa, pb.loc[pa.index]), abs=1e-12)
    actors = pd.read_csv(io.StringIO(_run(db, "compare", "1", "2", "--format", "csv", "--part", "actors")))
    assert len(actors) == periods["placed_differently"].sum()
    moves = json.loads(_run(db, "compare", "1", "2", "--format", "json"))["moves"]
    key = lambda m: {(r.actor, str(r.from_period), str(r.to_period)) for r in m.itertuples()}  # noqa: E731
    assert {(m["actor"], m["from_period"], m["to_period"]) for m in moves} == key(moves_a) ^ key(moves_b)
    assert "Agreement of fit 1" in _run(db, "compare", "1", "2")


def test_compare_same_fit_agrees_fully(planted):
    db, _, _ = planted
    _run(db, "fit", "--positions", "3", "--draws", "0")
    periods = pd.read_csv(io.StringIO(_run(db, "compare", "1", "1", "--format", "csv", "--part", "periods")))
    assert (periods["ari"] == 1.0).all() and (periods["placed_differently"] == 0).all()


# ---------------------------------------------------------------- safe data out

def test_csv_exports_neutralise_formulas_unless_raw(tmp_path, new_db):
    risky = ["=HYPERLINK(\"http://x\")", "+SUM(1,2)", "@cmd", "-2+3"]
    rows = [(a, "plain agency", "2020-01-01") for a in risky] + [("plain agency", a, "2020-02-01") for a in risky]
    pd.DataFrame(rows, columns=["a", "b", "d"]).to_csv(tmp_path / "e.csv", index=False)
    db = new_db("x.db")
    _run(db, "import", str(tmp_path / "e.csv"), "--source", "a", "--target", "b", "--date", "d")
    safe = pd.read_csv(io.StringIO(_run(db, "actors", "--format", "csv")), keep_default_na=False)
    assert {"'" + r for r in risky} <= set(safe["actor"])
    assert not any(str(v).startswith(("=", "+", "-", "@")) for v in safe.to_numpy().ravel())
    raw = pd.read_csv(io.StringIO(_run(db, "actors", "--format", "csv", "--raw")), keep_default_na=False)
    assert set(risky) <= set(raw["actor"])
    _run(db, "fit", "--positions", "1", "--draws", "0")
    members = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    assert {"'" + r for r in risky} <= set(members["actor"])
    raw_members = pd.read_csv(io.StringIO(_run(db, "export", "memberships", "--raw")))
    assert set(risky) <= set(raw_members["actor"])
    with Study(db) as study:  # the store keeps the labels as imported
        assert set(risky) <= set(study.actors()["actor"])


def test_anonymised_report_hides_the_file_name_and_writes_a_key(moving):
    db, tmp = moving
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    out = _run(db, "report", "--anonymise", "--key", str(tmp / "key.csv"), "-o", str(tmp / "r.html"),
               "--structure-draws", "0")
    assert "key" in out
    html = (tmp / "r.html").read_text(encoding="utf-8")
    assert "m.db" not in html and "agency 05" not in html
    key = pd.read_csv(tmp / "key.csv")
    with Study(db) as study:
        actors = set(study.actors()["actor"])
    assert set(key["actor"]) == actors and key["code"].str.fullmatch(r"A\d{3}").all()
    assert all(code in html for code in key["code"])
    assert _invoke(db, "report", "--key", str(tmp / "k2.csv"), "-o", str(tmp / "r2.html")).exit_code == 2


# ---------------------------------------------------------------- safe by construction

def test_recut_refuses_then_refits_and_carries_names(moving):
    db, _ = moving
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    moves = pd.read_csv(io.StringIO(_run(db, "moves", "--format", "csv")))
    core = int(moves["to_track"].iloc[0])  # the track agency 05 joins: the core
    _run(db, "name-track", str(core), "core")
    before = _dump(db)
    result = _invoke(db, "recut", "--period", "2y")
    assert result.exit_code == 2 and "1 fit(s)" in result.output and "'core'" in result.output
    assert "--refit" in result.output and "--force" in result.output
    assert _dump(db) == before
    out = _run(db, "recut", "--period", "2y", "--refit")
    assert "names carried" in out
    with Study(db) as study:
        assert study.periods() == ["2016-2017", "2018-2019"]
        fits = study.fits()
        assert len(fits) == 1 and fits["current"].all()
        tracks = study.tracks()
        named = tracks.loc[tracks["name"] == "core", "track"]
        assert len(named) == 1
        members = study.memberships()
        # the named track still holds the core agencies in every new period
        core_members = members[members["track"] == int(named.iloc[0])]
        assert {"agency 00", "agency 01", "agency 02", "agency 03", "agency 04"} <= set(core_members["actor"])


def test_recut_force_drops_and_says_so(moving):
    db, _ = moving
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "recut", "--period", "2y", "--force")
    with Study(db) as study:
        assert study.fits().empty and len(study.periods()) == 2


def test_alias_merge_refuses_then_refits(tmp_path, new_db):
    moving_events(tmp_path / "e.csv")
    frame = pd.read_csv(tmp_path / "e.csv")
    late = frame["d"].str.startswith("2019")
    frame.loc[late, "a"] = frame.loc[late, "a"].replace({"agency 01": "Agency 01"})
    frame.to_csv(tmp_path / "e.csv", index=False)
    db = new_db("a.db")
    _run(db, "import", str(tmp_path / "e.csv"), "--source", "a", "--target", "b", "--date", "d")
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    with Study(db) as study:
        track = int(study.memberships().set_index(["period", "actor"]).loc[("2016", "agency 00"), "track"])
    _run(db, "name-track", str(track), "core")
    before = _dump(db)
    result = _invoke(db, "alias", "Agency 01", "agency 01")
    assert result.exit_code == 2 and "'Agency 01'" in result.output and "placements" in result.output
    assert _dump(db) == before
    out = _run(db, "alias", "Agency 01", "agency 01", "--refit")
    assert "merged" in out and "fitted again" in out
    with Study(db) as study:
        members = study.memberships()
        assert "Agency 01" not in set(members["actor"])
        assert len(members[members["period"] == "2019"]) == 12
        tracks = study.tracks()
        named = int(tracks.loc[tracks["name"] == "core", "track"].iloc[0])
        assert members.set_index(["period", "actor"]).loc[("2019", "agency 01"), "track"] == named
        assert study.check() == []


def test_every_listing_and_export_in_every_format(moving):
    """Every export and listing in every format ends in a result, never an internal error."""
    db, tmp = moving
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    from tracker.cli import EXPORTS

    for what in EXPORTS:
        for fmt in ("csv", "json"):
            args = ["export", what, "--format", fmt] + (["-o", str(tmp / "g")] if what == "graphml" else [])
            result = _invoke(db, *args)
            assert result.exit_code == 0 and "internal error" not in result.output, (args, result.output)
    for command in ("summary", "actors", "batches", "fits", "tracks", "moves", "transitions"):
        for fmt in ("table", "csv", "json"):
            result = _invoke(db, command, "--format", fmt)
            assert result.exit_code == 0, (command, fmt, result.output)
    assert _invoke(db, "moves", "--min-confidence", "0.5").exit_code == 0
    assert _invoke(db, "structures", "--draws", "0", "--format", "json").exit_code == 0
    with Study(db) as study:
        assert len(study.moves()) >= 1


def test_align_names_from_another_fit(moving):
    db, _ = moving
    _run(db, "fit", "--positions", "2", "--draws", "0")
    _run(db, "align", "--draws", "0")
    with Study(db) as study:
        core = int(study.memberships().set_index(["period", "actor"]).loc[("2016", "agency 00"), "track"])
    _run(db, "name-track", str(core), "core")
    _run(db, "fit", "--positions", "2", "--draws", "0", "--method", "concor", "--smooth", "off")
    out = _run(db, "align", "--draws", "0", "--names-from", "1")
    assert "'core'" in out
    with Study(db) as study:
        members = study.memberships(2, names=True)
        core_rows = members[members["actor"].isin([f"agency {i:02d}" for i in range(5)])]
        assert (core_rows["track_name"] == "core").all()  # the five core agencies in every period
