"""Planted dynamic blockmodels: networks over periods with known positions and known moves.

A stochastic blockmodel (Holland, Laskey & Leinhardt 1983) per period with a
fixed block-probability matrix; positions persist, and a chosen set of actors
moves exactly once to another position and stays there.  Tie values are event
counts: a tie present with probability P[k, l] carries 1 + Poisson(extra) events.

The default image gives positions distinct roles: position 0 is a core (tied
densely inside and to every other position), the others are cohesive groups
tied to the core but barely to each other.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import scipy.sparse as sp

from tracker.snapshot import Relation, build_snapshot

__all__ = ["planted_dynamic", "planted_image", "standin_positions", "block_density"]


def planted_image(n_positions: int, density_in: float, density_out: float, core: bool = True) -> np.ndarray:
    """Block tie probabilities: ``density_in`` on the diagonal, ``density_out`` off it;
    with ``core``, position 0 is tied to every position at ``density_in``."""
    prob = np.full((n_positions, n_positions), float(density_out))
    np.fill_diagonal(prob, float(density_in))
    if core and n_positions > 1:
        prob[0, 1:] = density_in
        prob[1:, 0] = density_in
    return prob


def planted_dynamic(
    n_actors: int = 90,
    n_positions: int = 3,
    n_periods: int = 6,
    density_in: float = 0.4,
    density_out: float = 0.04,
    movers: int = 9,
    *,
    directed: bool = False,
    n_relations: int = 1,
    core: bool = True,
    extra_events: float = 1.0,
    absent: float = 0.0,
    start: int = 2001,
    seed: int = 0,
):
    """Periods of planted ties.

    Returns
    -------
    snapshots : list of (period, actors, matrices, directed)
        ``matrices`` a list of ``n_relations`` csr arrays, ``directed`` a list of bools.
    true_labels : list of numpy.ndarray
        Planted position of each present actor, per period.
    true_moves : pandas.DataFrame
        Columns ``actor, from_period, to_period, from_position, to_position``:
        changes of planted position between consecutive presences.
    """
    rng = np.random.default_rng(seed)
    actors = np.array([f"a{i:03d}" for i in range(n_actors)], dtype=object)
    periods = [str(start + t) for t in range(n_periods)]
    base = rng.permutation(np.arange(n_actors) % n_positions)
    pos = np.tile(base, (n_periods, 1))
    who = rng.choice(n_actors, size=min(movers, n_actors), replace=False)
    for i in who:
        when = rng.integers(1, n_periods)
        new = (base[i] + rng.integers(1, n_positions)) % n_positions
        pos[when:, i] = new
    present = rng.random((n_periods, n_actors)) >= absent
    prob = planted_image(n_positions, density_in, density_out, core)
    relations = [Relation(f"r{r}", directed) for r in range(n_relations)]

    snapshots, truth = [], []
    for t, period in enumerate(periods):
        idx = np.flatnonzero(present[t])
        z = pos[t, idx]
        n = idx.size
        p = prob[z[:, None], z[None, :]]
        ties = []
        for _ in relations:
            hit = rng.random((n, n)) < p
            np.fill_diagonal(hit, False)
            if not directed:
                hit = np.triu(hit, 1)
            rows, cols = np.nonzero(hit)
            vals = 1.0 + rng.poisson(extra_events, size=rows.size)
            ties.append((rows, cols, vals))
        snap = build_snapshot(period, tuple(actors[idx]), relations, ties)
        snapshots.append((period, snap.actors, list(snap.matrices), [directed] * n_relations))
        truth.append(z.copy())

    rows = []
    for i in range(n_actors):
        seen = np.flatnonzero(present[:, i])
        for a, b in zip(seen[:-1], seen[1:]):
            if pos[a, i] != pos[b, i]:
                rows.append((actors[i], periods[a], periods[b], int(pos[a, i]), int(pos[b, i])))
    true_moves = pd.DataFrame(rows, columns=["actor", "from_period", "to_period", "from_position", "to_position"])
    return snapshots, truth, true_moves


def standin_positions(matrices, directed, n_positions, seed=0):
    """Stand-in for ``tracker.blockmodel.positions.find_positions`` in these tests.

    Regularised spectral embedding of the symmetrised, binarised ties (top
    ``n_positions`` eigenvectors by absolute eigenvalue, rows normalised) clustered
    by k-means; tieless actors go to an isolates' position.  Deliberately plain: the
    longitudinal tests must not depend on a strong per-period method.
    """
    from scipy.cluster.vq import kmeans2

    from tracker.blockmodel.partition import Partition

    n = matrices[0].shape[0]
    adj = np.zeros((n, n))
    for mat in matrices:
        dense = (sp.csr_array(mat).toarray() > 0).astype(float)
        adj += dense + dense.T
    tied = adj.sum(axis=1) > 0
    labels = np.full(n, n_positions, dtype=np.int64)
    k = min(n_positions, int(tied.sum()))
    if k >= 1:
        sub = adj[np.ix_(tied, tied)]
        reg = sub + sub.sum() / max(sub.shape[0], 1) ** 2
        deg = reg.sum(axis=1)
        norm = reg / np.sqrt(np.outer(deg, deg))
        vals, vecs = np.linalg.eigh(norm)
        emb = vecs[:, np.argsort(-np.abs(vals))[:k]]
        emb /= np.maximum(np.linalg.norm(emb, axis=1, keepdims=True), 1e-12)
        rng = np.random.default_rng(seed)
        best = None
        for _ in range(4):
            centres, lab = kmeans2(emb, k, minit="++", seed=rng)
            cost = ((emb - centres[lab]) ** 2).sum()
            if best is None or cost < best[0]:
                best = (cost, lab)
        labels[tied] = best[1]
    has_iso = bool((~tied).any())
    return Partition(labels, n_positions + int(has_iso), n_positions if has_iso else None)


def block_density(matrices, partition) -> np.ndarray:
    """(R, B, B) block densities (values / possible ordered pairs); stand-in for
    ``tracker.blockmodel.blocks.block_stats(...).density`` in these tests."""

    z = partition.indicator()
    size = partition.sizes().astype(float)
    possible = np.outer(size, size) - np.diag(size)
    out = []
    for mat in matrices:
        total = np.asarray((z.T @ (sp.csr_array(mat) @ z)).toarray())
        out.append(np.divide(total, possible, out=np.zeros_like(total), where=possible > 0))
    return np.array(out)


def planted_sbm(z, B, c_in, c_out, rng, directed=False):
    """Sparse planted partition: Poisson number of ties per block pair, endpoints uniform."""
    n = z.size
    members = [np.flatnonzero(z == k) for k in range(B)]
    rows, cols = [], []
    for k in range(B):
        for l in range(B if directed else k + 1):
            nk, nl = members[k].size, members[l].size
            pairs = nk * nl if (directed or k != l) else nk * (nk - 1) / 2
            m = rng.poisson((c_in if k == l else c_out) / n * pairs)
            rows.append(rng.choice(members[k], m))
            cols.append(rng.choice(members[l], m))
    r, c = np.concatenate(rows), np.concatenate(cols)
    keep = r != c
    r, c = r[keep], c[keep]
    if not directed:
        r, c = np.minimum(r, c), np.maximum(r, c)
    A = sp.csr_array((np.ones(r.size), (r, c)), shape=(n, n))
    A.sum_duplicates()
    A.data[:] = 1.0
    return A if directed else sp.csr_array(A + A.T)
