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
:class:`StaticSBM`).  Time and memory per sweep are
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

from typing import Sequence

import numpy as np
import scipy.sparse as sp

from tracker.models import likelihood as lik

__all__ = ["StaticSBM", "select_positions", "log_likelihood"]


class StaticSBM:
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
    >>> fit = StaticSBM(2, model="bernoulli").fit([a], [False])
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

    def fit(self, matrices: Sequence[sp.sparray], directed: Sequence[bool]) -> "StaticSBM":
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
        lik.check_options(self.model, self.degree_corrected)
        if int(self.restarts) < 1 or int(self.max_sweeps) < 0:
            raise ValueError("restarts must be at least 1 and max_sweeps at least 0")
        rels, n = lik.prepare(matrices, directed, self.model, self.degree_corrected)
        B = lik.check_positions(self.n_positions, n)
        rng = np.random.default_rng(self.seed)
        starts = ["given"] if self.init_labels is not None else []
        starts += ["spectral"] + ["random"] * (int(self.restarts) - 1)
        best = None
        for kind in starts:
            child = np.random.default_rng(rng.integers(2**63))
            if kind == "given":
                init = lik.given_labels(self.init_labels, n, B, child)
            elif kind == "spectral":
                init = lik.spectral_labels(rels, n, B, child)
            else:
                init = lik.random_labels(n, B, child)
            result = lik.greedy_ascent(rels, init, B, child, int(self.max_sweeps))
            if best is None or result[1] > best[1]:
                best = result
        labels, loglik, history = best
        self.labels_ = labels
        self.log_likelihood_ = float(loglik)
        self.icl_ = float(lik.icl(loglik, labels, B, rels, n))
        self.rates_ = lik.block_rates(rels, labels, B)
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
    :class:`StaticSBM`.  Relations add (independent, each with its own
    block parameters).

    Parameters
    ----------
    matrices, directed
        As in :meth:`StaticSBM.fit`.
    labels : array of int, shape (n,)
        Positions ``0 .. B-1``.
    n_positions : int, optional
        ``B``; defaults to ``labels.max() + 1``.
    model, degree_corrected
        As in :class:`StaticSBM`.

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
    lik.check_options(model, degree_corrected)
    rels, n = lik.prepare(matrices, directed, model, degree_corrected)
    labels = np.asarray(labels, dtype=np.int64)
    if labels.shape != (n,):
        raise ValueError(f"labels must have one entry per actor ({n}); pass a label for every actor")
    B = int(labels.max()) + 1 if n_positions is None else int(n_positions)
    if labels.size and (labels.min() < 0 or labels.max() >= B):
        raise ValueError("labels must lie in 0 .. n_positions - 1; renumber the positions")
    return float(lik.profile_log_likelihood(rels, labels, B))


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
    actors) an :class:`StaticSBM` is fitted with ``seed`` and ``options``,
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
        As in :meth:`StaticSBM.fit`.
    k_range : (int, int), default (1, 8)
        Smallest and largest number of positions tried.
    criterion : {"icl"}, default "icl"
    seed : int, default 0
    **options
        Passed to :class:`StaticSBM` (``model``, ``degree_corrected``,
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
        raise ValueError(f"unknown criterion {criterion!r}; use criterion='icl'")
    lo, hi = (int(k) for k in k_range)
    rels, n = lik.prepare(matrices, directed, options.get("model", "poisson"), options.get("degree_corrected", False))
    hi = min(hi, n)
    if lo < 1 or hi < lo:
        raise ValueError(f"k_range {tuple(k_range)} is empty for {n} actors; give (low, high) with 1 <= low <= high")
    diagnostics = []
    for k in range(lo, hi + 1):
        fit = StaticSBM(k, seed=seed, **options).fit(matrices, directed)
        diagnostics.append(
            {
                "n_positions": k,
                "log_likelihood": fit.log_likelihood_,
                "icl": fit.icl_,
                "n_parameters": lik.n_parameters(rels, k, n),
                "n_iter": fit.n_iter_,
            }
        )
    best = max(diagnostics, key=lambda row: row["icl"])
    return int(best["n_positions"]), diagnostics
