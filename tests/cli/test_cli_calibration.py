"""roletrail calibration through the CLI, reading the stored check back."""

from __future__ import annotations

from click.testing import CliRunner

from tests.helpers.planted_study import planted_events
from tracker.api import Study
from tracker.cli import main


def _run(db, *args):
    result = CliRunner().invoke(main, ["--db", str(db), *args], catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result.output


def _planted_study(tmp_path, *, density_in: float, movers: int, seed: int):
    """A study of 60 actors, 3 planted positions over 4 periods (tests/helpers/planted.py), imported."""
    csv = tmp_path / "events.csv"
    planted_events(csv, n_actors=60, n_positions=3, n_periods=4, density_in=density_in, density_out=0.03,
                   movers=movers, seed=seed)
    db = tmp_path / "study.db"
    _run(db, "import", str(csv), "--source", "source", "--target", "target", "--date", "date", "--undirected")
    return db


def test_calibration_command_stores_reliability_bins_and_ece(tmp_path):
    # Source: planted dynamic blockmodel (tests/helpers/planted.py); the stored check must hold
    # 5 equal-width bins whose move counts add up to the moves checked, and an ECE in [0, 1]
    # equal to its definition recomputed from those bins (Naeini et al. 2015).
    db = _planted_study(tmp_path, density_in=0.2, movers=6, seed=4)
    _run(db, "fit", "--positions", "3", "--draws", "0")
    _run(db, "align", "--draws", "1")
    out = _run(db, "calibration", "--studies", "2", "--seed", "3")
    assert "expected calibration error" in out
    report = tmp_path / "report.html"
    _run(db, "report", "-o", str(report), "--structure-draws", "0")
    assert "chart-calibration" in report.read_text(encoding="utf-8")
    with Study(db) as study:
        stored = study.latest_calibration()
    assert 2 <= stored["studies"] <= 20  # a dynamic fit may simulate more, up to 10 x (studies_needed)
    bins = stored["bins"]
    assert len(bins) == 5 and sum(b["moves"] for b in bins) == stored["moves"]
    if stored["moves"]:
        ece = sum(b["moves"] / stored["moves"] * abs(b["share_real"] - b["mean_confidence"])
                  for b in bins if b["moves"])
        assert abs(ece - stored["ece"]) < 1e-3 and 0 <= stored["ece"] <= 1


def test_calibration_refuses_too_few_studies(tmp_path):
    db = tmp_path / "study.db"
    result = CliRunner().invoke(main, ["--db", str(db), "calibration", "--studies", "1"])
    assert result.exit_code != 0


def test_dynamic_fit_reports_changes_at_one_half_or_more_and_exports_the_rest(tmp_path):
    # Source: the reporting rule of the dynamic model (tracker.pipeline.tracking.reported_changes):
    # moves are the changes of the most probable position whose probability is >= 0.5; the
    # others are exported, never dropped silently.  Planted data: tests/helpers/planted.py.
    db = _planted_study(tmp_path, density_in=0.08, movers=8, seed=5)
    _run(db, "fit", "--positions", "3", "--draws", "0")
    out = _run(db, "align", "--draws", "0")
    left = _run(db, "export", "uncertain-changes", "--format", "json")
    import json

    rows = json.loads(left)
    with Study(db) as study:
        moves = study.moves()
        fit_periods = study.fit_periods()
        params = study.store.alignment_params(study.store.current_fit(None)["id"])
    assert len(moves) + len(rows) > 0
    assert (moves["confidence"] >= 0.5).all()
    assert all(r["confidence"] < 0.5 for r in rows) and len(rows) == params["uncertain_changes_count"]
    assert "uncalibrated" in params["confidence"]
    if rows:
        assert f"{len(rows)} candidate changes" in out
    # Every candidate (reported or not) carries the fit's own posterior change probability.
    change = {}
    for period, diag in zip(fit_periods["period"], fit_periods["diagnostics"]):
        values = diag if isinstance(diag, dict) else json.loads(diag or "{}")
        change[period] = values.get("change_probability") or {}
    for actor, to_period, conf in [(r["actor"], r["to_period"], r["confidence"]) for r in rows] + list(
            zip(moves["actor"], moves["to_period"], moves["confidence"])):
        assert abs(change[str(to_period)][actor] - conf) < 1e-3


def test_calibration_check_runs_for_a_descriptive_method(tmp_path):
    # Source: the check's contract (tracker.pipeline.calibration.calibration_check): for a
    # descriptive fit, cross-fitted confidences of simulated moves in 5 bins that add up to the
    # moves checked, and the chance floor of the ECE (an exact probability's ECE is >= 0).
    db = _planted_study(tmp_path, density_in=0.3, movers=6, seed=2)
    _run(db, "fit", "--method", "structural", "--positions", "3", "--draws", "0", "--smooth", "off")
    _run(db, "align", "--draws", "2")
    out = _run(db, "calibration", "--studies", "2", "--seed", "1")
    assert "expected calibration error" in out
    with Study(db) as study:
        stored = study.latest_calibration()
    assert stored["studies"] == 2 and sum(b["moves"] for b in stored["bins"]) == stored["moves"]
    if stored["moves"]:
        assert 0 <= stored["ece_floor"] <= stored["ece_floor_95"] <= 1


def test_moves_cautions_about_a_descriptive_methods_confidence_only(tmp_path):
    # The caution states a measured fact (tests/benchmarks/README.md: descriptive methods'
    # confidence far from calibrated on some planted settings); it must follow the fit's method.
    db = _planted_study(tmp_path, density_in=0.2, movers=6, seed=4)
    _run(db, "fit", "--positions", "3", "--draws", "0")
    _run(db, "align", "--draws", "0")
    assert "caution:" not in _run(db, "moves")
    _run(db, "fit", "--method", "structural", "--positions", "3", "--draws", "0", "--smooth", "off")
    _run(db, "align", "--draws", "0")
    out = _run(db, "moves")
    assert "caution: structural is a descriptive method" in out
    assert "caution:" not in _run(db, "moves", "--format", "csv")  # machine output stays clean
