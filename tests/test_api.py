"""The API facade and the pipeline functions it delegates to (fit and align paths)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tracker.api import Study
from tracker.blockmodel.fitting import FitSettings
from tracker.errors import UsageError
from tracker.pipeline.fitting import check_dynamic, deprecated_joint, is_dynamic
from tracker.pipeline.tracking import dynamic_move_confidence


def _events(path, seed=0):
    # two cohesive groups of 8, one actor ("g0-0") moving to the other group in 2019;
    # "late" exists only from 2019 (absent before, not isolated)
    rng = np.random.default_rng(seed)
    rows = []
    for year in (2017, 2018, 2019, 2020):
        groups = [[f"g0-{i}" for i in range(8)], [f"g1-{i}" for i in range(8)]]
        if year >= 2019:
            groups[0].remove("g0-0")
            groups[1].append("g0-0")
            groups[1].append("late")
        for group in groups:
            for i, a in enumerate(group):
                for b in group[i + 1:]:
                    if rng.random() < 0.7:
                        rows.append((a, b, f"{year}-06-01"))
    pd.DataFrame(rows, columns=["a", "b", "d"]).to_csv(path, index=False)


def test_default_fit_is_the_dynamic_model_with_calibrated_moves(tmp_path):
    # source: planted partition (common practice); the move's confidence is the pairwise
    # posterior probability of a change (Matias & Miele 2017), between 0 and 1
    _events(tmp_path / "e.csv")
    with Study(tmp_path / "s.db") as study:
        study.import_events(tmp_path / "e.csv", source="a", target="b", date="d", undirected=True)
        assert FitSettings().method == "dynamic"
        study.fit(positions=2, draws=0)
        info = study.fit_info()
        assert info["params"]["method"] == "dynamic"
        diag = study.fit_periods()["diagnostics"].iloc[-1]
        assert diag["method"] == "dynamic" and diag["n_positions"] == 2
        moves = study.align(draws=0)["moves"]
        assert moves[["actor", "to_period"]].astype(str).values.tolist() == [["g0-0", "2019"]]
        assert moves["confidence"].iloc[0] > 0.9
        members = study.memberships()
        assert str(members.loc[members["actor"] == "late", "period"].min()) == "2019"  # absent before


def test_joint_option_is_deprecated_and_runs_the_dynamic_method(tmp_path):
    _events(tmp_path / "e.csv")
    with Study(tmp_path / "s.db") as study:
        study.import_events(tmp_path / "e.csv", source="a", target="b", date="d", undirected=True)
        with pytest.warns(FutureWarning, match="--method dynamic"):
            study.fit(method="sbm", positions=2, draws=0, options={"joint": True})
        assert study.fit_info()["params"]["method"] == "dynamic"
        assert "joint" not in study.fit_info()["params"]["options"]


@pytest.mark.parametrize("kwargs, words", [
    ({"smoothing": 2.0}, "drop --smooth"),
    ({"options": {"linkage": "average"}}, "--linkage does not apply to method dynamic"),
    ({"options": {"model": "bernoulli", "degree_corrected": True}}, "counts only"),
])
def test_dynamic_settings_are_honoured_or_refused(kwargs, words):
    with pytest.raises(UsageError, match=words):
        check_dynamic(FitSettings(method="dynamic", **kwargs))


def test_pipeline_helpers():
    assert is_dynamic({"method": "sbm", "options": {"joint": True}}) and is_dynamic({"method": "dynamic"})
    assert not is_dynamic(FitSettings(method="structural"))
    with pytest.raises(UsageError):
        deprecated_joint("structural", {"joint": True})
    assert deprecated_joint("sbm", {"joint": True, "model": "poisson"})[:2] == ("dynamic", {"model": "poisson"})
    fp = pd.DataFrame({"period": ["1", "2"], "diagnostics": [{}, {"change_probability": {"a": 0.7}}]})
    moves = pd.DataFrame({"actor": ["a", "b"], "to_period": ["2", "2"]})
    conf = dynamic_move_confidence(fp, moves)
    assert conf[0] == 0.7 and np.isnan(conf[1])


def test_dynamic_fit_refuses_a_subset_of_periods_and_records_no_smoothing(tmp_path):
    _events(tmp_path / "e.csv")
    with Study(tmp_path / "s.db") as study:
        study.import_events(tmp_path / "e.csv", source="a", target="b", date="d", undirected=True)
        with pytest.raises(UsageError, match="all periods together"):
            study.fit(positions=2, draws=0, periods=["2019"])
        assert study.fits().empty  # the store is unchanged
        study.fit(positions=2, draws=0)
        assert study.fit_info()["params"]["smoothing"] == 0.0


def test_dynamic_fit_refuses_any_smoothing_given_and_keeps_auto(tmp_path):
    # The product rule: what is asked for runs or is refused.  The dynamic model has no change
    # penalty, so smoothing=0 ("off") would only make the fit look as if periods were fitted alone.
    _events(tmp_path / "e.csv")
    with Study(tmp_path / "s.db") as study:
        study.import_events(tmp_path / "e.csv", source="a", target="b", date="d", undirected=True)
        for smoothing in (0, 0.0, "off", "none", "no", 1.5):
            with pytest.raises(UsageError, match="--smooth does not apply to the dynamic model"):
                study.fit(positions=2, draws=0, smoothing=smoothing)
        with pytest.warns(FutureWarning), pytest.raises(UsageError, match="does not apply to the dynamic model"):
            study.fit(method="sbm", positions=2, draws=0, options={"joint": True}, smoothing=0)
        assert study.fits().empty  # the store is unchanged
        study.fit(positions=2, draws=0, smoothing="auto")
        assert study.fit_info()["method"] == "dynamic" and len(study.fits()) == 1
