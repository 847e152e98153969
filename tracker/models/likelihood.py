"""SBM likelihoods on sparse block statistics: the one likelihood engine.

Every statistical model of roletrail (the static blockmodel of
:mod:`tracker.models.sbm`, the dynamic model of :mod:`tracker.models.dynamic`)
scores partitions here.  A tie from ``i`` to ``j`` follows a law that depends
only on the positions ``z_i``, ``z_j`` (stochastic blockmodel; Holland, Laskey
& Leinhardt 1983):

* Bernoulli: :math:`A_{ij} \\sim \\mathrm{Bernoulli}(p_{z_i z_j})` on the binary pattern;
* Poisson: :math:`A_{ij} \\sim \\mathrm{Poisson}(\\lambda_{z_i z_j})` on event counts;
* degree-corrected Poisson: :math:`A_{ij} \\sim \\mathrm{Poisson}(\\theta_i\\theta_j\\omega_{z_i z_j})`
  (Karrer & Newman 2011).

Hard partitions are scored by their *profile* log-likelihood, a function of
block tie totals :math:`m_{kl}` and block sizes (formulas in
:class:`tracker.models.sbm.StaticSBM`); soft memberships ``tau`` (n x B) by the
expected complete-data log-likelihood :math:`\\sum_{kl} c\\,(m_{kl} f_1(\\theta_{kl}) +
N_{kl} f_2(\\theta_{kl}))` with expected totals :math:`m = \\tau^T A \\tau` and
exposures :math:`N` (:func:`expected_block_stats`, :func:`link_terms`).
Everything is computed from the sparse tie list: memory and time are
``O(nnz + n B^2)``; nothing is ever ``n x n`` dense.

Pure maths: bad arguments raise ``ValueError``.

References
----------
.. [1] Holland, P. W., Laskey, K. B. & Leinhardt, S. (1983). Stochastic
   blockmodels: first steps. Social Networks 5, 109-137.
.. [2] Karrer, B. & Newman, M. E. J. (2011). Stochastic blockmodels and
   community structure in networks. Phys. Rev. E 83, 016107.
.. [3] Daudin, J.-J., Picard, F. & Robin, S. (2008). A mixture model for random
   graphs. Statistics and Computing 18, 173-183.
.. [4] Qin, T. & Rohe, K. (2013). Regularized spectral clustering under the
   degree-corrected stochastic blockmodel. NIPS 26.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.special import gammaln, xlogy
from threadpoolctl import threadpool_limits

__all__ = [
    "MODELS", "Relation", "check_options", "check_positions", "check_matrices", "prepare", "make_relation",
    "entry_terms", "block_totals", "block_sizes", "block_terms", "profile_log_likelihood", "block_rates",
    "n_parameters", "icl", "tie_counts", "move_gains", "greedy_ascent", "given_labels", "random_labels",
    "spectral_labels", "expected_block_stats", "link_terms",
]

MODELS = ("poisson", "bernoulli")
_MODELS = MODELS
RATE_FLOOR = 1e-300  # keeps log(rate) finite for blocks without ties


# ----------------------------------------------------------------------------
# Prepared data and sufficient statistics
# ----------------------------------------------------------------------------


@dataclass
class Relation:
    """One relation, ready for block statistics: COO triplets plus constants."""

    row: np.ndarray
    col: np.ndarray
    data: np.ndarray
    directed: bool
    bernoulli: bool
    dc: bool
    u_out: np.ndarray  # what one actor adds to its position's row size (1 or out-degree)
    u_in: np.ndarray  # ... and column size (1 or in-degree)
    const: float  # the part of the log-likelihood that does not depend on the partition


def check_options(model: str, degree_corrected: bool) -> None:
    if model not in _MODELS:
        raise ValueError(f"unknown model {model!r}; use model='poisson' or model='bernoulli'")
    if degree_corrected and model != "poisson":
        raise ValueError("degree correction is defined for counts only; use model='poisson' with degree_corrected=True")


def check_positions(n_positions, n: int) -> int:
    B = int(n_positions)
    if B < 1 or B > n:
        raise ValueError(f"n_positions={n_positions} does not fit {n} actors; choose between 1 and {n}")
    return B


def check_matrices(matrices, directed, n: int | None = None) -> tuple[list[sp.coo_array], list[bool], int]:
    """Validate once at the edge; return COO copies, flags and the number of actors."""
    matrices = list(matrices)
    flags = [bool(d) for d in directed]
    if not matrices:
        raise ValueError("no relation given; pass at least one tie matrix")
    if len(flags) != len(matrices):
        raise ValueError(f"{len(matrices)} matrices but {len(flags)} direction flags; give one flag per relation")
    out = []
    for r, (mat, flag) in enumerate(zip(matrices, flags)):
        coo = sp.coo_array(mat, dtype=np.float64)
        if coo.ndim != 2 or coo.shape[0] != coo.shape[1]:
            raise ValueError(f"relation {r} is not a square matrix; pass n x n tie matrices")
        if n is None:
            n = coo.shape[0]
        if coo.shape[0] != n:
            raise ValueError(f"relation {r} has {coo.shape[0]} actors, expected {n}; give every relation the same actors")
        coo.sum_duplicates()
        coo.eliminate_zeros()
        if coo.nnz and (coo.data.min() < 0 or not np.all(np.isfinite(coo.data))):
            raise ValueError(f"relation {r} has negative or non-finite tie values; pass counts or weights >= 0")
        if np.any(coo.row == coo.col):
            keep = coo.row != coo.col
            coo = sp.coo_array((coo.data[keep], (coo.row[keep], coo.col[keep])), shape=coo.shape)
        if not flag and coo.nnz:
            diff = abs(sp.csr_array(coo) - sp.csr_array(coo.T))
            if diff.nnz and diff.max() > 1e-9 * coo.data.max():
                raise ValueError(
                    f"relation {r} is marked undirected but its matrix is not symmetric; "
                    "symmetrise it or mark it directed"
                )
        out.append(coo)
    return out, flags, int(n)


def prepare(matrices, directed, model: str, degree_corrected: bool) -> tuple[list[Relation], int]:
    check_options(model, degree_corrected)
    coos, flags, n = check_matrices(matrices, directed)
    rels = []
    for coo, flag in zip(coos, flags):
        rels.append(make_relation(coo, flag, n, model == "bernoulli", bool(degree_corrected)))
    return rels, n


def make_relation(coo: sp.coo_array, directed: bool, n: int, bernoulli: bool, dc: bool) -> Relation:
    row = coo.row.astype(np.int64)
    col = coo.col.astype(np.int64)
    data = np.ones(coo.nnz) if bernoulli else coo.data.astype(np.float64)
    half = 1.0 if directed else 0.5  # an undirected tie sits twice in the matrix
    const = 0.0
    if not bernoulli:
        const -= half * gammaln(data + 1.0).sum()
    if dc:
        d_out = np.bincount(row, weights=data, minlength=n)
        d_in = np.bincount(col, weights=data, minlength=n)
        total = half * data.sum()
        if directed:
            const += xlogy(d_out, d_out).sum() + xlogy(d_in, d_in).sum() - total
        else:
            const += xlogy(d_out, d_out).sum() - total
        u_out, u_in = d_out, d_in
    else:
        u_out = u_in = np.ones(n)
    return Relation(row, col, data, directed, bernoulli, dc, u_out, u_in, float(const))


def entry_terms(rel: Relation, m, srow, scol, diag):
    """Contribution of block entries ``(k, l)`` to the profile log-likelihood.

    ``m`` are block totals, ``srow``/``scol`` the sizes of the row and column
    positions (actor counts, or degree totals with degree correction) and
    ``diag`` marks ``k == l``.  All arguments broadcast.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        if rel.dc:
            t = _xlogx_over(m, srow * scol)
            return t if rel.directed else 0.5 * t
        if rel.directed:
            N = srow * scol if diag is False else srow * scol - np.where(diag, srow, 0.0)
            e = m
            w = None  # weight 1
        else:
            N = np.where(diag, srow * (srow - 1.0) / 2.0, srow * scol)
            e = np.where(diag, m / 2.0, m)
            w = np.where(diag, 1.0, 0.5)
        if rel.bernoulli:
            g = _xlogx_over(e, N) + _xlogx_over(N - e, N)
        else:
            g = _xlogx_over(e, N) - e
        return g if w is None else w * g


