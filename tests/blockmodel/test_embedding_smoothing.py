"""Evolutionary (smoothed) structural positions above the exact limit: the change penalty in the embedding."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.spatial.distance import cdist
from sklearn.metrics import adjusted_rand_score

from tracker.blockmodel.embedding import (
    embed_profiles,
    profile_classes,
    profile_matrix,
    smoothed_embedded_positions,
    within_sum_of_squares,
)
from tracker.blockmodel.evolution import penalised
from tracker.blockmodel.structural import StructuralPositions
from tracker.longitudinal.smoothing import evolutionary_partitions

CYCLE = np.roll(np.eye(4), 1, axis=1)  # position 0 sends to 1, 1 to 2, 2 to 3, 3 to 0


def _planted(n, degree, seed, truth=None):
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, 4, n) if truth is None else truth
    prob = np.where(CYCLE[np.ix_(truth, truth)] == 1, 0.8, 0.1)
    prob *= degree / prob.sum(axis=1, keepdims=True).mean()
    a = (rng.random((n, n)) < prob).astype(float)
    np.fill_diagonal(a, 0)
    return sp.csr_array(a), truth


def test_augmented_distances_are_the_penalised_distances_of_the_exact_method():
    # Source: brute force of the definition -- tracker.blockmodel.evolution.penalised
    # (delta + lambda [prior_i != prior_j], both known) on embedded squared distances
    # (scipy cdist), against the squared distances of the augmented coordinates.
    a, truth = _planted(60, 8, seed=7)
    profiles = profile_matrix([a], [True])
    coords, _, _ = embed_profiles(profiles, 6, seed=0)
    lam = 0.37
    aug = np.hstack([coords, np.sqrt(lam / 2.0) * np.eye(4)[truth]])
    exact = penalised(cdist(coords, coords, "sqeuclidean"), truth, lam)
    assert np.allclose(cdist(aug, aug, "sqeuclidean"), exact)


def test_within_sum_of_squares_matches_sklearn_kmeans_inertia():
    # Source: scikit-learn's KMeans.inertia_ (weighted within-cluster sum of squares).
    from sklearn.cluster import KMeans

    rng = np.random.default_rng(3)
    x = rng.normal(size=(50, 3))
    w = rng.integers(1, 4, 50)
    km = KMeans(3, n_init=2, random_state=0).fit(x, sample_weight=w)
    assert within_sum_of_squares(x, w, km.labels_) == pytest.approx(km.inertia_, rel=1e-9)


def test_penalty_keeps_actors_in_their_previous_positions_and_zero_changes_nothing():
    # Seeded planted data (sparse: mean degree 4 over 240 actors).  The previous
    # partition is the planted one.  Bounds: with c = 0 the labels are those of
    # the unsmoothed embedding; a huge c reproduces the previous partition
    # exactly (ARI 1, sklearn); c = 0.5 agrees with it at least as well as c = 0.
    a, truth = _planted(240, 4, seed=11)
    profiles = profile_matrix([a], [True])
    classes, reps, counts = profile_classes(profiles)
    coords, _, _ = embed_profiles(profiles[reps], 16, seed=0)
    free, lam0 = smoothed_embedded_positions(coords, classes, counts, truth, 0.0, 4, seed=0)
    assert lam0 == 0.0
    unsmoothed = StructuralPositions(4, exact_limit=10, components=16).fit([a], [True]).labels_
    assert adjusted_rand_score(free, unsmoothed) == 1.0
    half, lam = smoothed_embedded_positions(coords, classes, counts, truth, 0.5, 4, seed=0)
    stuck, _ = smoothed_embedded_positions(coords, classes, counts, truth, 1e6, 4, seed=0)
    assert lam > 0
    assert adjusted_rand_score(stuck, truth) == 1.0
    assert adjusted_rand_score(half, truth) >= adjusted_rand_score(free, truth)


def test_smoothed_structural_fit_above_the_limit_runs_and_says_so():
    # The exact limit is forced low (20 actors) so that the switch runs on small data;
    # below it the exact smoothed method runs and reports no approximation.
    truth = np.repeat(np.arange(4), 30)
    periods = [_planted(120, 12, seed=s, truth=truth)[0] for s in (21, 22, 23)]
    actors = [f"a{i}" for i in range(120)]
    parts = evolutionary_partitions([[m] for m in periods], [True], [actors] * 3, 4, method="structural",
                                    change_penalty=0.5, exact_limit=20, components=8)
    assert all(p.n_positions == 4 for p in parts)
    later = parts[1].diagnostics
    assert "change penalty" in later["approximation"]["method"]
    assert "exceed the exact limit of 20" in later["approximation"]["note"]
    exact = evolutionary_partitions([[m] for m in periods], [True], [actors] * 3, 4, method="structural",
                                    change_penalty=0.5)
    assert "approximation" not in exact[1].diagnostics
    # both follow the planted positions on this clear structure (bound: ARI >= 0.8)
    for p in parts + exact:
        assert adjusted_rand_score(p.labels, truth) >= 0.8
