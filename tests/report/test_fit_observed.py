"""The fit chart's correlations are the fit test's statistic (actors with a tie only)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp

from tests.cli.test_cli_fit import planted_events
from tracker.api import Study
from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.goodness import density_correlation
from tracker.blockmodel.partition import Partition
from tracker.report import charts


def test_fit_chart_observed_leaves_isolates_out(tmp_path):
    # Source: the definition of the fit test's statistic (tracker.inference.fit_test:
    # the density correlation over the actors with a tie), recomputed here from the
    # stored memberships and the period's ties with block_stats; the planted data have
    # two observers present but never tied (isolates).
    truth = planted_events(tmp_path / "events.csv", years=(2019, 2020), isolated=4)
    # stray ties, so that the fit is not perfect (a perfect fit is 1 either way)
    rng = np.random.default_rng(5)
    names = sorted(truth)
    stray = [(names[i], names[j], f"{year}-03-15", "coop") for year in (2019, 2020)
             for i, j in rng.integers(0, len(names), size=(12, 2)) if i != j]
    pd.concat([pd.read_csv(tmp_path / "events.csv"), pd.DataFrame(stray, columns=["a", "b", "d", "kind"])]).to_csv(
        tmp_path / "events.csv", index=False)
    with Study(tmp_path / "s.db") as study:
        study.import_events(tmp_path / "events.csv", source="a", target="b", date="d", relation="kind")
        study.import_actors(tmp_path / "actors.csv")
        study.fit(method="structural", positions=3, draws=4, seed=3)
        study.align()
        tables, periods, _ = study.report_tables(structure_draws=9)
        fits = study.fit_periods().set_index("period")
        members = study.memberships()
        snaps = {p: study.snapshot(p) for p in periods}
    observed = tables["permutation"].set_index("period")["observed"]
    left = tables["diagnostics"].set_index("period")["density_correlation"]
    for period in periods:
        snap = snaps[period]
        part = members[members["period"] == period].set_index("actor").loc[list(snap.actors)]
        tied = ~part["isolate"].to_numpy()
        assert (~tied).sum() == 4
        idx = np.flatnonzero(tied)
        _, labels = np.unique(part["position"].to_numpy()[idx], return_inverse=True)
        mats = [sp.csr_array(m)[idx][:, idx] for m in snap.matrices]
        expected = density_correlation(block_stats(mats, snap.directed, Partition(labels, int(labels.max()) + 1)))
        assert observed[period] == expected
        assert left[period] == pytest.approx(expected, abs=1e-12)  # the left panel: same actors
        # the table's value includes the isolates' empty blocks and is another number
        assert abs(fits.loc[period, "density_correlation"] - expected) > 1e-6
    spec = charts.fit_chart(tables["diagnostics"], tables["permutation"], periods).to_dict()
    assert "Density correlation, actors with a tie" in str(spec)
    assert "Observed fit" not in str(spec)
