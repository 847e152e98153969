"""The fit test of a dynamic fit above the one-start limit (forced low on small data)."""

from __future__ import annotations

import numpy as np
import pandas as pd

import tracker.pipeline.fitting as pipeline_fitting
from tracker.api import Study
from tracker.execution import task_seeds
from tracker.inference.fit_test import Procedure, _prepare, monte_carlo_p, null_draw, period_seed, tied_statistic


def _events(path, seed=3):
    # two cohesive groups of 10 over three years (planted partition, common practice)
    rng = np.random.default_rng(seed)
    rows = []
    for year in (2017, 2018):
        for g in range(2):
            group = [f"g{g}-{i}" for i in range(10)]
            for i, a in enumerate(group):
                for b in group[i + 1:]:
                    if rng.random() < 0.5:
                        rows.append((a, b, f"{year}-06-01"))
        rows.append(("g0-0", "g1-0", f"{year}-07-01"))
    pd.DataFrame(rows, columns=["a", "b", "d"]).to_csv(path, index=False)


def test_large_periods_are_tested_from_one_start_and_the_p_value_is_the_brute_force_one(tmp_path, monkeypatch):
    # Source: brute force of the Monte Carlo test's definition (Phipson & Smyth 2010):
    # the observed statistic and every null draw refitted here, one by one, by the
    # one-start procedure; the stored p-value must be (b + 1) / (m + 1) of those.
    monkeypatch.setattr(pipeline_fitting, "ONE_START_LIMIT", 5)
    _events(tmp_path / "e.csv")
    draws = 3
    with Study(tmp_path / "s.db", workers=1) as study:
        study.import_events(tmp_path / "e.csv", source="a", target="b", date="d", undirected=True)
        result = study.fit(positions=2, draws=draws)
        assert [n for n in result["notes"] if n.startswith("fit test:")] == [
            "fit test: periods of up to 20 tied actors exceed 5, so the data and every null draw are refitted "
            "from one (spectral) start instead of five; the test stays exact (the same procedure on both); "
            "pass --restarts to choose"]
        stored = study.fit_periods()
        snaps = {s.period: s for s in study.store.snapshots(list(stored["period"]))}
        for period, diag, p_value in zip(stored["period"], stored["diagnostics"], stored["p_value"]):
            assert "one (spectral) start" in diag["fit_test"]["note"]
            mats, flags = _prepare(snaps[period].matrices, snaps[period].directed)
            procedure = Procedure(method="sbm", positions=2, seed=0, options={"restarts": 1})
            observed = tied_statistic(mats, flags, procedure)
            null = [tied_statistic(null_draw(mats, flags, "ties", np.random.default_rng(s)), flags, procedure)
                    for s in task_seeds(period_seed(0, period), draws)]
            assert diag["fit_test"]["observed"] == observed
            assert p_value == monte_carlo_p(observed, null)[0]
        # below the limit: five starts, no note
        monkeypatch.setattr(pipeline_fitting, "ONE_START_LIMIT", 8000)
        assert not [n for n in study.fit(positions=2, draws=draws)["notes"] if n.startswith("fit test:")]
        assert "note" not in study.fit_periods()["diagnostics"].iloc[0]["fit_test"]
