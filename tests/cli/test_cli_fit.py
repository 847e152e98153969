"""fit / show / export / fits / use-fit through the CLI runner, reading the study back."""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.metrics import adjusted_rand_score

from tracker import __version__
from tracker.api import Study
from tracker.cli import main


def planted_events(path, seed=0, years=(2018, 2019, 2020), sizes=(6, 6, 6), isolated=2):
    """Three positions with a perfect image (0->1, 1->2, 2->0, and 0 internal), plus isolated actors."""
    rng = np.random.default_rng(seed)
    image = np.array([[1, 1, 0], [0, 0, 1], [1, 0, 0]])
    labels = np.repeat(np.arange(3), sizes)
    names = [f"agency {i:02d}" for i in range(len(labels))]
    rows = []
    for year in years:
        for i, li in enumerate(labels):
            for j, lj in enumerate(labels):
                if i != j and image[li, lj]:
                    rows.append((names[i], names[j], f"{year}-0{rng.integers(1, 9)}-15", "coop"))
    # the observers are present (roster) but never tied: the isolates' position
    frame = pd.DataFrame(rows, columns=["a", "b", "d", "kind"])
    frame.to_csv(path, index=False)
    roster = pd.DataFrame({"actor": names + [f"observer {k}" for k in range(isolated)]})
    roster.to_csv(path.with_name("actors.csv"), index=False)
    return dict(zip(names, labels))


def _run(db, *args):
    result = CliRunner().invoke(main, ["--db", str(db), *args], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result.output


@pytest.fixture
def fitted(tmp_path, new_db):
    truth = planted_events(tmp_path / "events.csv")
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "events.csv"), "--source", "a", "--target", "b", "--date", "d", "--relation", "kind")
    _run(db, "import-actors", str(tmp_path / "actors.csv"))
    return db, truth, tmp_path


def test_fit_recovers_planted_positions_and_marks_isolates(fitted):
    db, truth, tmp = fitted
    out = _run(db, "fit", "--method", "structural", "--positions", "3", "--criterion", "zero-block", "--seed", "7")
    assert "fit 1" in out
    _run(db, "export", "memberships", "--format", "csv", "-o", str(tmp / "m.csv"))
    members = pd.read_csv(tmp / "m.csv")
    assert {"period", "actor", "position"} <= set(members.columns)
    for period, part in members.groupby("period"):
        observers = part[part["actor"].str.startswith("observer")]
        assert observers["isolate"].all() and observers["position"].nunique() == 1
        others = part[~part["actor"].str.startswith("observer")]
        assert not others["isolate"].any()
        assert not set(observers["position"]) & set(others["position"])  # never mixed
        # sklearn's adjusted Rand index against the planted partition
        assert adjusted_rand_score([truth[a] for a in others["actor"]], others["position"]) == 1.0


def test_blocks_export_perfect_fit_and_stored_settings(fitted):
    db, truth, tmp = fitted
    # a per-period descriptive fit (the default is the dynamic model, which has no isolates' position)
    _run(db, "fit", "--method", "structural", "--positions", "3", "--seed", "3", "--draws", "19")
    blocks = pd.read_csv(io.StringIO(_run(db, "export", "blocks")))
    assert {"period", "relation", "from_position", "to_position", "ties", "possible", "density", "image"} <= set(blocks.columns)
    tied = blocks[(blocks["from_position"] <= 3) & (blocks["to_position"] <= 3)]
    # planted perfect structure: every block among tied positions is all 0 or all 1
    assert set(tied["density"].round(9)) <= {0.0, 1.0}
    # possible ties: 6 x 5 = 30 on the diagonal, 6 x 6 = 36 off it (common practice)
    diag = tied[tied["from_position"] == tied["to_position"]]
    assert set(diag["possible"]) == {30}
    assert set(tied.loc[tied["from_position"] != tied["to_position"], "possible"]) == {36}
    periods = pd.read_csv(io.StringIO(_run(db, "export", "fit-periods")))
    assert (periods["inconsistencies"] == 0).all()
    with Study(db, create=False) as study:
        info = study.fit_info()
        assert info["seed"] == 3 and info["version"] == __version__ and info["params"]["draws"] == 19
        assert info["params"]["method"] == "structural"
        assert (study.fit_periods()["p_value"] <= 0.1).all()


def test_new_settings_keep_older_fits_and_use_fit_switches(fitted):
    db, _, tmp = fitted
    _run(db, "fit", "--positions", "3", "--draws", "0")
    _run(db, "fit", "--positions", "2", "--draws", "0")
    fits = json.loads(_run(db, "fits", "--format", "json"))
    assert [f["fit"] for f in fits] == [1, 2] and [f["current"] for f in fits] == [False, True]
    two = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    _run(db, "use-fit", "1")
    one = pd.read_csv(io.StringIO(_run(db, "export", "memberships")))
    assert one.loc[~one["isolate"], "position"].max() == 3 and two.loc[~two["isolate"], "position"].max() == 2
    # same settings again: the fit is refreshed, not duplicated (the default dynamic model
    # refits all periods together; a per-period refresh of one period is tested in test_cli_tracks)
    _run(db, "fit", "--positions", "3", "--draws", "0")
    assert len(json.loads(_run(db, "fits", "--format", "json"))) == 2


