r"""The fit test: is a period's position structure clearer than in networks without positions?

A fitting method always finds *some* positions, and a partition fitted to
the data always fits those data better than random relabellings of it, even
in a network drawn at random.  A valid test therefore repeats the **whole
procedure** on networks drawn from a null model and compares the fit it
reaches there with the fit it reaches on the data [1]_ [2]_:

1. Observed: fit the period with the method and settings of the fit (same
   method, same number of positions, same options and seed) and compute the
   statistic :math:`s_0`.
2. Null: draw :math:`m` networks from the null model; fit each one by the
   very same procedure and compute :math:`s_1 .. s_m`.
3. :math:`p = (b + 1) / (m + 1)` with :math:`b = \#\{i : s_i \ge s_0\}`
   (Phipson & Smyth 2010 [3]_: the exact p-value of a Monte Carlo test whose
   draws are sampled with replacement; it is never 0).

**Statistic.**  The density correlation (Wasserman & Faust 1994, sec.
10.4.2; :func:`tracker.blockmodel.goodness.density_correlation`): the
Pearson correlation between the 0/1 data and the density of each cell's
block, over the actors with at least one tie.  It is defined for every
method (SBM, CONCOR, REGE, optimisation), does not depend on the image
criterion, grows when positions separate dense from sparse blocks, and costs
:math:`O(\mathrm{nnz} + B^2)` once a partition is known.  The actors without
ties are left out (of the data and of every draw) because every method sets
them aside in a position of their own, whose empty blocks would otherwise
raise the statistic for reasons unrelated to the tied actors' positions.

**Null models** (per relation, each drawn independently):

``"ties"`` (default)
    The relation's ties are placed uniformly at random over the pairs of the
    actors that have a tie in the period (ordered pairs when directed,
    unordered when undirected; no self-ties).  It keeps, per relation, the
    number of ties and the multiset of tie values (they are shuffled over the
    new pairs), and the set of actors that the methods position; it is the
    Erdos-Renyi graph conditioned on its size, the usual "no structure"
    baseline (the uniform :math:`U|L` distribution of Wasserman & Faust
    1994, ch. 13; section cited from memory).  Default because it answers the question an
    analyst asks of positions ("are there blocks of different density?"):
    differences in activity between actors *are* structure for most
    position methods (a core is a set of busy actors), so a null that keeps
    every degree would call a plain core-periphery pattern "no structure".
``"degrees"``
    Keeps every actor's out- and in-degree (degree when undirected) per
    relation: a chain of degree-preserving edge swaps started at the data
    (networkx ``directed_edge_swap``, three-edge swaps, for directed
    relations; ``double_edge_swap`` for undirected ones), with
    :data:`SWAPS_PER_TIE` swaps per tie, which is the common-practice length
    for such chains to forget their start (Milo et al. 2003 use 100 per
    edge for exact uniformity on motif counts; 10 suffices for block
    densities and keeps a draw cheap).  Tie values are shuffled over the new
    ties.  Use it to ask whether positions say more than degrees do.

**auto K.**  With ``positions="auto"`` the number of positions is chosen on
every null draw as on the data (the whole procedure is refitted), because
choosing K on the data and then fixing it for the draws would let the
observed statistic profit from a choice the null draws never get.

**Determinism.**  Draw ``i`` uses the seed ``task_seeds(seed, m)[i]``
(:func:`tracker.execution.task_seeds`), and the refits run through
:func:`tracker.execution.map_tasks`: the p-value is the same for any number
of workers.

References
----------
.. [1] Davison, A. C. & Hinkley, D. V. (1997). Bootstrap Methods and their
   Application, ch. 4 (Monte Carlo tests: the statistic recomputed, by the
   same procedure, on data simulated under the null; section cited from
   memory).
.. [2] Wasserman, S. & Faust, K. (1994). Social Network Analysis, ch. 10 and 13.
.. [3] Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be
   zero: calculating exact p-values when permutations are randomly drawn.
   Statistical Applications in Genetics and Molecular Biology 9(1), art. 39.
.. [4] Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery
   rate. J. Royal Statistical Society B 57, 289-300.
.. [5] Milo, R. et al. (2003). On the uniform generation of random graphs with
   prescribed degree sequences. arXiv:cond-mat/0312028.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import scipy.sparse as sp

from tracker.blockmodel.positions import tied_actors

__all__ = [
    "NULL_MODELS",
    "DEFAULT_NULL",
    "DEFAULT_DRAWS",
    "SWAPS_PER_TIE",
    "STATISTIC",
    "Procedure",
    "FitTest",
    "fit_test",
    "fit_tests",
    "null_draw",
    "tied_statistic",
    "monte_carlo_p",
    "benjamini_hochberg",
    "period_seed",
]

NULL_MODELS = ("ties", "degrees")
DEFAULT_NULL = "ties"
#: Default number of null draws.  With 39 draws one exceedance still gives
#: p = (1 + 1) / 40 = 0.05 and none gives 0.025, so a clear structure reaches
#: p <= 0.05 with one draw of room
#: to spare.  Measured: the bundled demo's default fit (14 periods, 40 refits
#: each) takes about 20 s on a busy two-core machine, against 3-4 s without
#: the test.  Raise it (e.g. 199) for a finer p-value.
DEFAULT_DRAWS = 39
SWAPS_PER_TIE = 10
STATISTIC = "density-correlation"


@dataclass(frozen=True)
class Procedure:
    """A single-period fitting procedure, as :func:`tracker.blockmodel.positions.find_positions` runs it."""

    method: str = "structural"
    positions: int | str = 4
    seed: int = 0
    criterion: str = "zero-block"
    alpha: float | None = None
    cut: float | None = None
    k_range: tuple[int, int] = (2, 8)
    options: dict = field(default_factory=dict)

    def partition(self, matrices: Sequence[sp.sparray], directed: Sequence[bool]):
        from tracker.blockmodel.positions import find_positions

        return find_positions(matrices, directed, self.positions, method=self.method, seed=self.seed,
                              criterion=self.criterion, alpha=self.alpha, cut=self.cut,
                              k_range=tuple(self.k_range), **self.options)


@dataclass(frozen=True)
class FitTest:
    """The result of a fit test.

    ``observed`` is the statistic on the data, ``null_values`` on each draw,
    ``exceed`` = :math:`b` (draws at least as large), ``p_value`` =
    :math:`(b + 1)/(m + 1)` (nan when the observed statistic is undefined).
    """

    statistic: str
    null_model: str
    observed: float
    null_values: np.ndarray
    exceed: int
    p_value: float
    draws: int

    def summary(self) -> dict:
        """Plain values for storing (no per-draw values)."""
        finite = self.null_values[np.isfinite(self.null_values)]
        return {"statistic": self.statistic, "null_model": self.null_model,
                "observed": None if not np.isfinite(self.observed) else float(self.observed),
                "exceed": int(self.exceed), "draws": int(self.draws),
                "p_value": None if not np.isfinite(self.p_value) else float(self.p_value),
                "null_mean": float(finite.mean()) if finite.size else None,
                "null_max": float(finite.max()) if finite.size else None}


# --------------------------------------------------------------------------- p- and q-values


def monte_carlo_p(observed: float, null_values) -> tuple[float, int]:
    """``((b + 1) / (m + 1), b)`` with ``b`` the null values ``>= observed`` (Phipson & Smyth 2010).

    A null value that is nan (the statistic undefined on that draw, e.g. no
    variation) counts as not exceeding.  ``nan`` when ``observed`` is nan.

    >>> monte_carlo_p(0.5, [0.1, 0.6, 0.2, 0.5])
    (0.6, 2)
    """
    null = np.asarray(null_values, dtype=np.float64)
    if null.ndim != 1 or null.size == 0:
        raise ValueError("null_values must be a non-empty 1-d sequence")
    if not np.isfinite(observed):
        return float("nan"), 0
    b = int(np.count_nonzero(np.nan_to_num(null, nan=-np.inf) >= observed - 1e-12))
    return (b + 1.0) / (null.size + 1.0), b


def benjamini_hochberg(p_values) -> np.ndarray:
    r"""Benjamini-Hochberg (1995) q-values; nan p-values are left out and stay nan.

    .. math::

        q_{(i)} = \min_{j \ge i} \min\!\left(1, \frac{m\, p_{(j)}}{j}\right)

    over the :math:`m` non-missing p-values sorted ascending.  Checked in the
    tests against ``scipy.stats.false_discovery_control(method="bh")``.

    >>> benjamini_hochberg([0.01, 0.04, 0.03, float("nan")]).round(3).tolist()
    [0.03, 0.04, 0.04, nan]
    """
    p = np.asarray(p_values, dtype=np.float64)
    if p.ndim != 1:
        raise ValueError("p_values must be a 1-d sequence")
    ok = np.isfinite(p)
    if np.any((p[ok] < 0) | (p[ok] > 1)):
        raise ValueError("p-values must lie in [0, 1]")
    q = np.full(p.shape, np.nan)
    m = int(ok.sum())
    if m == 0:
        return q
    vals = p[ok]
    order = np.argsort(vals, kind="stable")
    scaled = vals[order] * m / np.arange(1, m + 1)
    adjusted = np.minimum(np.minimum.accumulate(scaled[::-1])[::-1], 1.0)
    out = np.empty(m)
    out[order] = adjusted
    q[ok] = out
    return q


def period_seed(seed: int, period: str) -> int:
    """A seed for one period's draws from the fit's seed and the period label.

    Independent of which other periods are fitted in the same run, so a
    period's p-value does not change when the fit is extended.
    """
    digest = hashlib.sha256(f"{int(seed)}:{period}".encode()).digest()
    return int.from_bytes(digest[:8], "little") >> 1


# --------------------------------------------------------------------------- null draws


def _ties_of(matrix: sp.sparray, is_directed: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    coo = sp.coo_array(matrix)
    keep = (coo.data != 0) & (coo.row != coo.col)
    if not is_directed:
        keep &= coo.row < coo.col
    order = np.lexsort((coo.col[keep], coo.row[keep]))
    return coo.row[keep][order], coo.col[keep][order], coo.data[keep][order]


def _build(n: int, rows, cols, values, is_directed: bool) -> sp.csr_array:
    rows, cols, values = np.asarray(rows, np.int64), np.asarray(cols, np.int64), np.asarray(values, np.float64)
    if not is_directed:
        rows, cols, values = np.r_[rows, cols], np.r_[cols, rows], np.r_[values, values]
    return sp.csr_array((values, (rows, cols)), shape=(n, n))


def _pair_from_index(k: np.ndarray, n: int, is_directed: bool) -> tuple[np.ndarray, np.ndarray]:
    """Pair number ``k`` -> (i, j): ordered off-diagonal pairs, or unordered pairs ``i < j`` in row order."""
    k = np.asarray(k, dtype=np.int64)
    if is_directed:
        i = k // (n - 1)
        r = k % (n - 1)
        return i, r + (r >= i)
    # Row i holds pairs (i, i+1 .. n-1); it starts at S(i) = i n - i (i + 1) / 2.
    kf = k.astype(np.float64)
    i = np.floor((2 * n - 1 - np.sqrt((2 * n - 1) ** 2 - 8 * kf)) / 2).astype(np.int64)
    start = i * n - i * (i + 1) // 2
    # guard the float rounding at row boundaries
    low = k < start
    i[low] -= 1
    start = i * n - i * (i + 1) // 2
    high = k >= start + (n - 1 - i)
    i[high] += 1
    start = i * n - i * (i + 1) // 2
    return i, i + 1 + (k - start)


def _uniform_ties(matrix, is_directed: bool, n: int, rng: np.random.Generator) -> sp.csr_array:
    _, _, values = _ties_of(matrix, is_directed)
    pairs = n * (n - 1) if is_directed else n * (n - 1) // 2
    m = values.size
    if m == 0 or pairs == 0:
        return sp.csr_array((n, n))
    picks = rng.choice(pairs, size=m, replace=False)
    i, j = _pair_from_index(picks, n, is_directed)
    return _build(n, i, j, rng.permutation(values), is_directed)


def _degree_swaps(matrix, is_directed: bool, n: int, rng: np.random.Generator) -> sp.csr_array:
    import networkx as nx

    rows, cols, values = _ties_of(matrix, is_directed)
    m = values.size
    graph = nx.DiGraph() if is_directed else nx.Graph()
    graph.add_nodes_from(range(n))
    graph.add_edges_from(zip(rows.tolist(), cols.tolist()))
    nswap = SWAPS_PER_TIE * m
    seed = int(rng.integers(2**31 - 1))
    try:
        if is_directed:
            nx.directed_edge_swap(graph, nswap=nswap, max_tries=100 * nswap + 100, seed=seed)
        else:
            nx.double_edge_swap(graph, nswap=nswap, max_tries=100 * nswap + 100, seed=seed)
    except (nx.NetworkXError, nx.NetworkXAlgorithmError):
        # Too few ties or nodes to swap, or no swap possible: the degree
        # sequence has this one graph (or the chain is stuck); keep it.
        pass
    edges = np.array(sorted(graph.edges()), dtype=np.int64).reshape(-1, 2)
    return _build(n, edges[:, 0], edges[:, 1], rng.permutation(values), is_directed)


def null_draw(matrices: Sequence[sp.sparray], directed: Sequence[bool], null: str,
              rng: np.random.Generator) -> list[sp.csr_array]:
    """One network drawn from a null model (see the module docstring), one matrix per relation.

    The matrices are over the same actors as the input; callers pass the tied
    actors only (:func:`fit_test` does).
    """
    if null not in NULL_MODELS:
        raise ValueError(f"unknown null model {null!r}; use one of: {', '.join(NULL_MODELS)}")
    n = matrices[0].shape[0]
    draw = _uniform_ties if null == "ties" else _degree_swaps
    return [draw(m, bool(d), n, rng) for m, d in zip(matrices, directed)]


# --------------------------------------------------------------------------- the test


def tied_statistic(matrices: Sequence[sp.sparray], directed: Sequence[bool], procedure: Procedure) -> float:
    """Fit by ``procedure`` and return the density correlation over the actors with a tie."""
    from tracker.blockmodel.blocks import block_stats
    from tracker.blockmodel.goodness import density_correlation
    from tracker.blockmodel.partition import Partition

    tied = tied_actors(matrices)
    if tied.sum() < 2:
        return float("nan")
    idx = np.flatnonzero(tied)
    mats = [sp.csr_array(m)[idx][:, idx] for m in matrices]
    part = procedure.partition(mats, directed)
    labels = part.labels
    n_pos = part.n_positions
    if part.isolates is not None:  # cannot happen on tied actors, but keep the rule explicit
        keep = labels != part.isolates
        mats = [m[keep][:, keep] for m in mats]
        labels = np.where(labels[keep] > part.isolates, labels[keep] - 1, labels[keep])
        n_pos -= 1
    return float(density_correlation(block_stats(mats, directed, Partition(labels, max(n_pos, 1)))))


def _null_task(matrices, directed, procedure: Procedure, null: str, seed: int) -> float:
    rng = np.random.default_rng(seed)
    return tied_statistic(null_draw(matrices, directed, null, rng), directed, procedure)


def _observed_task(matrices, directed, procedure: Procedure, null: str, seed: int) -> float:
    return tied_statistic(matrices, directed, procedure)


def _check(draws, null) -> int:
    if isinstance(draws, bool) or int(draws) != draws or draws < 1:
        raise ValueError(f"draws must be a positive whole number; got {draws!r}")
    if null not in NULL_MODELS:
        raise ValueError(f"unknown null model {null!r}; use one of: {', '.join(NULL_MODELS)}")
    return int(draws)


def _prepare(matrices, directed):
    matrices = [sp.csr_array(m) for m in matrices]
    directed = tuple(bool(d) for d in directed)
    if not matrices or len(matrices) != len(directed):
        raise ValueError("give one directed flag per relation and at least one relation")
    n = matrices[0].shape[0]
    if any(m.shape != (n, n) for m in matrices):
        raise ValueError("every relation's matrix must be square and over the same actors")
    idx = np.flatnonzero(tied_actors(matrices))
    return [m[idx][:, idx] for m in matrices], directed


def fit_tests(
    periods: Sequence[tuple[Sequence[sp.sparray], Sequence[bool], int]],
    procedure: Procedure,
    *,
    draws: int = DEFAULT_DRAWS,
    null: str = DEFAULT_NULL,
) -> list[FitTest]:
    """:func:`fit_test` of several periods, all refits in one :func:`~tracker.execution.map_tasks` batch.

    ``periods`` holds ``(matrices, directed, seed)`` per period.
    """
    from tracker.execution import map_tasks, task_seeds

    draws = _check(draws, null)
    if not isinstance(procedure, Procedure):
        raise ValueError("procedure must be a Procedure")
    tasks = []
    periods = list(periods)
    for matrices, directed, seed in periods:
        mats, flags = _prepare(matrices, directed)
        tasks.append((_observed_task, (mats, flags, procedure, null, 0)))
        tasks += [(_null_task, (mats, flags, procedure, null, s)) for s in task_seeds(seed, draws)]
    values = map_tasks(_run, tasks, label="null-model refits")
    out = []
    for p in range(len(periods)):
        chunk = np.asarray(values[p * (draws + 1): (p + 1) * (draws + 1)], dtype=np.float64)
        observed, null_values = float(chunk[0]), chunk[1:]
        p_value, b = monte_carlo_p(observed, null_values)
        out.append(FitTest(STATISTIC, null, observed, null_values, b, p_value, draws))
    return out


def _run(fn, args):
    return fn(*args)


def fit_test(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    procedure: Procedure,
    *,
    draws: int = DEFAULT_DRAWS,
    seed: int = 0,
    null: str = DEFAULT_NULL,
) -> FitTest:
    """Test one period's fit against a null model (see the module docstring).

    Parameters
    ----------
    matrices, directed
        The period's relations (one ``n x n`` sparse matrix each) and their
        directedness.
    procedure : Procedure
        The fitting procedure, as fitted to the data.
    draws : int
        Null-model draws :math:`m` (each one refit).
    seed : int
        Spawns one seed per draw (:func:`tracker.execution.task_seeds`).
    null : "ties" or "degrees"

    Returns
    -------
    FitTest

    Raises
    ------
    ValueError
        Bad ``draws``, ``null`` or matrices.
    """
    return fit_tests([(matrices, directed, seed)], procedure, draws=draws, null=null)[0]
