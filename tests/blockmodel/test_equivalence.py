"""Equivalence measures checked against scipy/numpy references and brute force."""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.distance import euclidean, pdist, squareform
from sklearn.metrics import adjusted_rand_score

from tests.helpers.partitions import set_partitions
from tracker.blockmodel.equivalence import (
    maximal_regular_partition,
    rege_similarities,
    structural_correlations,
    structural_distances,
)
from tracker.errors import UsageError

# ---------------------------------------------------------------------------
# builders


def _random_relations(rng, n, n_rel, density=0.35, values=(1, 2, 3), real=False):
    """Random tie matrices with zero diagonal; undirected ones symmetric."""
    mats, dirs = [], []
    for _ in range(n_rel):
        is_dir = bool(rng.integers(2))
        if real:
            a = rng.uniform(0.1, 5.0, (n, n)) * (rng.random((n, n)) < density)
        else:
            a = rng.choice(values, (n, n)) * (rng.random((n, n)) < density)
        np.fill_diagonal(a, 0)
        if not is_dir:
            a = np.triu(a, 1)
            a = a + a.T
        mats.append(sp.csr_array(a.astype(float)))
        dirs.append(is_dir)
    return mats, dirs


@st.composite
def relations(draw, max_n=7, real=False):
    n = draw(st.integers(2, max_n))
    n_rel = draw(st.integers(1, 3))
    seed = draw(st.integers(0, 2**32 - 1))
    density = draw(st.sampled_from([0.2, 0.4, 0.7]))
    return _random_relations(np.random.default_rng(seed), n, n_rel, density, real=real)


def _pair_profiles(mats, dirs, i, j):
    """Explicit profiles of i and j with entries k = i, j removed (brute force)."""
    n = mats[0].shape[0]
    keep = [k for k in range(n) if k not in (i, j)]
    pi, pj = [], []
    for x, d in zip(mats, dirs):
        a = x.toarray()
        pi.append(a[i, keep])
        pj.append(a[j, keep])
        if d:
            pi.append(a[keep, i])
            pj.append(a[keep, j])
    return np.concatenate(pi), np.concatenate(pj)


# ---------------------------------------------------------------------------
# structural distances


@settings(max_examples=60, deadline=None)
@given(relations())
def test_distances_equal_scipy_euclidean_on_explicit_profiles(rel):
    # Source: scipy.spatial.distance.euclidean on the profiles of Burt (1976) /
    # Wasserman & Faust (1994) sec. 9.3, built by brute force for each pair.
    mats, dirs = rel
    n = mats[0].shape[0]
    got = structural_distances(mats, dirs)
    for i, j in itertools.combinations(range(n), 2):
        pi, pj = _pair_profiles(mats, dirs, i, j)
        assert got[i, j] == pytest.approx(euclidean(pi, pj), abs=1e-9)
        assert got[j, i] == got[i, j]
    assert np.all(np.diag(got) == 0)


@settings(max_examples=30, deadline=None)
@given(relations(real=True))
def test_distances_real_values_equal_brute_force(rel):
    # Source: scipy.spatial.distance.euclidean on explicit profiles; real weights.
    mats, dirs = rel
    n = mats[0].shape[0]
    got = structural_distances(mats, dirs)
    for i, j in itertools.combinations(range(n), 2):
        pi, pj = _pair_profiles(mats, dirs, i, j)
        assert got[i, j] == pytest.approx(euclidean(pi, pj), rel=1e-7, abs=1e-6)


def test_distances_equal_pdist_where_nothing_is_left_out():
    # Source: scipy.spatial.distance.pdist on the full row+column profiles.  For a
    # pair with no tie between them the left-out entries are all zero (zero
    # diagonal), so the full-profile distance is the structural distance.
    rng = np.random.default_rng(7)
    mats, dirs = _random_relations(rng, 25, 3, density=0.15)
    blocks = []
    for x, d in zip(mats, dirs):
        a = x.toarray()
        blocks.extend([a, a.T] if d else [a])
    full = squareform(pdist(np.hstack(blocks), "euclidean"))
    linked = sum((x + x.T).toarray() for x in mats) > 0
    got = structural_distances(mats, dirs)
    apart = ~linked
    assert apart.sum() > 100  # the comparison covers many pairs
    np.testing.assert_allclose(got[apart], full[apart], atol=1e-9)