def _xlogx_over(x, y):
    """``x log(x / y)`` with ``0 log 0 = 0`` (plain logs of moderate numbers are fast)."""
    x, y = np.broadcast_arrays(x, y)
    ratio = np.ones(x.shape)
    np.divide(x, y, out=ratio, where=x > 0)  # 1 where x = 0, so that the term is 0 * log 1 = 0
    np.log(ratio, out=ratio)
    return np.multiply(x, ratio, out=ratio)


def block_totals(rel: Relation, labels: np.ndarray, B: int) -> np.ndarray:
    idx = labels[rel.row] * B + labels[rel.col]
    return np.bincount(idx, weights=rel.data, minlength=B * B).reshape(B, B)


def block_sizes(rel: Relation, labels: np.ndarray, B: int) -> tuple[np.ndarray, np.ndarray]:
    return (
        np.bincount(labels, weights=rel.u_out, minlength=B),
        np.bincount(labels, weights=rel.u_in, minlength=B),
    )


def block_terms(rel: Relation, m: np.ndarray, s_out: np.ndarray, s_in: np.ndarray) -> np.ndarray:
    B = m.shape[0]
    return entry_terms(rel, m, s_out[:, None], s_in[None, :], np.eye(B, dtype=bool))


def profile_log_likelihood(rels: list[Relation], labels: np.ndarray, B: int) -> float:
    return _profile(rels, labels, B)[0]


