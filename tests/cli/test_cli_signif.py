"""The fit test and the structure verdicts through the CLI runner, reading the study back."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
from scipy.stats import false_discovery_control

from tests.cli.test_cli_fit import _run, planted_events
from tracker.api import Study


def _study(tmp_path, new_db):
    planted_events(tmp_path / "events.csv")
    db = new_db("s.db")
    _run(db, "import", str(tmp_path / "events.csv"), "--source", "a", "--target", "b", "--date", "d", "--relation", "kind")
    return db


def test_fit_test_is_stored_with_its_null_model_draws_and_q_values(tmp_path, new_db):
    db = _study(tmp_path, new_db)
    _run(db, "fit", "--method", "structural", "--positions", "3", "--draws", "9", "--null", "degrees", "--smooth", "off")
    with Study(db) as study:
        fp = study.fit_periods()
    assert fp["null_model"].tolist() == ["degrees"] * 3 and fp["draws"].tolist() == [9] * 3
    # p = (b + 1) / (draws + 1): multiples of 1/10 in [0.1, 1]
    assert np.allclose(fp["p_value"] * 10, np.round(fp["p_value"] * 10)) and (fp["p_value"] >= 0.1).all()
    # reference: scipy's Benjamini-Hochberg
    assert np.allclose(fp["q_value"], false_discovery_control(fp["p_value"], method="bh"))
    assert all(d["fit_test"]["statistic"] == "density-correlation" for d in fp["diagnostics"])
    exported = pd.read_csv(io.StringIO(_run(db, "export", "fit-periods")))
    assert {"p_value", "q_value", "draws", "null_model"} <= set(exported.columns)


def test_planted_positions_pass_the_default_fit_test(tmp_path, new_db):
    db = _study(tmp_path, new_db)
    _run(db, "fit", "--positions", "3", "--draws", "19")
    with Study(db) as study:
        fp = study.fit_periods()
    assert fp["null_model"].tolist() == ["ties"] * 3
    assert (fp["p_value"] == 0.05).all()  # no null draw reaches a perfect planted image


def test_structures_keep_their_columns_and_add_the_verdicts(tmp_path, new_db):
    db = _study(tmp_path, new_db)
    _run(db, "fit", "--positions", "3", "--draws", "0")
    table = pd.read_csv(io.StringIO(_run(db, "structures", "--format", "csv", "--draws", "19")))
    assert {"period", "relation", "ideal", "variant", "mismatches", "fit", "p_value", "roles", "changed",
            "cp_correlation", "coreness_correlation", "q_value", "fit_q_value", "significant",
            "structure"} <= set(table.columns)
    # no fit test was run: the verdict rests on the ideal's own test
    assert table["fit_q_value"].isna().all()
    expected = np.where(table["q_value"] <= 0.05, table["ideal"], "no clear structure")
    assert table["structure"].tolist() == expected.tolist()