def test_distances_of_structurally_equivalent_actors_are_zero():
    # Source: definition of structural equivalence (Lorrain & White 1971): actors
    # with identical ties to all others, here two members of a complete block.
    a = np.zeros((5, 5))
    a[np.ix_([0, 1], [2, 3, 4])] = 1
    a[0, 1] = a[1, 0] = 1
    d = structural_distances([sp.csr_array(a)], [True])
    assert d[0, 1] == 0
    assert d[0, 2] > 0


# ---------------------------------------------------------------------------
# structural correlations


@settings(max_examples=60, deadline=None)
@given(relations())
def test_correlations_equal_numpy_corrcoef_on_explicit_profiles(rel):
    # Source: numpy.corrcoef on the brute-force profiles of each pair (W&F 1994 sec. 9.3),
    # with 0 where a profile is constant (documented convention).
    mats, dirs = rel
    n = mats[0].shape[0]
    got = structural_correlations(mats, dirs)
    for i, j in itertools.combinations(range(n), 2):
        pi, pj = _pair_profiles(mats, dirs, i, j)
        if pi.size < 2 or np.ptp(pi) == 0 or np.ptp(pj) == 0:
            expected = 0.0
        else:
            expected = np.corrcoef(pi, pj)[0, 1]
        assert got[i, j] == pytest.approx(expected, abs=1e-9)
        assert got[j, i] == got[i, j]
    assert np.all(np.diag(got) == 1)


@settings(max_examples=30, deadline=None)
@given(relations(real=True))
def test_correlations_real_values_equal_corrcoef(rel):
    # Source: numpy.corrcoef on explicit profiles; real weights.
    mats, dirs = rel
    n = mats[0].shape[0]
    got = structural_correlations(mats, dirs)
    for i, j in itertools.combinations(range(n), 2):
        pi, pj = _pair_profiles(mats, dirs, i, j)
        if pi.size < 2 or np.ptp(pi) == 0 or np.ptp(pj) == 0:
            expected = 0.0
        else:
            expected = np.corrcoef(pi, pj)[0, 1]
        assert got[i, j] == pytest.approx(expected, abs=1e-7)


# ---------------------------------------------------------------------------
# relabelling


@settings(max_examples=40, deadline=None)
@given(relations(max_n=9), st.randoms(use_true_random=False))
def test_measures_follow_a_relabelling_of_actors(rel, rnd):
    # Source: definition -- the measures depend on who is tied to whom, not on
    # the order of actors, so D(P X P^T) = P D(X) P^T.
    mats, dirs = rel
    n = mats[0].shape[0]
    perm = np.array(rnd.sample(range(n), n))
    permuted = [sp.csr_array(x.toarray()[np.ix_(perm, perm)]) for x in mats]
    for func in (structural_distances, structural_correlations):
        np.testing.assert_allclose(
            func(permuted, dirs), func(mats, dirs)[np.ix_(perm, perm)], atol=1e-9
        )
    np.testing.assert_allclose(
        rege_similarities(permuted, dirs), rege_similarities(mats, dirs)[np.ix_(perm, perm)], atol=1e-12
    )
    ours = maximal_regular_partition(mats, dirs)
    theirs = maximal_regular_partition(permuted, dirs)
    assert adjusted_rand_score(ours[perm], theirs) == 1.0


# ---------------------------------------------------------------------------
# maximal regular equivalence


def _is_regular(labels, mats, dirs):
    """White & Reitz (1983) definition, checked pair by pair (brute force)."""
    n = labels.size
    for x, d in zip(mats, dirs):
        a = x.toarray() != 0
        sends = [set(labels[np.flatnonzero(a[i])]) for i in range(n)]
        gets = [set(labels[np.flatnonzero(a[:, i])]) for i in range(n)]
        for i, j in itertools.combinations(range(n), 2):
            if labels[i] == labels[j] and (sends[i] != sends[j] or (d and gets[i] != gets[j])):
                return False
    return True


