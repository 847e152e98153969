"""Move confidence of the dynamic model: the isotonic map, and which changes are reported."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.isotonic import IsotonicRegression

from tracker.longitudinal.confidence import MoveCalibrator
from tracker.pipeline.tracking import REPORT_THRESHOLD, reported_changes


def test_monotone_calibrator_is_sklearns_isotonic_regression():
    # Source: reference library (scikit-learn IsotonicRegression, pool-adjacent-violators;
    # Zadrozny & Elkan 2002): the map of the posterior must be that regression, non-decreasing.
    rng = np.random.default_rng(11)
    p = rng.random(4000)
    real = rng.random(4000) < p ** 2  # the raw probability over-states the share real
    model = MoveCalibrator(monotone=True).fit(p[:, None], real)
    grid = np.linspace(0, 1, 51)
    got = model.predict(grid[:, None])
    want = IsotonicRegression(y_min=0, y_max=1, out_of_bounds="clip").fit(p, real.astype(float)).predict(grid)
    assert np.allclose(got, want)
    assert np.all(np.diff(got) >= 0)
    assert np.isnan(model.predict(np.array([[np.nan]]))[0])
    # Over-confidence is corrected: at raw 0.8 about 0.64 of moves are real (p^2; bound from
    # 4000 draws, common practice: +-0.1).
    assert abs(model.predict(np.array([[0.8]]))[0] - 0.64) < 0.1


def test_changes_below_one_half_are_left_out_but_listed():
    # Source: the reporting rule (report a change where its probability is >= 0.5), by hand.
    moves = pd.DataFrame({"actor": ["a", "b", "c", "d"], "from_period": ["1"] * 4, "to_period": ["2"] * 4,
                          "from_track": [1, 1, 2, 2], "to_track": [2, 3, 1, 3],
                          "confidence": [0.9, 0.49, REPORT_THRESHOLD, np.nan]})
    params = {"draws": 0}
    kept = reported_changes(moves, params)
    assert kept["actor"].tolist() == ["a", "c", "d"]
    assert params["uncertain_changes_count"] == 1
    assert params["uncertain_changes"] == [{"actor": "b", "from_period": "1", "to_period": "2", "from_track": 1,
                                            "to_track": 3, "confidence": 0.49}]
    assert "uncalibrated" in params["confidence"]
    params = {"draws": 5}
    reported_changes(moves, params)
    assert params["confidence"].startswith("calibrated")
