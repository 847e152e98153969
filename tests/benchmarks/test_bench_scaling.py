"""Checks of the scaling benchmark's arithmetic (the exponent fits, the speed-up, the table).

The benchmark itself is not part of the test run; these check the numbers it
prints against exact power laws (brute force of the definition: on
``t = c * n^a * T^b`` a least-squares fit on logs must return ``a`` and ``b``)
and against numpy's own ``polyfit``.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

_PATH = Path(__file__).with_name("bench_scaling.py")
_SPEC = importlib.util.spec_from_file_location("bench_scaling", _PATH)
bench = importlib.util.module_from_spec(_SPEC)
_SPEC.loader.exec_module(bench)


def _rows(a: float, b: float, am: float = 0.1, bm: float = 0.3, noise: float = 0.0, seed: int = 0) -> list[dict]:
    rng = np.random.default_rng(seed)
    rows = []
    for n in (300, 1200, 5000):
        for t in (5, 20, 50):
            wobble = float(np.exp(noise * rng.standard_normal()))
            rows.append({"actors": n, "periods": t, "events": 10, "step": "fit", "status": "ok",
                         "baseline_s": 2.0, "seconds": 2.0 * 0.01 * n**a * t**b * wobble,
                         "ratio": 0.01 * n**a * t**b * wobble, "peak_mb": 200 * n**am * t**bm})
    return rows


def test_joint_exponents_recover_an_exact_power_law():
    (a, b), (am, bm) = bench.joint_exponents(_rows(1.5, 0.8))
    assert a == pytest.approx(1.5, abs=1e-9) and b == pytest.approx(0.8, abs=1e-9)
    assert am == pytest.approx(0.1, abs=1e-9) and bm == pytest.approx(0.3, abs=1e-9)


def test_joint_exponents_stay_close_under_noise():
    # 10% multiplicative noise on 9 sizes spanning a factor 17 and 10: the slopes
    # move by a few hundredths (largest deviation over seeds 0-19: 0.074).
    (a, b), _ = bench.joint_exponents(_rows(1.2, 0.5, noise=0.1, seed=3))
    assert abs(a - 1.2) < 0.15 and abs(b - 0.5) < 0.15


def test_joint_exponents_need_two_sizes_on_each_axis():
    rows = [r for r in _rows(1.0, 1.0) if r["periods"] == 20]
    assert bench.joint_exponents(rows) is None


def test_per_axis_slopes_match_numpy_polyfit():
    rows = _rows(1.3, 0.7, noise=0.2, seed=5)
    lines = bench.exponents(rows)
    part = [r for r in rows if r["periods"] == 20]
    want = np.polyfit(np.log([r["actors"] for r in part]), np.log([r["ratio"] for r in part]), 1)[0]
    line = next(x for x in lines if x.startswith("fit") and "(at 20 periods)" in x)
    assert f"actors^{want:.2f}," in line
    assert any("(joint, 9 sizes)" in x for x in lines)


def test_speedup_and_table_cells():
    row = {"actors": 300, "periods": 5, "events": 3719, "step": "fit", "status": "ok", "baseline_s": 2.0,
           "seconds": 5.0, "ratio": 2.5, "peak_mb": 210.0, "seconds_1": 9.0, "status_1": "ok", "workers": 2}
    assert bench.speedup(row) == pytest.approx(1.8)
    assert bench.speedup({**row, "seconds_1": None}) is None
    assert bench.speedup({k: v for k, v in row.items() if k != "seconds_1"}) is None
    text = bench.table([row, {**row, "step": "import", "status": ">600 s"}])
    assert text.startswith("| actors x periods | events | baseline | import | fit (defaults: dynamic) |")
    assert "| 300 x 5 | 3,719 | 2.00 s |" in text
    assert "5.0 s = 2.5x, 210 MB, 2 vs 1 worker 1.80x" in text
    assert ">600 s" in text


def test_planted_events_have_the_stated_degree(tmp_path):
    # degree 5: 2.5 events per actor and period, less the self-ties dropped (about 1/n of them)
    path = tmp_path / "e.csv"
    total = bench.make_events(path, 400, 3)
    assert 3 * 1000 * 0.98 <= total <= 3 * 1000
    assert sum(1 for _ in path.open()) == total + 1


def test_peak_memory_is_the_step_s_own_not_its_parent_s(tmp_path):
    # A child started from a parent holding about 400 MB must not report the
    # parent's size (getrusage's ru_maxrss survives exec on Linux).
    import subprocess
    import sys

    code = ("import numpy, subprocess, sys; big = numpy.ones(50_000_000); "
            f"print(subprocess.run([sys.executable, {str(_PATH)!r}, '--peak'], capture_output=True, "
            "text=True).stdout)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120).stdout
    assert 0 < float(out.strip()) < 300


def test_move_recovery_counts_planted_moves_by_definition():
    import pandas as pd

    # Planted: actor 0 moves into 2001, actor 2 into 2002 (brute force of the definition:
    # a move is a change of planted position from the period before).
    truth = np.array([[0, 1, 2], [1, 1, 2], [1, 1, 0]])
    moves = pd.DataFrame({"actor": ["actor 0", "actor 1", "actor 2"], "from_period": ["2000", "2000", "2000"],
                          "to_period": ["2001", "2001", "2002"], "confidence": [0.9, 0.3, 0.85]})
    got = bench.move_recovery(moves, truth)
    # actor 2's move spans 2000 -> 2002 (no ties in 2001): the planted 2002 move lies in the gap
    assert got["planted_moves"] == 2
    assert got["precision"] == pytest.approx(2 / 3)
    assert got["recall"] == pytest.approx(1.0)
    assert got["sure"] == 2 and got["sure_real"] == pytest.approx(1.0)
    assert got["mean_confidence"] == pytest.approx((0.9 + 0.3 + 0.85) / 3)


def test_make_events_plants_the_stated_share_of_moves(tmp_path):
    csv = tmp_path / "events.csv"
    bench.make_events(csv, 2000, 6, seed=3)
    truth = np.load(bench.truth_path(csv))
    assert truth.shape == (6, 2000)
    share = (truth[1:] != truth[:-1]).mean()
    assert abs(share - bench.MOVE_RATE) < 0.004  # 10,000 Bernoulli(0.01) draws: sd 0.001
