"""select_dynamic runs its candidate numbers of positions as parallel tasks, with the serial answer."""

from __future__ import annotations

import networkx as nx
import numpy as np
import scipy.sparse as sp

from tracker.execution import configured
from tracker.models.dynamic import DynamicSBM, select_dynamic


def _periods():
    # networkx's planted partition generator: 3 groups of 12, p_in 0.6, p_out 0.03, two periods
    out = []
    for seed in (1, 2):
        g = nx.planted_partition_graph(3, 12, 0.6, 0.03, seed=seed)
        out.append(([f"a{i}" for i in range(36)], [sp.csr_array(nx.to_scipy_sparse_array(g, dtype=float))], [False]))
    return out


def test_candidates_in_parallel_equal_the_serial_fits_and_icl_picks_the_planted_three(pool_for_every_batch):
    # Source: the planted partition of networkx.planted_partition_graph (3 groups);
    # reference: each candidate fitted alone, serially, by DynamicSBM.
    periods = _periods()
    with configured(workers=2):
        model, table = select_dynamic(periods, (2, 3), seed=5)
    with configured(workers=1):
        serial = [DynamicSBM(k, seed=5).fit(periods) for k in (2, 3)]
    assert [row["n_positions"] for row in table] == [2, 3]
    assert [row["icl"] for row in table] == [fit.icl_ for fit in serial]
    assert [row["chosen"] for row in table] == [False, True]
    assert model.n_positions == 3
    truth = np.repeat(np.arange(3), 12)
    for t in range(2):
        assert len({(a, b) for a, b in zip(model.labels_[t], truth)}) == 3  # the planted groups, relabelled
