"""fit --smooth through the CLI: the stored fit records what ran; a penalty a method cannot honour is refused."""

from __future__ import annotations

import json

from click.testing import CliRunner

from tests.conftest import table_dump
from tests.helpers.planted_study import planted_events
from tracker.api import Study
from tracker.cli import main


def _study_file(tmp_path):
    csv = tmp_path / "events.csv"
    planted_events(csv, n_actors=40, n_positions=3, n_periods=3, density_in=0.3, density_out=0.03, movers=3, seed=1)
    db = tmp_path / "study.db"
    result = CliRunner().invoke(main, ["--db", str(db), "import", str(csv), "--source", "source", "--target",
                                       "target", "--date", "date", "--undirected"], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return db


def test_stored_fit_records_the_method_and_the_penalty_that_ran(tmp_path):
    # Source: the product rule "the stored fit records what actually ran".
    db = _study_file(tmp_path)
    for args, method, penalty in ((["--method", "concor", "--smooth", "0.5"], "concor", 0.5),
                                  (["--method", "regular"], "regular", 0.0)):
        result = CliRunner().invoke(main, ["--db", str(db), "fit", "--positions", "3", "--draws", "0", *args],
                                    catch_exceptions=False)
        assert result.exit_code == 0, result.output
        with Study(db) as study:
            info = study.fit_info()
            assert info["method"] == method
            for diag in study.fit_periods()["diagnostics"]:
                assert diag["method"] == method
                assert diag["smoothing"]["penalty"] == penalty


def test_a_penalty_the_method_cannot_honour_is_refused_and_nothing_is_stored(tmp_path):
    db = _study_file(tmp_path)
    with Study(db) as study:
        before = table_dump(study)
    result = CliRunner().invoke(main, ["--db", str(db), "fit", "--method", "regular", "--smooth", "2"])
    assert result.exit_code != 0
    assert "cannot be honoured" in result.output
    with Study(db) as study:
        assert table_dump(study) == before


def _fit(db, *args):
    return CliRunner().invoke(main, ["--db", str(db), "fit", "--positions", "3", "--draws", "0", *args])


def test_any_smooth_with_the_dynamic_model_is_refused_in_one_line_and_nothing_is_stored(tmp_path):
    # Source: the product rule "what is asked for runs or is refused, never silently replaced":
    # the dynamic model has no change penalty, so even --smooth off would only relabel its fit.
    db = _study_file(tmp_path)
    with Study(db) as study:
        before = table_dump(study)
    for args in (["--smooth", "off"], ["--smooth", "0"], ["--smooth", "none"], ["--smooth", "no"], ["--smooth", "2"],
                 ["--method", "dynamic", "--smooth", "off"], ["--joint", "--method", "sbm", "--smooth", "off"]):
        result = _fit(db, *args)
        assert result.exit_code == 2, (args, result.output)
        assert "Traceback" not in result.output and "internal error" not in result.output
        lines = result.stderr.strip().splitlines()
        if "--joint" in args:
            assert lines[0].startswith("--joint is deprecated")  # its own line, then the refusal
            lines = lines[1:]
        assert len(lines) == 1, (args, result.stderr)
        assert lines[0].startswith("roletrail: error: --smooth does not apply to the dynamic model")
        assert "drop --smooth" in lines[0] and "--method sbm --smooth off" in lines[0]
        with Study(db) as study:
            assert table_dump(study) == before and study.fits().empty


def test_the_fixes_the_refusal_names_fit_each_period_alone_and_the_listing_says_what_ran(tmp_path):
    db = _study_file(tmp_path)
    for method in ("sbm", "structural"):
        result = _fit(db, "--method", method, "--smooth", "off")
        assert result.exit_code == 0, result.output
        with Study(db) as study:
            assert study.fit_info()["method"] == method
            for diag in study.fit_periods()["diagnostics"]:
                assert diag["smoothing"] == {"method": method, "penalty": 0.0, "note": "each period fitted alone"}
    result = _fit(db)  # the default dynamic model, no --smooth
    assert result.exit_code == 0, result.output
    listing = CliRunner().invoke(main, ["--db", str(db), "fits", "--format", "json"])
    assert listing.exit_code == 0, listing.output
    shown = {r["method"]: r["smoothing"] for r in json.loads(listing.stdout)}
    # the dynamic fit does not read "off" (which would say its periods were fitted alone)
    assert shown == {"sbm": "off", "structural": "off", "dynamic": "none (dynamic model)"}