def _refines(fine, coarse):
    """Every class of ``fine`` lies inside one class of ``coarse``."""
    pairs = {(int(a), int(b)) for a, b in zip(fine, coarse)}
    return len(pairs) == len(set(int(a) for a in fine))


@pytest.mark.parametrize("seed", range(25))
def test_maximal_regular_partition_is_the_coarsest_regular_one(seed):
    # Source: brute force over all set partitions of n <= 6 actors, with
    # regularity checked from the definition (White & Reitz 1983): ours must be
    # regular and every regular partition must refine it (it is the maximum).
    rng = np.random.default_rng(seed)
    n = int(rng.integers(3, 7))
    mats, dirs = _random_relations(rng, n, int(rng.integers(1, 3)), density=float(rng.choice([0.2, 0.35, 0.5])))
    ours = maximal_regular_partition(mats, dirs)
    assert _is_regular(ours, mats, dirs)
    regular = [p for p in set_partitions(n) if _is_regular(p, mats, dirs)]
    assert all(_refines(p, ours) for p in regular)
    coarsest = min(regular, key=lambda p: p.max())
    # Both labelings are numbered by first appearance, so they compare directly.
    assert coarsest.tolist() == ours.tolist()


def test_maximal_regular_partition_of_a_connected_graph_is_one_class():
    # Source: Borgatti & Everett (1993) -- in an undirected graph without isolates
    # the single class is regular (every actor has a tie into it), hence maximal.
    # Data: Zachary's karate club as shipped by networkx.
    x = sp.csr_array(nx.to_scipy_sparse_array(nx.karate_club_graph(), weight=None, dtype=float))
    assert np.all(maximal_regular_partition([x], [False]) == 0)


def test_maximal_regular_partition_of_a_directed_tree():
    # Source: definition, worked by hand -- in the out-star 0 -> {1, 2, 3} with
    # 1 -> 4, the root only sends, 1 sends and receives, the leaves only receive;
    # leaves 2 and 3 receive from the root but leaf 4 from 1, so 4 stands apart.
    a = np.zeros((5, 5))
    a[0, [1, 2, 3]] = 1
    a[1, 4] = 1
    labels = maximal_regular_partition([sp.csr_array(a)], [True])
    assert labels.tolist() == [0, 1, 2, 2, 3]


# ---------------------------------------------------------------------------
# REGE


def _rege_brute(mats, dirs, iterations, match):
    """REGE by loops over pairs, ties and candidate matches, from the formula."""
    n = mats[0].shape[0]
    chans = []
    for x, d in zip(mats, dirs):
        a = x.toarray()
        chans.append(a)
        if d:
            chans.append(a.T)
    groups = [list(range(len(chans)))] if match == "pair" else [[c] for c in range(len(chans))]
    sim = np.ones((n, n))
    for _ in range(iterations):
        num = np.zeros((n, n))
        den = np.zeros((n, n))
        for i, j in itertools.product(range(n), repeat=2):
            for grp in groups:
                nb_i = [k for k in range(n) if any(chans[c][i, k] for c in grp)]
                nb_j = [m for m in range(n) if any(chans[c][j, m] for c in grp)]
                for k in nb_i:
                    if not nb_j:
                        den[i, j] += sum(chans[c][i, k] for c in grp)
                        continue
                    cands = []
                    for m in nb_j:
                        mu = sum(min(chans[c][i, k], chans[c][j, m]) for c in grp)
                        nu = sum(max(chans[c][i, k], chans[c][j, m]) for c in grp)
                        cands.append((sim[k, m] * mu, -nu))
                    best = max(cands)
                    num[i, j] += best[0]
                    den[i, j] -= best[1]
        top, bottom = num + num.T, den + den.T
        sim = np.where(bottom > 0, top / np.where(bottom > 0, bottom, 1), 1.0)
        np.fill_diagonal(sim, 1.0)
    return sim


