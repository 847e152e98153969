"""The method registry and find_positions: isolates, numbering, invariance, automatic K."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.metrics import adjusted_rand_score

from tracker.blockmodel.partition import Partition
from tracker.blockmodel.positions import METHODS, find_positions, register_method
from tracker.blockmodel.selection import choose_k
from tracker.errors import UsageError


def _planted(sizes, p_in, p_out, rng, n_isolates=0):
    """Cohesive groups (ties inside with p_in, across with p_out), shuffled, plus isolates."""
    truth = np.repeat(np.arange(len(sizes)), sizes)
    truth = truth[rng.permutation(truth.size)]
    prob = np.where(truth[:, None] == truth[None, :], p_in, p_out)
    a = np.triu((rng.random(prob.shape) < prob).astype(float), 1)
    a = a + a.T
    n = truth.size + n_isolates
    full = np.zeros((n, n))
    full[: truth.size, : truth.size] = a
    order = rng.permutation(n)  # isolates scattered among the others
    full = full[np.ix_(order, order)]
    labels = np.concatenate([truth, np.full(n_isolates, -1)])[order]
    return sp.csr_array(full), labels


def test_isolates_get_their_own_last_position():
    rng = np.random.default_rng(0)
    a, truth = _planted([6, 6], 1.0, 0.0, rng, n_isolates=3)
    part = find_positions([a], [False], 2, method="optimize", restarts=5)
    iso = truth == -1
    assert part.isolates == 2 and part.n_positions == 3
    assert np.all(part.labels[iso] == part.isolates)
    assert np.all(part.labels[~iso] != part.isolates)
    # Tied actors: the planted groups exactly (scikit-learn adjusted Rand index).
    assert adjusted_rand_score(truth[~iso], part.labels[~iso]) == 1.0
    assert part.diagnostics["tied_positions"] == 2
    assert part.diagnostics["fit"]["perfect_fit"] is True


def test_isolate_in_one_relation_but_tied_in_another_is_not_an_isolate():
    a = sp.csr_array(np.array([[0, 1, 0], [1, 0, 0], [0, 0, 0]], dtype=float))
    b = sp.csr_array(np.array([[0, 0, 0], [0, 0, 0], [1, 0, 0]], dtype=float))
    part = find_positions([a, b], [False, True], 2, method="optimize", restarts=2)
    assert part.isolates is None and part.n_positions == 2


def test_all_isolates_and_no_actor():
    part = find_positions([sp.csr_array((4, 4))], [True], 3, method="optimize")
    assert part.labels.tolist() == [0, 0, 0, 0] and part.isolates == 0 and part.n_positions == 1
    empty = find_positions([sp.csr_array((0, 0))], [True], 3, method="optimize")
    assert empty.n == 0 and empty.n_positions == 0


def test_positions_numbered_by_size_then_first_actor():
    # Disjoint cliques of sizes 2, 4, 2 (networkx generators).
    g = nx.disjoint_union_all([nx.complete_graph(2), nx.complete_graph(4), nx.complete_graph(2)])
    a = nx.to_scipy_sparse_array(g, nodelist=range(8), dtype=float)
    part = find_positions([a], [False], 3, method="optimize", restarts=10)
    assert part.labels.tolist() == [1, 1, 0, 0, 0, 0, 2, 2]


def test_invariant_under_relabelling_of_actors():
    rng = np.random.default_rng(3)
    a, truth = _planted([8, 10, 7], 0.9, 0.05, rng, n_isolates=2)
    first = find_positions([a], [False], 3, method="optimize", restarts=20)
    perm = rng.permutation(a.shape[0])
    b = sp.csr_array(a.toarray()[np.ix_(perm, perm)])
    second = find_positions([b], [False], 3, method="optimize", restarts=20)
    # Same partition of the same actors: adjusted Rand index 1 (scikit-learn),
    # and the deterministic numbering gives each actor the same label when
    # positions differ in size.
    assert adjusted_rand_score(first.labels[perm], second.labels) == 1.0
    np.testing.assert_array_equal(first.labels[perm], second.labels)
    assert first.isolates == second.isolates


def test_auto_picks_the_planted_number_of_positions():
    rng = np.random.default_rng(11)
    a, truth = _planted([12, 12, 12], 0.8, 0.03, rng, n_isolates=2)
    part = find_positions([a], [False], "auto", method="optimize", restarts=10, k_range=(2, 6))
    table = part.diagnostics["auto"]
    assert [row["k"] for row in table] == [2, 3, 4, 5, 6]
    assert sum(row["chosen"] for row in table) == 1
    chosen = next(row for row in table if row["chosen"])
    assert chosen["k"] == 3
    assert part.diagnostics["tied_positions"] == 3
    tied = truth >= 0
    assert adjusted_rand_score(truth[tied], part.labels[tied]) == 1.0
    assert set(table[0]) == {"k", "inconsistencies", "density_correlation", "chosen"}
    assert "0.05" in part.diagnostics["auto_rule"]
    # The rule is the one stated in tracker.blockmodel.selection.
    assert choose_k([r["k"] for r in table], [r["density_correlation"] for r in table]) == 3


def test_choose_k_rule():
    # Elbow: the first K whose successor gains less than 0.05 (rule stated in selection.py).
    assert choose_k([2, 3, 4], [0.5, 0.54, 0.9]) == 2
    assert choose_k([2, 3, 4], [0.5, 0.7, 0.9]) == 4
    assert choose_k([1], [float("nan")]) == 1


def test_requested_positions_beyond_tied_actors_are_capped():
    a = sp.csr_array(np.array([[0, 1, 0, 0], [0, 0, 1, 0], [0, 0, 0, 0], [0, 0, 0, 0]], dtype=float))
    part = find_positions([a], [True], 5, method="optimize", restarts=2)
    assert part.diagnostics["tied_positions"] == 3
    assert "3 tied actors" in part.diagnostics["note"]
    assert part.isolates == 3 and part.labels[3] == 3


def test_per_actor_options_are_cut_to_tied_actors():
    rng = np.random.default_rng(4)
    a, truth = _planted([5, 5], 1.0, 0.0, rng, n_isolates=2)
    prior = np.where(truth >= 0, truth, -1)
    part = find_positions([a], [False], 2, method="optimize", restarts=2, prior_labels=prior, change_penalty=1.0)
    tied = truth >= 0
    assert adjusted_rand_score(truth[tied], part.labels[tied]) == 1.0


def test_unknown_method_lists_known_ones():
    a = sp.csr_array(np.ones((3, 3)) - np.eye(3))
    with pytest.raises(UsageError, match="structural.*optimize"):
        find_positions([a], [True], 2, method="magic")
    with pytest.raises(UsageError, match="n_positions"):
        find_positions([a], [True], "many", method="optimize")


def test_registry_lazy_entries_and_registration():
    assert {"structural", "concor", "regular", "optimize"} <= set(METHODS)

    class ByDegree:
        """Splits actors at the median degree (a toy method)."""

        def __init__(self, n_positions, *, seed=0):
            self.n_positions = n_positions

        def fit(self, matrices, directed):
            degree = np.asarray(sum(abs(m).sum(axis=1) for m in matrices)).ravel()
            self.labels_ = (degree > np.median(degree)).astype(int)
            return self

    register_method("by-degree", ByDegree)
    register_method("broken", "tracker.blockmodel.no_such_module:Nothing")
    try:
        star = nx.to_scipy_sparse_array(nx.star_graph(4), nodelist=range(5), dtype=float)
        part = find_positions([star], [False], 2, method="by-degree")
        assert part.labels.tolist() == [1, 0, 0, 0, 0]  # the hub alone; larger position first
        with pytest.raises(UsageError, match="not available"):
            find_positions([star], [False], 2, method="broken")
    finally:
        del METHODS["by-degree"]
        del METHODS["broken"]


def test_structural_method_through_the_registry():
    # Two disjoint cliques: structurally equivalent groups (Lorrain & White 1971).
    pytest.importorskip("tracker.blockmodel.structural")
    g = nx.disjoint_union(nx.complete_graph(4), nx.complete_graph(4))
    a = nx.to_scipy_sparse_array(g, nodelist=range(8), dtype=float)
    part = find_positions([a], [False], 2)
    assert isinstance(part, Partition)
    assert part.labels.tolist() == [0, 0, 0, 0, 1, 1, 1, 1]
    assert part.diagnostics["method"] == "structural"


def test_auto_positions_for_sbm_use_icl():
    # Planted 3-position SBM (Holland, Laskey & Leinhardt 1983); the ICL of
    # Daudin, Picard & Robin (2008) should pick 3, and the per-K table must show why.
    import numpy as np
    import scipy.sparse as sp

    from tracker.blockmodel.positions import find_positions

    rng = np.random.default_rng(4)
    truth = np.repeat(np.arange(3), 30)
    prob = np.where(truth[:, None] == truth[None, :], 0.5, 0.03)
    adj = np.triu(rng.random((90, 90)) < prob, 1)
    adj = (adj | adj.T).astype(float)
    part = find_positions([sp.csr_array(adj)], [False], "auto", method="sbm", k_range=(1, 5), restarts=2,
                          model="bernoulli")
    table = part.diagnostics["auto"]
    chosen = [row["k"] for row in table if row["chosen"]]
    assert chosen == [3] and all("icl" in row for row in table)
    assert max(table, key=lambda r: r["icl"])["k"] == 3
    assert "ICL" in part.diagnostics["auto_rule"]
