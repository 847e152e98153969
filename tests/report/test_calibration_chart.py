"""The calibration chart and its sentence in the HTML report."""

from __future__ import annotations

import pandas as pd

from tracker.report.charts import calibration_chart, make_chart
from tracker.report.html import _calibration_sentence


def test_calibration_chart_draws_the_bins_with_moves_and_the_diagonal():
    # Source: the reliability diagram (DeGroot & Fienberg 1983): one point per non-empty
    # bin at (mean confidence, share real), against the diagonal y = x.
    bins = pd.DataFrame({"bin_low": [0.0, 0.2, 0.4, 0.6, 0.8], "bin_high": [0.2, 0.4, 0.6, 0.8, 1.0],
                         "moves": [10, 0, 3, 0, 4], "mean_confidence": [0.1, None, 0.5, None, 0.9],
                         "share_real": [0.0, None, 0.67, None, 1.0]})
    spec = calibration_chart(bins).to_dict()
    datasets = list(spec["datasets"].values())
    points = [d for d in datasets if d and "moves" in d[0]][0]
    assert [row["moves"] for row in points] == [10, 3, 4]
    assert [d for d in datasets if d and "x" in d[0]][0] == [{"x": 0.0, "y": 0.0}, {"x": 1.0, "y": 1.0}]
    assert make_chart("calibration", {"calibration": bins}, []).to_dict()["layer"]


def test_calibration_sentence_says_what_the_error_means():
    assert "0.03" in _calibration_sentence({"studies": 20, "ece": 0.03})
    assert "probability" in _calibration_sentence({"studies": 20, "ece": 0.03})
    assert "rough guide" in _calibration_sentence({"studies": 20, "ece": 0.2})
    assert _calibration_sentence(None) == ""


def test_calibration_sentence_weighs_the_error_against_chance():
    # Source: the check's ece_floor_95 (tracker.pipeline.calibration.ece_floor): an ECE no larger
    # than a perfectly calibrated confidence shows by chance on that many moves is not evidence of
    # miscalibration; a larger one is.
    few = _calibration_sentence({"studies": 20, "ece": 0.09, "ece_floor_95": 0.12, "moves": 30})
    assert "0.12" in few and "30 moves" in few and "probability" in few and "rough guide" not in few
    many = _calibration_sentence({"studies": 20, "ece": 0.09, "ece_floor_95": 0.03, "moves": 900})
    assert "rough guide" in many