@pytest.mark.parametrize("match", ["pair", "arc"])
@pytest.mark.parametrize("seed", range(6))
def test_rege_equals_the_formula_computed_by_loops(seed, match):
    # Source: brute force of White & Reitz's (1983) REGE formula as stated in the
    # docstring (W&F 1994 sec. 12.4.3), one pair and one tie at a time.
    rng = np.random.default_rng(100 + seed)
    mats, dirs = _random_relations(rng, 7, 2, density=0.3, values=(1, 2, 4))
    got = rege_similarities(mats, dirs, iterations=3, match=match)
    np.testing.assert_allclose(got, _rege_brute(mats, dirs, 3, match), atol=1e-12)


def test_rege_block_boundaries_do_not_change_the_answer(monkeypatch):
    # Source: brute force, as above, with work blocks forced to a few arcs so that
    # one actor's ties are split across blocks.
    import tracker.blockmodel.equivalence as eq

    rng = np.random.default_rng(5)
    mats, dirs = _random_relations(rng, 8, 2, density=0.4)
    expected = _rege_brute(mats, dirs, 2, "pair")
    monkeypatch.setattr(eq, "_REGE_BLOCK", 50)
    np.testing.assert_allclose(rege_similarities(mats, dirs, 2), expected, atol=1e-12)


@pytest.mark.parametrize("seed", range(10))
def test_rege_arc_gives_one_inside_maximal_regular_classes(seed):
    # Source: definition -- on binary data, if i and j are regularly equivalent
    # every tie of one has an equally valued tie of the other to an equivalent
    # actor, so by induction on the steps the arc-wise REGE similarity stays 1.
    rng = np.random.default_rng(200 + seed)
    mats, dirs = _random_relations(rng, 30, 2, density=0.08, values=(1,))
    classes = maximal_regular_partition(mats, dirs)
    sim = rege_similarities(mats, dirs, iterations=4, match="arc")
    same = classes[:, None] == classes[None, :]
    assert np.all(sim[same] == 1.0)
    assert np.all((sim >= 0) & (sim <= 1))
    np.testing.assert_array_equal(sim, sim.T)


def test_rege_on_a_connected_undirected_graph_is_all_ones():
    # Source: definition -- every actor's ties can be matched by any other's when
    # all are equivalent (one class is regular); data: networkx karate club.
    x = sp.csr_array(nx.to_scipy_sparse_array(nx.karate_club_graph(), weight=None, dtype=float))
    np.testing.assert_array_equal(rege_similarities([x], [False]), np.ones((34, 34)))


@settings(max_examples=30, deadline=None)
@given(relations(max_n=8, real=True), st.floats(0.1, 10.0))
def test_rege_does_not_depend_on_the_unit_of_tie_values(rel, scale):
    # Source: the formula -- min and max are homogeneous, so multiplying every
    # value by c > 0 scales numerator and denominator alike.
    mats, dirs = rel
    scaled = [x * scale for x in mats]
    np.testing.assert_allclose(rege_similarities(scaled, dirs), rege_similarities(mats, dirs), atol=1e-9)


# ---------------------------------------------------------------------------
# input checks


def test_inputs_are_checked_once_with_a_usage_error():
    x = sp.csr_array(np.ones((3, 3)))
    with pytest.raises(UsageError):
        structural_distances([x], [True, False])
    with pytest.raises(UsageError):
        structural_correlations([x, sp.csr_array((4, 4))], [True, True])
    with pytest.raises(UsageError):
        rege_similarities([x], [True], match="both")
    with pytest.raises(UsageError):
        rege_similarities([-x], [True])
    with pytest.raises(UsageError):
        maximal_regular_partition([], [])


def test_diagonal_values_are_ignored():
    # Source: the definition leaves the diagonal out; a self-tie must not count.
    rng = np.random.default_rng(3)
    mats, dirs = _random_relations(rng, 6, 2)
    looped = [x + sp.eye_array(6, format="csr") * 3 for x in mats]
    np.testing.assert_array_equal(structural_distances(looped, dirs), structural_distances(mats, dirs))
    np.testing.assert_array_equal(structural_correlations(looped, dirs), structural_correlations(mats, dirs))
