"""Stochastic blockmodels for sparse tie counts, fitted by profile likelihood.

A stochastic blockmodel (SBM; Holland, Laskey & Leinhardt 1983) says that the
tie from actor ``i`` to actor ``j`` is random, with a law that depends only on
the positions ``z_i`` and ``z_j``.  It is the statistical version of structural
equivalence: actors in one position are exchangeable.  Three laws are offered:

``model="bernoulli"``
    :math:`A_{ij} \\sim \\mathrm{Bernoulli}(p_{z_i z_j})` on the binary pattern
    (any nonzero value counts as one tie).
``model="poisson"``
    :math:`A_{ij} \\sim \\mathrm{Poisson}(\\lambda_{z_i z_j})` on event counts.
``model="poisson", degree_corrected=True``
    :math:`A_{ij} \\sim \\mathrm{Poisson}(\\theta_i \\theta_j \\omega_{z_i z_j})`
    (Karrer & Newman 2011), so that busy and quiet actors may share a position.

For a hard partition the block parameters (and the degree parameters) have
closed-form maximum-likelihood values, so the partition is scored by its
*profile* log-likelihood, a function of the block tie totals
:math:`m_{kl} = \\sum_{ij} A_{ij} [z_i = k][z_j = l]` and block sizes only.
The fit maximises it by greedy local moves of single actors, evaluated for all
actors at once from their tie totals to each position (see
:class:`SBMPositions`).  Time and memory per sweep are
:math:`O(\\mathrm{nnz} + n B^2)`: nothing is ever ``n x n``.

Several relations are fitted jointly: their log-likelihoods add, each with its
own block parameters, and the actors share one partition.

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
from typing import Sequence

import numpy as np
import scipy.sparse as sp
from scipy.special import gammaln, xlogy

from tracker.errors import UsageError

__all__ = ["SBMPositions", "select_positions", "log_likelihood"]

_MODELS = ("poisson", "bernoulli")


class SBMPositions:
    """Positions as the maximum-likelihood partition of a stochastic blockmodel.

    Parameters
    ----------
    n_positions : int
        Number of positions ``B``.  Every position keeps at least one actor.
    seed : int, default 0
        Seed of ``numpy.random.default_rng``; same seed, same answer.
    model : {"poisson", "bernoulli"}, default "poisson"
        Law of a tie value given the two positions (see the module docstring).
    degree_corrected : bool, default False
        Karrer & Newman's degree correction (Poisson only).
    restarts : int, default 5
        Number of starts: the first from regularised spectral clustering, the
        others from uniformly random partitions.  The best log-likelihood wins.
    max_sweeps : int, default 50
        Cap on the greedy sweeps of each start.
    init_labels : array of int, shape (n,), optional
        A partition to start from (for instance last period's positions), tried
        in addition to the ``restarts`` starts.

    Attributes
    ----------
    labels_ : numpy.ndarray of int, shape (n,)
        Position of each actor, ``0 .. B-1``.
    log_likelihood_ : float
        Profile log-likelihood of ``labels_`` (all constants included, so it is
        the log-probability of the data at the fitted parameters).
    icl_ : float
        Integrated classification likelihood of ``labels_`` (see
        :func:`select_positions` for the penalty).
    rates_ : numpy.ndarray, shape (R, B, B)
        Block parameters per relation: tie probability ``p_kl`` (Bernoulli),
        expected count per pair ``lambda_kl`` (Poisson), or ``omega_kl`` with
        degree correction, scaled so that the expected count of the pair
        ``(i, j)`` is ``d_i d_j omega_kl`` with ``d`` the observed degrees
        (out-degree of ``i`` and in-degree of ``j`` when directed).
    n_iter_ : int
        Greedy sweeps run by the winning start.
    history_ : list of float
        Log-likelihood after each sweep of the winning start (non-decreasing).

    Notes
    -----
    Profile log-likelihoods (block totals :math:`m_{kl}`, pair counts
    :math:`N_{kl}`, sizes :math:`n_k`; for an undirected relation the
    diagonal totals :math:`m_{kk}` count each tie twice):

    * Poisson, directed: :math:`\\sum_{kl} [m_{kl}\\log(m_{kl}/N_{kl}) - m_{kl}]
      - \\sum_{i \\ne j} \\log A_{ij}!` with :math:`N_{kl} = n_k n_l - [k=l]\\,n_k`
      (self-ties are not data).  Undirected: the same over unordered block
      pairs with :math:`e_{kk} = m_{kk}/2`, :math:`N_{kk} = n_k(n_k-1)/2`.
    * Bernoulli: :math:`\\sum [e\\log(e/N) + (N-e)\\log(1-e/N)]` over the same
      block pairs, on the binary pattern.
    * Degree-corrected (Karrer & Newman 2011, whose model lets the
      diagonal pair ``(i, i)`` carry a Poisson mean ``theta_i^2 omega/2`` that
      is observed as zero): undirected
      :math:`\\tfrac12 \\sum_{kl} m_{kl}\\log\\frac{m_{kl}}{\\kappa_k\\kappa_l}
      + \\sum_i d_i\\log d_i - M - \\sum_{i<j}\\log A_{ij}!`, directed
      :math:`\\sum_{kl} m_{kl}\\log\\frac{m_{kl}}{\\kappa^+_k\\kappa^-_l}
      + \\sum_i (d^+_i\\log d^+_i + d^-_i\\log d^-_i) - M - \\sum\\log A_{ij}!`,
      with :math:`\\kappa_k` the total degree of position ``k`` and ``M`` the
      total tie value.

    Under degree correction an actor without ties carries no information
    about its position (its activity parameter is 0); it keeps the position
    it started in.

    Algorithm (a vectorised batch variant of Karrer & Newman's single-actor
    moves): each sweep computes every actor's tie totals to every position
    (``O(nnz)``), and from them the exact change of the profile
    log-likelihood for moving that actor alone to each other position; only
    rows and columns ``a`` and ``b`` of :math:`m` change, so this costs
    ``O(B)`` per (actor, position), ``O(n B^2)`` in all.  All actors with a
    positive gain move to their best position at once; the move set is kept
    only if the exact log-likelihood rises, otherwise a random half of it is
    tried, and so on (a single move always rises).  Sweeps stop when no actor
    gains or after ``max_sweeps``.

    Examples
    --------
    >>> import networkx as nx, scipy.sparse as sp
    >>> g = nx.disjoint_union(nx.complete_graph(5), nx.complete_graph(5))
    >>> g.add_edge(0, 5)
    >>> a = sp.csr_array(nx.to_scipy_sparse_array(g, dtype=float))
    >>> fit = SBMPositions(2, model="bernoulli").fit([a], [False])
    >>> np.bincount(fit.labels_).tolist()
    [5, 5]
    """

    #: ``find_positions(..., "auto")`` asks :meth:`select` instead of its elbow rule.
    selects_positions_by_likelihood = True
    auto_rule = "the number of positions with the largest integrated classification likelihood (ICL; Daudin, Picard & Robin 2008)"

    @classmethod
    def select(cls, matrices, directed, k_range, *, seed=0, **options):
        """Choose the number of positions by ICL (see :func:`select_positions`)."""
        return select_positions(matrices, directed, k_range, seed=seed, **options)

    def __init__(
        self,
        n_positions: int,
        *,
        seed: int = 0,
        model: str = "poisson",
        degree_corrected: bool = False,
        restarts: int = 5,
        max_sweeps: int = 50,
        init_labels=None,
    ) -> None:
        self.n_positions = n_positions
        self.seed = seed
        self.model = model
        self.degree_corrected = degree_corrected
        self.restarts = restarts
        self.max_sweeps = max_sweeps
        self.init_labels = init_labels

    def fit(self, matrices: Sequence[sp.sparray], directed: Sequence[bool]) -> "SBMPositions":
        """Fit the blockmodel to one period's relations.

        Parameters
        ----------
        matrices : sequence of scipy.sparse arrays, each n x n
            Tie values, zero diagonal, symmetric for undirected relations.
        directed : sequence of bool
            One flag per relation.

        Returns
        -------
        self
        """
        _check_options(self.model, self.degree_corrected)
        if int(self.restarts) < 1 or int(self.max_sweeps) < 0:
            raise UsageError("restarts must be at least 1 and max_sweeps at least 0")
        rels, n = _prepare(matrices, directed, self.model, self.degree_corrected)
        B = _check_positions(self.n_positions, n)
        rng = np.random.default_rng(self.seed)
        starts = ["given"] if self.init_labels is not None else []
        starts += ["spectral"] + ["random"] * (int(self.restarts) - 1)
        best = None
        for kind in starts:
            child = np.random.default_rng(rng.integers(2**63))
            if kind == "given":
                init = _given_labels(self.init_labels, n, B, child)
            elif kind == "spectral":
                init = _spectral_labels(rels, n, B, child)
            else:
                init = _random_labels(n, B, child)
            result = _greedy(rels, init, B, child, int(self.max_sweeps))
            if best is None or result[1] > best[1]:
                best = result
        labels, loglik, history = best
        self.labels_ = labels
        self.log_likelihood_ = float(loglik)
        self.icl_ = float(_icl(loglik, labels, B, rels, n))
        self.rates_ = _rates(rels, labels, B)
        self.n_iter_ = len(history) - 1
        self.history_ = [float(v) for v in history]
        return self


def log_likelihood(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    labels,
    *,
    n_positions: int | None = None,
    model: str = "poisson",
    degree_corrected: bool = False,
) -> float:
    """Profile log-likelihood of a given partition under a stochastic blockmodel.

    The block (and degree) parameters are set to their maximum-likelihood
    values for ``labels``; the formulas are in the Notes of
    :class:`SBMPositions`.  Relations add (independent, each with its own
    block parameters).

    Parameters
    ----------
    matrices, directed
        As in :meth:`SBMPositions.fit`.
    labels : array of int, shape (n,)
        Positions ``0 .. B-1``.
    n_positions : int, optional
        ``B``; defaults to ``labels.max() + 1``.
    model, degree_corrected
        As in :class:`SBMPositions`.

    Returns
    -------
    float

    Examples
    --------
    A single tie between two actors in one position of a Bernoulli model:
    the tie probability is 1, so the log-likelihood is 0.

    >>> import scipy.sparse as sp
    >>> a = sp.csr_array(np.array([[0.0, 1.0], [1.0, 0.0]]))
    >>> log_likelihood([a], [False], [0, 0], model="bernoulli")
    0.0
    """
    _check_options(model, degree_corrected)
    rels, n = _prepare(matrices, directed, model, degree_corrected)
    labels = np.asarray(labels, dtype=np.int64)
    if labels.shape != (n,):
        raise UsageError(f"labels must have one entry per actor ({n}); pass a label for every actor")
    B = int(labels.max()) + 1 if n_positions is None else int(n_positions)
    if labels.size and (labels.min() < 0 or labels.max() >= B):
        raise UsageError("labels must lie in 0 .. n_positions - 1; renumber the positions")
    return float(_total(rels, labels, B))


def select_positions(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    k_range: tuple[int, int] = (1, 8),
    criterion: str = "icl",
    seed: int = 0,
    **options,
) -> tuple[int, list[dict]]:
    """Choose the number of positions by the integrated classification likelihood.

    For each ``B`` in ``k_range`` (both ends included, capped at the number of
    actors) an :class:`SBMPositions` is fitted with ``seed`` and ``options``,
    and scored by

    .. math::

        \\mathrm{ICL}(B) = \\log L(A \\mid \\hat z, \\hat\\theta)
            + \\sum_k n_k \\log\\frac{n_k}{n}
            - \\frac{p_B}{2}\\log(\\text{pairs}) - \\frac{B-1}{2}\\log n

    (Daudin, Picard & Robin 2008), where ``pairs`` is
    ``n(n-1)`` for a directed relation and ``n(n-1)/2`` for an undirected
    one, and :math:`p_B` counts the free block parameters of each relation:
    ``B^2`` (directed) or ``B(B+1)/2`` (undirected).  With degree correction
    the degree parameters are counted as well, as in BIC: ``n - B`` free
    :math:`\\theta` per relation undirected, ``2(n - B)`` directed (one sum
    constraint per position and direction), penalised at the same
    ``log(pairs)`` rate.  With several relations the penalties add.

    Parameters
    ----------
    matrices, directed
        As in :meth:`SBMPositions.fit`.
    k_range : (int, int), default (1, 8)
        Smallest and largest number of positions tried.
    criterion : {"icl"}, default "icl"
    seed : int, default 0
    **options
        Passed to :class:`SBMPositions` (``model``, ``degree_corrected``,
        ``restarts``, ``max_sweeps``).

    Returns
    -------
    best_k : int
    diagnostics : list of dict
        One per ``B`` tried: ``n_positions``, ``log_likelihood``, ``icl``,
        ``n_parameters``, ``n_iter``.

    Examples
    --------
    >>> import networkx as nx, scipy.sparse as sp
    >>> g = nx.disjoint_union(nx.complete_graph(6), nx.complete_graph(6))
    >>> a = sp.csr_array(nx.to_scipy_sparse_array(g, dtype=float))
    >>> select_positions([a], [False], k_range=(1, 3), model="bernoulli")[0]
    2
    """
    if criterion != "icl":
        raise UsageError(f"unknown criterion {criterion!r}; use criterion='icl'")
    lo, hi = (int(k) for k in k_range)
    rels, n = _prepare(matrices, directed, options.get("model", "poisson"), options.get("degree_corrected", False))
    hi = min(hi, n)
    if lo < 1 or hi < lo:
        raise UsageError(f"k_range {tuple(k_range)} is empty for {n} actors; give (low, high) with 1 <= low <= high")
    diagnostics = []
    for k in range(lo, hi + 1):
        fit = SBMPositions(k, seed=seed, **options).fit(matrices, directed)
        diagnostics.append(
            {
                "n_positions": k,
                "log_likelihood": fit.log_likelihood_,
                "icl": fit.icl_,
                "n_parameters": _n_parameters(rels, k, n),
                "n_iter": fit.n_iter_,
            }
        )
    best = max(diagnostics, key=lambda row: row["icl"])
    return int(best["n_positions"]), diagnostics


# ----------------------------------------------------------------------------
# Prepared data and sufficient statistics
# ----------------------------------------------------------------------------


@dataclass
class _Rel:
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


def _check_options(model: str, degree_corrected: bool) -> None:
    if model not in _MODELS:
        raise UsageError(f"unknown model {model!r}; use model='poisson' or model='bernoulli'")
    if degree_corrected and model != "poisson":
        raise UsageError("degree correction is defined for counts only; use model='poisson' with degree_corrected=True")


def _check_positions(n_positions, n: int) -> int:
    B = int(n_positions)
    if B < 1 or B > n:
        raise UsageError(f"n_positions={n_positions} does not fit {n} actors; choose between 1 and {n}")
    return B


def _check_matrices(matrices, directed, n: int | None = None) -> tuple[list[sp.coo_array], list[bool], int]:
    """Validate once at the edge; return COO copies, flags and the number of actors."""
    matrices = list(matrices)
    flags = [bool(d) for d in directed]
    if not matrices:
        raise UsageError("no relation given; pass at least one tie matrix")
    if len(flags) != len(matrices):
        raise UsageError(f"{len(matrices)} matrices but {len(flags)} direction flags; give one flag per relation")
    out = []
    for r, (mat, flag) in enumerate(zip(matrices, flags)):
        coo = sp.coo_array(mat, dtype=np.float64)
        if coo.ndim != 2 or coo.shape[0] != coo.shape[1]:
            raise UsageError(f"relation {r} is not a square matrix; pass n x n tie matrices")
        if n is None:
            n = coo.shape[0]
        if coo.shape[0] != n:
            raise UsageError(f"relation {r} has {coo.shape[0]} actors, expected {n}; give every relation the same actors")
        coo.sum_duplicates()
        coo.eliminate_zeros()
        if coo.nnz and (coo.data.min() < 0 or not np.all(np.isfinite(coo.data))):
            raise UsageError(f"relation {r} has negative or non-finite tie values; pass counts or weights >= 0")
        if np.any(coo.row == coo.col):
            keep = coo.row != coo.col
            coo = sp.coo_array((coo.data[keep], (coo.row[keep], coo.col[keep])), shape=coo.shape)
        if not flag and coo.nnz:
            diff = abs(sp.csr_array(coo) - sp.csr_array(coo.T))
            if diff.nnz and diff.max() > 1e-9 * coo.data.max():
                raise UsageError(
                    f"relation {r} is marked undirected but its matrix is not symmetric; "
                    "symmetrise it or mark it directed"
                )
        out.append(coo)
    return out, flags, int(n)


def _prepare(matrices, directed, model: str, degree_corrected: bool) -> tuple[list[_Rel], int]:
    _check_options(model, degree_corrected)
    coos, flags, n = _check_matrices(matrices, directed)
    rels = []
    for coo, flag in zip(coos, flags):
        rels.append(_make_rel(coo, flag, n, model == "bernoulli", bool(degree_corrected)))
    return rels, n


def _make_rel(coo: sp.coo_array, directed: bool, n: int, bernoulli: bool, dc: bool) -> _Rel:
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
    return _Rel(row, col, data, directed, bernoulli, dc, u_out, u_in, float(const))


def _entry_terms(rel: _Rel, m, srow, scol, diag):
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
            N = srow * scol - np.where(diag, srow, 0.0)
            e = m
            w = 1.0
        else:
            N = np.where(diag, srow * (srow - 1.0) / 2.0, srow * scol)
            e = np.where(diag, m / 2.0, m)
            w = np.where(diag, 1.0, 0.5)
        if rel.bernoulli:
            g = _xlogx_over(e, N) + _xlogx_over(N - e, N)
        else:
            g = _xlogx_over(e, N) - e
        return w * g


def _xlogx_over(x, y):
    """``x log(x / y)`` with ``0 log 0 = 0`` (plain logs of moderate numbers are fast)."""
    x, y = np.broadcast_arrays(x, y)
    pos = x > 0
    return x * np.log(np.where(pos, x, 1.0) / np.where(pos, y, 1.0))


def _block_totals(rel: _Rel, labels: np.ndarray, B: int) -> np.ndarray:
    idx = labels[rel.row] * B + labels[rel.col]
    return np.bincount(idx, weights=rel.data, minlength=B * B).reshape(B, B)


def _sizes(rel: _Rel, labels: np.ndarray, B: int) -> tuple[np.ndarray, np.ndarray]:
    return (
        np.bincount(labels, weights=rel.u_out, minlength=B),
        np.bincount(labels, weights=rel.u_in, minlength=B),
    )


def _block_terms(rel: _Rel, m: np.ndarray, s_out: np.ndarray, s_in: np.ndarray) -> np.ndarray:
    B = m.shape[0]
    return _entry_terms(rel, m, s_out[:, None], s_in[None, :], np.eye(B, dtype=bool))


def _total(rels: list[_Rel], labels: np.ndarray, B: int) -> float:
    total = 0.0
    for rel in rels:
        m = _block_totals(rel, labels, B)
        s_out, s_in = _sizes(rel, labels, B)
        total += _block_terms(rel, m, s_out, s_in).sum() + rel.const
    return float(total)


def _rates(rels: list[_Rel], labels: np.ndarray, B: int) -> np.ndarray:
    out = np.zeros((len(rels), B, B))
    eye = np.eye(B, dtype=bool)
    for r, rel in enumerate(rels):
        m = _block_totals(rel, labels, B)
        s_out, s_in = _sizes(rel, labels, B)
        if rel.dc:
            N = np.outer(s_out, s_in)
        else:
            N = np.outer(s_out, s_in) - np.where(eye, s_out[:, None], 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[r] = np.where(N > 0, m / np.where(N > 0, N, 1.0), 0.0)
    return out


def _n_parameters(rels: list[_Rel], B: int, n: int) -> int:
    total = 0
    for rel in rels:
        total += B * B if rel.directed else B * (B + 1) // 2
        if rel.dc:
            total += (2 if rel.directed else 1) * (n - B)
    return total


def _icl(loglik: float, labels: np.ndarray, B: int, rels: list[_Rel], n: int) -> float:
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


def _tie_counts(rel: _Rel, labels: np.ndarray, B: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Each actor's tie totals sent to (and received from) each position, (n, B)."""
    out = np.bincount(rel.row * B + labels[rel.col], weights=rel.data, minlength=n * B).reshape(n, B)
    if not rel.directed:
        return out, out
    inc = np.bincount(rel.col * B + labels[rel.row], weights=rel.data, minlength=n * B).reshape(n, B)
    return out, inc


def _move_gains(rels: list[_Rel], labels: np.ndarray, B: int) -> np.ndarray:
    """Exact change of the log-likelihood if actor ``i`` alone moved to ``b``.

    Returns an (n, B) array; the entry of an actor's own position is 0.
    Moving ``i`` from ``a`` to ``b`` changes the block totals by
    ``m - e_a c_out^T - c_in e_a^T + e_b c_out^T + c_in e_b^T`` (``c`` are
    i's tie totals to each position; the zero diagonal makes this exact), so
    only rows and columns ``a`` and ``b`` change.
    """
    gains = np.zeros((labels.size, B))
    # entries with a == b are meaningless (and may be inf - inf); they are reset below
    with np.errstate(invalid="ignore", divide="ignore"):
        for rel in rels:
            _add_move_gains(gains, rel, labels, B)
    gains[np.arange(labels.size), labels] = 0.0
    return gains


def _add_move_gains(gains: np.ndarray, rel: _Rel, labels: np.ndarray, B: int) -> None:
    n = labels.size
    ar = np.arange(n)
    a = labels
    is_a = np.arange(B)[None, :] == a[:, None]
    ones = np.ones(B)
    m = _block_totals(rel, labels, B)
    s_out, s_in = _sizes(rel, labels, B)
    c_out, c_in = _tie_counts(rel, labels, B, n)
    T = _block_terms(rel, m, s_out, s_in)
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
    for b in range(B):
        is_b = np.arange(B)[None, :] == b
        si = si_base.copy()
        si[:, b] += ui
        row_a = row_a_base.copy()
        row_a[:, b] += ci_aa
        row_b = c_out + m[b][None, :]
        row_b[ar, a] -= c_in[:, b]
        row_b[:, b] += c_in[:, b]
        terms_a = _entry_terms(rel, row_a, so_a, si, is_a)
        terms_b = _entry_terms(rel, row_b, (s_out[b] + uo)[:, None], si, is_b)
        sum_a, sum_b = terms_a @ ones, terms_b @ ones
        new = sum_a + sum_b
        if rel.directed:
            so = so_base.copy()
            so[:, b] += uo
            other = ~(is_a | is_b)
            col_a = m[:, a].T - c_in
            col_b = m[:, b][None, :] + c_in
            new += np.where(other, _entry_terms(rel, col_a, so, si_a, False), 0.0) @ ones
            new += np.where(other, _entry_terms(rel, col_b, so, (s_in[b] + ui)[:, None], False), 0.0) @ ones
        else:
            # symmetric: column a outside rows a and b mirrors row a outside columns a and b
            new += sum_a - terms_a[ar, a] - terms_a[:, b] + sum_b - terms_b[ar, a] - terms_b[:, b]
        gains[:, b] += new - old_a[:, b]


def _greedy(rels, labels, B, rng, max_sweeps):
    """Batch greedy ascent of the profile log-likelihood from ``labels``.

    Returns ``(labels, loglik, history)``; ``history`` starts with the
    log-likelihood of the initial partition.
    """
    labels = np.array(labels, dtype=np.int64)
    current = _total(rels, labels, B)
    history = [current]
    if B == 1:
        return labels, current, history
    for _ in range(max_sweeps):
        gains = _move_gains(rels, labels, B)
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
            value = _total(rels, trial, B)
            if value > current:
                labels, current, moved = trial, value, True
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


def _given_labels(labels, n: int, B: int, rng: np.random.Generator) -> np.ndarray:
    labels = np.asarray(labels)
    if labels.shape != (n,) or not np.issubdtype(labels.dtype, np.integer):
        raise UsageError(f"init_labels must hold one integer position per actor ({n}); pass last fit's labels")
    if labels.size and (labels.min() < 0 or labels.max() >= B):
        raise UsageError(f"init_labels must lie in 0 .. {B - 1}; renumber them or change n_positions")
    return _fill_empty(labels, B, rng)


def _random_labels(n: int, B: int, rng: np.random.Generator) -> np.ndarray:
    return _fill_empty(rng.integers(B, size=n), B, rng)


def _fill_empty(labels: np.ndarray, B: int, rng: np.random.Generator) -> np.ndarray:
    labels = np.asarray(labels, dtype=np.int64).copy()
    for k in range(B):
        sizes = np.bincount(labels, minlength=B)
        if sizes[k] == 0:
            donors = np.flatnonzero(labels == sizes.argmax())
            labels[rng.choice(donors)] = k
    return labels


def _spectral_labels(rels: list[_Rel], n: int, B: int, rng: np.random.Generator) -> np.ndarray:
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
        return _random_labels(n, B, rng)
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
    return _fill_empty(km.fit_predict(X), B, rng)