def _profile(rels: list[Relation], labels: np.ndarray, B: int) -> tuple[float, list]:
    """The profile log-likelihood and each relation's block totals (kept for the next sweep's gains)."""
    total = 0.0
    totals = []
    for rel in rels:
        m = block_totals(rel, labels, B)
        s_out, s_in = block_sizes(rel, labels, B)
        total += block_terms(rel, m, s_out, s_in).sum() + rel.const
        totals.append(m)
    return float(total), totals


def block_rates(rels: list[Relation], labels: np.ndarray, B: int) -> np.ndarray:
    out = np.zeros((len(rels), B, B))
    eye = np.eye(B, dtype=bool)
    for r, rel in enumerate(rels):
        m = block_totals(rel, labels, B)
        s_out, s_in = block_sizes(rel, labels, B)
        if rel.dc:
            N = np.outer(s_out, s_in)
        else:
            N = np.outer(s_out, s_in) - np.where(eye, s_out[:, None], 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[r] = np.where(N > 0, m / np.where(N > 0, N, 1.0), 0.0)
    return out


def n_parameters(rels: list[Relation], B: int, n: int) -> int:
    total = 0
    for rel in rels:
        total += B * B if rel.directed else B * (B + 1) // 2
        if rel.dc:
            total += (2 if rel.directed else 1) * (n - B)
    return total


def icl(loglik: float, labels: np.ndarray, B: int, rels: list[Relation], n: int) -> float:
    sizes = np.bincount(labels, minlength=B).astype(float)
    prior = xlogy(sizes, sizes / n).sum()
    penalty = 0.0
    for rel in rels:
        pairs = n * (n - 1) / (1.0 if rel.directed else 2.0)
        k = B * B if rel.directed else B * (B + 1) / 2
        if rel.dc:
            k += (2 if rel.directed else 1) * (n - B)
        penalty += k * np.log(max(pairs, 1.0))
    return loglik + prior - 0.5 * penalty - 0.5 * (B - 1) * np.log(n)


# ----------------------------------------------------------------------------
# Greedy local moves
# ----------------------------------------------------------------------------


def tie_counts(rel: Relation, labels: np.ndarray, B: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Each actor's tie totals sent to (and received from) each position, (n, B)."""
    out = np.bincount(rel.row * B + labels[rel.col], weights=rel.data, minlength=n * B).reshape(n, B)
    if not rel.directed:
        return out, out
    inc = np.bincount(rel.col * B + labels[rel.row], weights=rel.data, minlength=n * B).reshape(n, B)
    return out, inc


def move_gains(rels: list[Relation], labels: np.ndarray, B: int, totals: list | None = None) -> np.ndarray:
    """Exact change of the log-likelihood if actor ``i`` alone moved to ``b``.

    Returns an (n, B) array; the entry of an actor's own position is 0.
    Moving ``i`` from ``a`` to ``b`` changes the block totals by
    ``m - e_a c_out^T - c_in e_a^T + e_b c_out^T + c_in e_b^T`` (``c`` are
    i's tie totals to each position; the zero diagonal makes this exact), so
    only rows and columns ``a`` and ``b`` change.  ``totals``: the relations'
    block totals for ``labels``, if already known (computed otherwise).
    """
    gains = np.zeros((labels.size, B))
    if totals is None:
        totals = [block_totals(rel, labels, B) for rel in rels]
    # entries with a == b are meaningless (and may be inf - inf); they are reset below
    with np.errstate(invalid="ignore", divide="ignore"):
        for rel, m in zip(rels, totals):
            _add_move_gains(gains, rel, labels, B, m)
    gains[np.arange(labels.size), labels] = 0.0
    return gains


def _add_move_gains(gains: np.ndarray, rel: Relation, labels: np.ndarray, B: int, m: np.ndarray) -> None:
    n = labels.size
    ar = np.arange(n)
    a = labels
    is_a = np.arange(B)[None, :] == a[:, None]
    ones = np.ones(B)
    s_out, s_in = block_sizes(rel, labels, B)
    c_out, c_in = tie_counts(rel, labels, B, n)
    T = block_terms(rel, m, s_out, s_in)
    rs, cs, dg = T.sum(1), T.sum(0), np.diag(T)
    # old value of rows a, b and columns a, b (each entry once), for every (a, b)
    old = rs[:, None] + rs[None, :] + cs[:, None] + cs[None, :] - dg[:, None] - dg[None, :] - T - T.T
    old_a = old[a]
    ci_aa = c_in[ar, a]
    uo, ui = rel.u_out, rel.u_in
    # the parts of the changed rows and sizes that do not depend on b
    so_base = s_out[None, :] - uo[:, None] * is_a
    si_base = so_base if not rel.directed else s_in[None, :] - ui[:, None] * is_a
    so_a = (s_out[a] - uo)[:, None]
    si_a = (s_in[a] - ui)[:, None]
    row_a_base = m[a] - c_out
    row_a_base[ar, a] -= ci_aa
    if rel.directed:
        col_a = m[:, a].T - c_in  # column a after the move, whatever b
    for b in range(B):
        is_b = np.arange(B)[None, :] == b
        si = si_base.copy()
        si[:, b] += ui
        row_a = row_a_base.copy()
        row_a[:, b] += ci_aa
        row_b = c_out + m[b][None, :]
        row_b[ar, a] -= c_in[:, b]
        row_b[:, b] += c_in[:, b]
        terms_a = entry_terms(rel, row_a, so_a, si, is_a)
        terms_b = entry_terms(rel, row_b, (s_out[b] + uo)[:, None], si, is_b)
        sum_a, sum_b = terms_a @ ones, terms_b @ ones
        new = sum_a + sum_b
        if rel.directed:
            so = so_base.copy()
            so[:, b] += uo
            other = ~(is_a | is_b)
            col_b = m[:, b][None, :] + c_in
            new += np.where(other, entry_terms(rel, col_a, so, si_a, False), 0.0) @ ones
            new += np.where(other, entry_terms(rel, col_b, so, (s_in[b] + ui)[:, None], False), 0.0) @ ones
        else:
            # symmetric: column a outside rows a and b mirrors row a outside columns a and b
            new += sum_a - terms_a[ar, a] - terms_a[:, b] + sum_b - terms_b[ar, a] - terms_b[:, b]
        gains[:, b] += new - old_a[:, b]


def greedy_ascent(rels, labels, B, rng, max_sweeps):
    """Batch greedy ascent of the profile log-likelihood from ``labels``.

    Returns ``(labels, loglik, history)``; ``history`` starts with the
    log-likelihood of the initial partition.
    """
    labels = np.array(labels, dtype=np.int64)
    current, totals = _profile(rels, labels, B)
    history = [current]
    if B == 1:
        return labels, current, history
    for _ in range(max_sweeps):
        gains = move_gains(rels, labels, B, totals)
        sizes = np.bincount(labels, minlength=B)
        gains[sizes[labels] <= 1] = 0.0  # a position never empties
        target = gains.argmax(1)
        gain = gains[np.arange(labels.size), target]
        tol = 1e-10 * max(1.0, abs(current))
        movers = np.flatnonzero(gain > tol)
        if movers.size == 0:
            break
        movers = _keep_positions_filled(movers, labels, gain, sizes, B)
        moved = False
        while movers.size:
            trial = labels.copy()
            trial[movers] = target[movers]
            value, trial_totals = _profile(rels, trial, B)
            if value > current:
                labels, current, totals, moved = trial, value, trial_totals, True
                break
            if movers.size == 1:
                break
            movers = np.sort(rng.permutation(movers)[: movers.size // 2])
        if not moved:
            break
        history.append(current)
    return labels, current, history


def _keep_positions_filled(movers, labels, gain, sizes, B):
    """Drop the weakest leavers of any position that all its members would leave."""
    leaving = np.bincount(labels[movers], minlength=B)
    for k in np.flatnonzero(leaving >= sizes):
        inside = movers[labels[movers] == k]
        drop = inside[np.argmin(gain[inside])]
        movers = movers[movers != drop]
    return movers


# ----------------------------------------------------------------------------
# Starts
# ----------------------------------------------------------------------------


def given_labels(labels, n: int, B: int, rng: np.random.Generator) -> np.ndarray:
    labels = np.asarray(labels)
    if labels.shape != (n,) or not np.issubdtype(labels.dtype, np.integer):
        raise ValueError(f"init_labels must hold one integer position per actor ({n}); pass last fit's labels")
    if labels.size and (labels.min() < 0 or labels.max() >= B):
        raise ValueError(f"init_labels must lie in 0 .. {B - 1}; renumber them or change n_positions")
    return _fill_empty(labels, B, rng)


def random_labels(n: int, B: int, rng: np.random.Generator) -> np.ndarray:
    return _fill_empty(rng.integers(B, size=n), B, rng)


def _fill_empty(labels: np.ndarray, B: int, rng: np.random.Generator) -> np.ndarray:
    labels = np.asarray(labels, dtype=np.int64).copy()
    for k in range(B):
        sizes = np.bincount(labels, minlength=B)
        if sizes[k] == 0:
            donors = np.flatnonzero(labels == sizes.argmax())
            labels[rng.choice(donors)] = k
    return labels


def spectral_labels(rels: list[Relation], n: int, B: int, rng: np.random.Generator) -> np.ndarray:
    """Regularised spectral clustering (Qin & Rohe 2013) of all relations pooled.

    ``W = sum_r (A_r + A_r^T)``; ``L = D_t^{-1/2} W D_t^{-1/2}`` with
    ``D_t = D + mean degree``; the ``B`` eigenvectors of largest magnitude
    (so that both assortative and disassortative structure show), rows
    scaled to unit length, then k-means.
    """
    from sklearn.cluster import KMeans

    if B == 1:
        return np.zeros(n, dtype=np.int64)
    row = np.concatenate([np.concatenate([r.row, r.col]) for r in rels])
    col = np.concatenate([np.concatenate([r.col, r.row]) for r in rels])
    val = np.concatenate([np.concatenate([r.data, r.data]) for r in rels])
    W = sp.csr_array((val, (row, col)), shape=(n, n))
    deg = np.asarray(W.sum(axis=1)).ravel()
    if deg.sum() == 0:
        return random_labels(n, B, rng)
    scale = 1.0 / np.sqrt(deg + deg.mean())
    L = sp.csr_array(sp.diags_array(scale) @ W @ sp.diags_array(scale))
    if n <= max(200, 3 * B):
        vals, vecs = np.linalg.eigh(L.toarray())
        order = np.argsort(-np.abs(vals))[:B]
        X = vecs[:, order]
    else:
        from scipy.sparse.linalg import eigsh

        v0 = rng.uniform(0.5, 1.5, size=n)
        _, X = eigsh(L, k=B, which="LM", v0=v0, tol=1e-6, maxiter=20 * n)
    norms = np.linalg.norm(X, axis=1)
    X = X / np.where(norms > 0, norms, 1.0)[:, None]
    km = KMeans(n_clusters=B, n_init=4, random_state=int(rng.integers(2**31 - 1)))
    # One thread: k-means of n x B points is short, and its OpenMP threads only wait for
    # each other when the cores are busy (20x slower at 5,000-20,000 actors on a loaded 2-core
    # machine); one thread also gives the same sums, hence the same centres, on every machine.
    with threadpool_limits(limits=1):
        return _fill_empty(km.fit_predict(X), B, rng)



# ----------------------------------------------------------------------------
# Soft memberships (variational E and M steps)
# ----------------------------------------------------------------------------


def expected_block_stats(A: sp.csr_array, AT, w_out: np.ndarray, w_in: np.ndarray, dc: bool, tau: np.ndarray):
    """Expected block totals and exposures of one relation under soft memberships.

    ``m = tau^T A tau``; :math:`N_{kl} = \\sum_{i \\ne j} w_i w'_j \\tau_{ik}\\tau_{jl}`
    with ``w`` ones (or the activity parameters with degree correction, where
    Karrer & Newman's model also has the diagonal pair ``i = j``).  ``AT`` is
    the transpose for a directed relation, else None.  Costs ``O(nnz B + n B^2)``.

    Returns ``(A tau, A^T tau, m, N)``.
    """
    Atau = A @ tau
    ATtau = AT @ tau if AT is not None else Atau
    m = tau.T @ Atau
    S_out = w_out @ tau
    if dc:
        S_in = w_in @ tau
        self_w = w_out * w_in
        N = np.outer(S_out, S_in) - tau.T @ (self_w[:, None] * tau)
        N += np.diag(self_w @ tau)
    else:  # unit weights (``w`` are ones without degree correction): S_in = S_out, w_i w'_i = 1
        N = np.outer(S_out, S_out) - tau.T @ tau
    return Atau, ATtau, m, N


def link_terms(theta: np.ndarray, bernoulli: bool):
    """``(f1, f2)`` with expected log-likelihood ``sum m * f1 + N * f2`` per block.

    Bernoulli: ``f1 = log(p / (1 - p))``, ``f2 = log(1 - p)``; Poisson:
    ``f1 = log(lambda)``, ``f2 = -lambda``.
    """
    if bernoulli:
        p = np.clip(theta, RATE_FLOOR, 1.0 - 1e-12)
        return np.log(p) - np.log1p(-p), np.log1p(-p)
    rate = np.maximum(theta, RATE_FLOOR)
    return np.log(rate), -theta
