"""fit --smooth through the CLI: the stored fit records what ran; a penalty a method cannot honour is refused."""

from __future__ import annotations

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
