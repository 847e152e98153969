"""Tests of tracker.longitudinal.align: matching, births, ends, splits, merges, increments."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import linear_sum_assignment
from sklearn.metrics import adjusted_rand_score

from tests.helpers.planted import block_density, planted_dynamic, standin_positions
from tracker.blockmodel.partition import Partition
from tracker.blockmodel.positions import find_positions
from tracker.errors import UsageError
from tracker.longitudinal import (
    ISOLATES_TRACK,
    PeriodPositions,
    align,
    max_weight_matching,
    memberships,
    moves,
)


def _pp(period, groups, isolates=None, density=None):
    """PeriodPositions from a list of actor groups (group k = position k)."""
    actors, labels = [], []
    for k, group in enumerate(groups):
        actors += list(group)
        labels += [k] * len(group)
    return PeriodPositions(period, tuple(actors), np.array(labels), len(groups), isolates, density)


def _brute_force_best(weights):
    """Maximum total weight over all one-to-one matchings (definition; Kuhn 1955)."""
    w = np.asarray(weights)
    n_r, n_c = w.shape
    if n_r <= n_c:
        return max(sum(w[i, p[i]] for i in range(n_r)) for p in itertools.permutations(range(n_c), n_r))
    return max(sum(w[p[j], j] for j in range(n_c)) for p in itertools.permutations(range(n_r), n_c))


# -- the matching ---------------------------------------------------------------


@settings(max_examples=60, deadline=None)
@given(
    st.integers(1, 5).flatmap(
        lambda r: st.integers(1, 5).flatmap(
            lambda c: st.lists(
                st.lists(st.floats(0, 1, allow_nan=False), min_size=c, max_size=c), min_size=r, max_size=r
            )
        )
    )
)
def test_matching_is_maximum_by_brute_force(weights):
    # Source: definition of a maximum-weight matching, checked by enumerating every
    # permutation (itertools.permutations); the Hungarian method (Kuhn 1955) must reach it.
    w = np.array(weights)
    rows, cols = max_weight_matching(w)
    assert len(set(rows)) == len(rows) == len(set(cols)) == min(w.shape)
    assert w[rows, cols].sum() == pytest.approx(_brute_force_best(w), abs=1e-9)


def test_matching_agrees_with_scipy_and_treats_nan_as_zero():
    # Source: scipy.optimize.linear_sum_assignment(maximize=True) as the reference.
    rng = np.random.default_rng(3)
    for shape in [(4, 4), (3, 6), (6, 2)]:
        w = rng.random(shape)
        r_ref, c_ref = linear_sum_assignment(w, maximize=True)
        rows, cols = max_weight_matching(w)
        assert w[rows, cols].sum() == pytest.approx(w[r_ref, c_ref].sum())
    w = np.array([[np.nan, 0.2], [0.9, np.nan]])
    rows, cols = max_weight_matching(w)
    assert dict(zip(rows.tolist(), cols.tolist())) == {0: 1, 1: 0}


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 10_000), st.integers(2, 4), st.integers(2, 4))
def test_continuations_maximise_total_jaccard(seed, b1, b2):
    # Source: brute force over permutations of positions, with Jaccard overlap computed
    # here from Python sets (definition); align with weight_overlap=1 and no
    # threshold must pick a matching of maximum total overlap.
    rng = np.random.default_rng(seed)
    actors = [f"x{i}" for i in range(12)]
    l1 = rng.integers(0, b1, len(actors))
    l2 = rng.integers(0, b2, len(actors))
    p1 = PeriodPositions("1", tuple(actors), l1, b1)
    p2 = PeriodPositions("2", tuple(actors), l2, b2)
    al = align([p1, p2], weight_overlap=1.0, link_threshold=0.0, split_threshold=1.1)
    pos1 = [k for k in range(b1) if (l1 == k).any()]
    pos2 = [k for k in range(b2) if (l2 == k).any()]
    sets1 = {k: {a for a, l in zip(actors, l1) if l == k} for k in pos1}
    sets2 = {k: {a for a, l in zip(actors, l2) if l == k} for k in pos2}
    jac = np.array([[len(sets2[q] & sets1[p]) / len(sets2[q] | sets1[p]) for p in pos1] for q in pos2])
    chosen = sum(link.overlap for link in al.links if link.kind == "continue")
    assert chosen == pytest.approx(_brute_force_best(jac))
    for link in al.links:
        if link.kind == "continue":
            q, p = link.to_position, link.from_position
            assert link.overlap == pytest.approx(len(sets2[q] & sets1[p]) / len(sets2[q] | sets1[p]))


# -- events ---------------------------------------------------------------------


def test_births_and_ends_on_hand_built_case():
    # Source: hand-built case; event definitions of Greene, Doyle & Cunningham (2010).
    p1 = _pp("2001", [["a", "b", "c"], ["d", "e", "f"]])
    p2 = _pp("2002", [["a", "b", "c"], ["x", "y", "z"]])  # d, e, f left; x, y, z are new
    al = align([p1, p2])
    assert al.assignment["2001"].tolist() == [1, 2]
    assert al.assignment["2002"].tolist() == [1, 3]
    kinds = [(link.kind, link.from_track, link.to_track) for link in al.links]
    assert ("birth", None, 1) in kinds and ("birth", None, 2) in kinds
    assert ("continue", 1, 1) in kinds
    assert ("birth", None, 3) in kinds
    assert ("end", 2, None) in kinds
    assert al.tracks[2].ended == "2002" and al.tracks[2].last_period == "2001"
    assert al.tracks[3].first_period == "2002" and al.tracks[3].parent is None
    assert al.tracks[1].ended is None and al.tracks[1].last_period == "2002"


def test_split_on_hand_built_case():
    # Source: hand-built case; Jaccard of each half with the whole = 5/10 = 0.5 > 0.3.
    big = [f"a{i}" for i in range(10)]
    other = [f"b{i}" for i in range(6)]
    p1 = _pp("1", [big, other])
    p2 = _pp("2", [other, big[:5], big[5:]])
    al = align([p1, p2])
    a2 = al.assignment["2"].tolist()
    assert a2[0] == 2  # the other group continues
    assert sorted(a2[1:]) == [1, 3]  # one half continues track 1, the other is a new track
    child = 3
    assert al.tracks[child].parent == 1
    split = [link for link in al.links if link.kind == "split"]
    assert len(split) == 1 and split[0].from_track == 1 and split[0].to_track == child
    assert split[0].overlap == pytest.approx(0.5)


def test_merge_on_hand_built_case():
    # Source: hand-built case; each old group has Jaccard 5/10 = 0.5 with the union.
    g1 = [f"a{i}" for i in range(5)]
    g2 = [f"b{i}" for i in range(5)]
    g3 = [f"c{i}" for i in range(4)]
    p1 = _pp("1", [g1, g2, g3])
    p2 = _pp("2", [g3, g1 + g2])
    al = align([p1, p2])
    a2 = al.assignment["2"].tolist()
    assert a2[0] == 3
    assert a2[1] in (1, 2)
    gone = 3 - a2[1]  # the other of tracks 1 and 2
    merge = [link for link in al.links if link.kind == "merge"]
    assert len(merge) == 1 and merge[0].from_track == gone and merge[0].to_track == a2[1]
    assert al.tracks[gone].merged_into == a2[1] and al.tracks[gone].ended == "2"
    assert not any(link.kind == "end" for link in al.links)


def test_isolates_keep_track_zero_and_are_never_linked():
    # Source: design rule of this module (common practice: the tieless are a class
    # apart, FIELD.md sec. 2 zero-block reasoning); checked on a hand-built case.
    p1 = _pp("1", [["i1", "i2"], ["a", "b", "c"], ["d", "e"]], isolates=0)
    p2 = _pp("2", [["a", "b", "c"], ["i1", "i2", "d"], ["e"]], isolates=1)
    al = align([p1, p2])
    assert al.assignment["1"].tolist() == [ISOLATES_TRACK, 1, 2]
    assert al.assignment["2"][1] == ISOLATES_TRACK
    assert al.assignment["2"][0] == 1
    assert al.tracks[ISOLATES_TRACK].isolates
    assert all(ISOLATES_TRACK not in (link.from_track, link.to_track) for link in al.links)
    mem = memberships([p1, p2], al)
    assert set(mem.loc[mem["actor"].isin(["i1", "i2"]), "track"]) == {ISOLATES_TRACK}


def test_role_similarity_links_positions_without_common_members():
    # Source: hand computation from the module's formula.  All actors are new in 2002,
    # so overlap is 0 everywhere and only the self-block density can be compared:
    # rho(core, core) = 1 - |1 - 1| = 1, rho(core, periphery) = 1 - |1 - 0| = 0.
    dens1 = np.array([[[1.0, 0.5], [0.5, 0.0]]])  # position 0 = core, 1 = periphery
    dens2 = np.array([[[0.0, 0.5], [0.5, 1.0]]])  # position 0 = periphery, 1 = core
    p1 = _pp("2001", [["a", "b"], ["c", "d", "e"]], density=dens1)
    p2 = _pp("2002", [["v", "w", "x"], ["y", "z"]], density=dens2)
    al = align([p1, p2])
    assert al.assignment["2002"].tolist() == [2, 1]
    for link in al.links:
        if link.kind == "continue":
            assert link.overlap == 0.0
            assert link.role_similarity == pytest.approx(1.0)
            assert link.similarity == pytest.approx(0.5)


def test_gap_allowed_by_max_gap():
    # Source: hand-built case: group g is missing in 2002 and back in 2003.
    g = ["a", "b", "c"]
    h = ["d", "e", "f"]
    periods = [_pp("2001", [g, h]), _pp("2002", [h]), _pp("2003", [g, h])]
    strict = align(periods)
    assert strict.assignment["2003"].tolist() == [3, 2]
    assert strict.tracks[1].ended == "2002"
    loose = align(periods, max_gap=1)
    assert loose.assignment["2003"].tolist() == [1, 2]
    back = [link for link in loose.links if link.kind == "continue" and link.to_track == 1]
    assert back[0].from_period == "2001" and back[0].to_period == "2003"


# -- incremental --------------------------------------------------------------------


def _random_periods(seed, n_periods=6):
    """Periods with churn: actors enter and leave, positions appear and vanish."""
    rng = np.random.default_rng(seed)
    pool = [f"a{i:02d}" for i in range(30)]
    out = []
    for t in range(n_periods):
        present = [a for a in pool if rng.random() < 0.8]
        b = int(rng.integers(2, 5))
        labels = rng.integers(0, b, len(present))
        iso = int(b - 1) if rng.random() < 0.5 else None
        dens = rng.random((1, b, b))
        out.append(PeriodPositions(str(2000 + t), tuple(present), labels, b, iso, dens))
    return out


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_incremental_update_leaves_earlier_periods_untouched(seed):
    # Source: the contract of align(previous=...): the same result as aligning all at
    # once, and the prefix's tracks and assignments exactly as they were.
    periods = _random_periods(seed)
    full = align(periods, max_gap=1)
    first = align(periods[:3], max_gap=1)
    kept = {p: a.copy() for p, a in first.assignment.items()}
    n_links = len(first.links)
    more = align(periods, previous=first, max_gap=1)
    for p in kept:
        assert np.array_equal(more.assignment[p], kept[p])
        assert np.array_equal(first.assignment[p], kept[p])  # the input is not mutated
    assert more.links[:n_links] == first.links
    for p in full.assignment:
        assert np.array_equal(full.assignment[p], more.assignment[p])
    assert full.tracks == more.tracks
    assert full.links == more.links


def test_previous_must_cover_a_prefix():
    periods = _random_periods(5)
    first = align(periods[1:3])
    with pytest.raises(UsageError):
        align(periods, previous=first)


def test_input_validation():
    with pytest.raises(UsageError):
        PeriodPositions("1", ("a", "b"), np.array([0]), 1)
    with pytest.raises(UsageError):
        PeriodPositions("1", ("a", "b"), np.array([0, 2]), 2)
    with pytest.raises(UsageError):
        PeriodPositions("1", ("a", "b"), np.array([0, 1]), 2, density=np.zeros((1, 3, 3)))
    p = _pp("1", [["a"]])
    with pytest.raises(UsageError):
        align([p, p])


# -- planted positions --------------------------------------------------------------


def test_tracks_recover_planted_positions_and_moves():
    # Source: planted dynamic blockmodel (tests/helpers/planted.py) as ground truth;
    # agreement measured by sklearn's adjusted_rand_score (Hubert & Arabie 1985).
    snaps, truth, true_moves = planted_dynamic(density_in=0.5, density_out=0.05, movers=9, seed=4)
    periods = [s[0] for s in snaps]
    mats = [s[2] for s in snaps]
    directed = snaps[0][3]
    # Per-period fits (no change penalty, no pooled image), then numbered at random
    # in each period so that the alignment has label switching to undo.
    parts = [find_positions(m, directed, 3, method="sbm", seed=0) for m in mats]
    rng = np.random.default_rng(0)
    pps = []
    for (period, actors, m, _), part in zip(snaps, parts):
        perm = np.append(rng.permutation(3), np.arange(3, part.n_positions))
        shuffled = Partition(perm[part.labels], part.n_positions, part.isolates)
        pps.append(PeriodPositions.from_partition(period, actors, shuffled, block_density(m, shuffled)))
    al = align(pps)
    mem = memberships(pps, al)
    ari = adjusted_rand_score(np.concatenate(truth), mem["track"].to_numpy())
    found = moves(mem, periods, ignore_tracks=(ISOLATES_TRACK,))
    got = set(zip(found["actor"], found["to_period"]))
    want = set(zip(true_moves["actor"], true_moves["to_period"]))
    precision = len(got & want) / max(len(got), 1)
    recall = len(got & want) / len(want)
    print(f"planted (0.5, 0.05): ARI={ari:.3f} precision={precision:.2f} recall={recall:.2f}")
    assert ari > 0.9
    assert precision >= 0.8 and recall >= 0.8
    assert sorted(al.tracks) == [1, 2, 3]