def test_show_prints_members_image_and_blocks_with_sizes(fitted):
    db, _, _ = fitted
    _run(db, "fit", "--method", "structural", "--positions", "3", "--draws", "0")  # per-period fits have an isolates' position
    out = _run(db, "show", "2019")
    assert "(6):" in out and "no ties (2):" in out and "Image of coop" in out
    assert "1.000" in out and "0 inconsistencies" in out


def test_fit_errors_are_one_line(fitted):
    db, _, _ = fitted
    for args in (["fit", "--method", "astrology"], ["fit", "--positions", "many"], ["show", "1999"],
                 ["fit", "--periods", "1999"], ["fit", "--alpha", "2"]):
        result = CliRunner().invoke(main, ["--db", str(db), *args])
        assert result.exit_code == 2, result.output
        assert result.output.count("\n") == 1 and "Traceback" not in result.output, result.output


def test_every_method_recovers_the_planted_structure(fitted):
    db, truth, _ = fitted
    with Study(db, create=False) as study:
        for method in ("structural", "concor", "optimize", "regular"):
            kwargs = {"options": {"restarts": 5}} if method == "optimize" else {}
            study.fit(method=method, positions=3, draws=0, periods=["2019"], **kwargs)
            members = study.memberships()
            part = members[(members["period"] == "2019") & ~members["isolate"]]
            ari = adjusted_rand_score([truth[a] for a in part["actor"]], part["position"])
            assert ari == 1.0, (method, ari)
            assert study.fit_periods()["inconsistencies"].iloc[0] == 0


def test_structures_name_a_planted_core_periphery(tmp_path, new_db):
    # A perfect core-periphery image (Borgatti & Everett 1999): core tied to all, periphery only to the core.
    rows = []
    core = [f"core {i}" for i in range(4)]
    periphery = [f"edge {i}" for i in range(8)]
    for year in (2019, 2020):
        for a in core:
            for b in core + periphery:
                if a != b:
                    rows += [(a, b, year), (b, a, year)]
    pd.DataFrame(rows, columns=["a", "b", "y"]).to_csv(tmp_path / "cp.csv", index=False)
    db = new_db("cp.db")
    _run(db, "import", str(tmp_path / "cp.csv"), "--source", "a", "--target", "b", "--date", "y")
    _run(db, "fit", "--positions", "2", "--draws", "0")
    table = pd.read_csv(io.StringIO(_run(db, "structures", "--format", "csv", "--draws", "19")))
    assert {"period", "relation", "ideal", "mismatches", "fit"} <= set(table.columns)
    assert (table["ideal"] == "core-periphery").all() and (table["mismatches"] == 0).all()
    assert np.allclose(table["cp_correlation"], 1.0)  # discrete B&E correlation of a perfect structure
    exported = pd.read_csv(io.StringIO(_run(db, "export", "structures")))
    assert exported[["period", "ideal"]].equals(table[["period", "ideal"]])
    assert "core-periphery" in _run(db, "structures")


def test_fit_says_when_structural_positions_are_approximated(fitted, monkeypatch):
    # Above the exact limit (lowered here from 8,000 to 5 actors) the command
    # prints one note per period and the store keeps the approximation's figures.
    from tracker.blockmodel import embedding

    db, truth, _ = fitted
    monkeypatch.setattr(embedding, "EXACT_LIMIT", 5)
    # one worker: the limit is patched in this process only
    out = _run(db, "fit", "--method", "structural", "--positions", "3", "--smooth", "off", "--draws", "0",
               "--workers", "1")
    notes = [line for line in out.splitlines() if line.startswith("note: ")]
    assert len(notes) == 3 and all("distinct profiles" in line for line in notes)
    with Study(db, create=False) as study:
        for diag in study.fit_periods()["diagnostics"]:
            # positions 1 and 2 have no inner ties: identical profiles, one each; the 6
            # actors of position 0 are tied to each other, so each row differs (diagonal)
            assert diag["approximation"]["actors"] == 18 and diag["approximation"]["distinct"] == 8
        members = study.memberships()
    # the planted positions are recovered exactly (sklearn's adjusted Rand index)
    tied = members[~members["isolate"]]
    for _, part in tied.groupby("period"):
        assert adjusted_rand_score([truth[a] for a in part["actor"]], part["position"]) == 1.0
