"""The structure-test task: same answers in this process or a pool, BLAS limits restored, pool only when it pays."""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp
from threadpoolctl import threadpool_info

from tracker.api import Study
from tracker.pipeline import structures as tasks
from tracker.structures.coreperiphery import continuous_coreness, discrete_core_periphery


def _core_periphery(n_core: int, n_edge: int) -> np.ndarray:
    # The perfect core-periphery pattern of Borgatti & Everett (1999): core tied to all, periphery to the core only.
    n = n_core + n_edge
    a = np.zeros((n, n))
    a[:n_core, :] = a[:, :n_core] = 1
    np.fill_diagonal(a, 0)
    return a


def test_structure_tests_match_the_direct_fits_and_restore_blas_threads():
    a = sp.csr_array(_core_periphery(3, 7))
    image = np.array([[1.0, 1.0], [1.0, 0.0]])
    before = [(pool["internal_api"], pool["num_threads"]) for pool in threadpool_info()]
    (period, rel, best, checks), = tasks.structure_tests("2001", [("ties", image, a)], 0, 5)
    after = [(pool["internal_api"], pool["num_threads"]) for pool in threadpool_info()]
    assert before == after
    assert (period, rel, best.ideal, best.mismatches) == ("2001", "ties", "core-periphery", 0)
    assert checks == (discrete_core_periphery(a, seed=5)[1], continuous_coreness(a)[1])
    assert checks[0] == 1.0  # a perfect pattern correlates 1 with its ideal (Borgatti & Everett 1999)


def test_structure_workers_count_the_ties_of_every_task(monkeypatch):
    small = sp.csr_array(np.eye(4)[::-1])  # 4 ties
    task = ("2001", [("a", None, small), ("b", None, small)], 0, 0)
    assert tasks.structure_workers([task, task]) == 1
    monkeypatch.setattr(tasks, "POOL_TIES", 16)  # 16 ties in all: the pool pays from here
    assert tasks.structure_workers([task, task]) is None
    assert tasks.structure_workers([task]) == 1
    assert tasks.structure_workers([("2001", [("a", None, None)], 0, 0)]) == 1  # no raw ties: no core-periphery work


def test_structures_take_the_fit_periods_already_read(tmp_path):
    rows = [(f"core {i}", f"edge {j}", y) for y in (2019, 2020) for i in range(3) for j in range(6)]
    rows += [(f"core {i}", f"core {j}", y) for y in (2019, 2020) for i in range(3) for j in range(3) if i != j]
    pd.DataFrame(rows, columns=["a", "b", "y"]).to_csv(tmp_path / "cp.csv", index=False)
    with Study(tmp_path / "s.db", workers=1) as study:
        study.import_events(tmp_path / "cp.csv", source="a", target="b", date="y")
        study.fit(positions=2, draws=0)
        fp = study.store.fit_periods(study.fit_info()["id"])
        plain = study.structures(draws=19)
        given = study.structures(draws=19, fit_periods=fp)
    pd.testing.assert_frame_equal(plain, given)
    assert len(plain) == 2 and plain["cp_correlation"].notna().all()
