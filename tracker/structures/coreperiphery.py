r"""Core-periphery fits on the raw ties (Borgatti & Everett 1999).

Both models compare the binary data :math:`a_{ij}` (1 where the tie value is
nonzero) with an ideal pattern :math:`\delta_{ij}` over the off-diagonal cells
:math:`i \ne j` and report the Pearson correlation between the two as the fit [1]_.
Directed data are used as they are: the patterns are symmetric, and the
correlation runs over all :math:`n(n-1)` ordered pairs (for symmetric data this
equals the correlation over unordered pairs, each cell being counted twice).

No ``n x n`` array is formed: with :math:`N = n(n-1)` cells, :math:`m` ties and a
pattern :math:`y`, the correlation needs only

.. math::

    \sum x = m, \quad \sum x^2 = m, \quad \sum xy = \sum_{(i,j) \in A} y_{ij},
    \quad \sum y, \quad \sum y^2 ,

and for the patterns below the last two are sums over actors (see each function).

References
----------
.. [1] Borgatti, S. P. & Everett, M. G. (1999). Models of core/periphery
   structures. Social Networks 21, 375-395.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp

from tracker.errors import UsageError

__all__ = ["continuous_coreness", "discrete_core_periphery"]

# Up to this many actors the random starts are uniform (each actor in the core
# with probability 1/2); above, the degree start with about _FLIPS actors moved.
_UNIFORM_STARTS = 1000
_FLIPS = 100


def continuous_coreness(matrix, *, max_iter: int = 500, tol: float = 1e-9) -> tuple[np.ndarray, float]:
    r"""Continuous core-periphery model: a coreness per actor.

    The ideal pattern is :math:`\delta_{ij} = c_i c_j` [1]_: the tie between two
    actors is the stronger the closer both are to the core.  The coreness vector
    is estimated by least squares over the off-diagonal cells,

    .. math::

        \min_c \sum_{i \ne j} (a_{ij} - c_i c_j)^2
        = \mathrm{const} - 2\, c^\top A c + \Big(\sum_i c_i^2\Big)^2 - \sum_i c_i^4 ,

    the minimum-residual fit of a one-factor model with the diagonal left out (the
    estimator suggested for this model in [1]_, as remembered from the paper).
    Setting the gradient to zero gives the fixed point

    .. math::

        c_i = \frac{(S c)_i}{\sum_{j \ne i} c_j^2}, \qquad S = (A + A^\top)/2 ,

    which is iterated for all actors at once (a Jacobi step), halving the step
    whenever the squared error would grow, so the error never increases.  The
    start is the degree vector at its best scale.  Directed data enter through
    :math:`S`, since the pattern is symmetric.

    The returned fit is the Pearson correlation between :math:`a_{ij}` and
    :math:`c_i c_j` over the :math:`n(n-1)` off-diagonal cells, computed from
    :math:`\sum_{i \ne j} c_i c_j = (\sum c)^2 - \sum c^2`,
    :math:`\sum_{i \ne j} c_i^2 c_j^2 = (\sum c^2)^2 - \sum c^4` and
    :math:`\sum_{(i,j) \in A} c_i c_j = c^\top A c`.  Least squares and maximum
    correlation are close but not the same criterion; this function minimises the
    first and reports the second.

    When some actors are tied only to one hub (a star), the squared error has no
    minimum: it keeps falling as the hub's coreness grows and its partners'
    shrinks.  The iteration then creeps along that ray and the result after
    ``max_iter`` steps is returned; the ranking of actors is already settled, the
    correlation may still rise in the third decimal.

    Parameters
    ----------
    matrix : scipy.sparse array or array_like, shape (n, n)
        Tie values of one relation; nonzero off-diagonal cells are ties.
    max_iter : int
        Largest number of fixed-point steps.
    tol : float
        Stop when a step moves ``c`` by less than ``tol`` times its length.

    Returns
    -------
    coreness : numpy.ndarray, shape (n,)
        Nonnegative, unit Euclidean length (uniform when there are no ties).
    correlation : float
        NaN when there are no ties or every pair is tied (no variance).

    Examples
    --------
    >>> import numpy as np
    >>> star = np.zeros((4, 4)); star[0, 1:] = star[1:, 0] = 1
    >>> c, r = continuous_coreness(star)
    >>> int(np.argmax(c)), round(r, 3)
    (0, 1.0)
    """
    adj = _binary(matrix, min_actors=2)
    n = adj.shape[0]
    if adj.nnz == 0:
        return np.full(n, 1.0 / np.sqrt(n)), float("nan")
    sym = ((adj + adj.T) * 0.5).tocsr()

    def loss(c):
        sq = c * c
        return -2.0 * (c @ (sym @ c)) + sq.sum() ** 2 - (sq * sq).sum()

    start = np.asarray(sym.sum(axis=1)).ravel()
    start /= np.linalg.norm(start)
    # best length along the start direction: d/ds of -2 s^2 u'Su + s^4 (1 - sum u^4) = 0
    scale2 = (start @ (sym @ start)) / max(1.0 - (start**4).sum(), 1e-12)
    c = start * np.sqrt(scale2)
    current = loss(c)
    for _ in range(int(max_iter)):
        sq = c * c
        denom = sq.sum() - sq
        target = np.divide(sym @ c, denom, out=np.zeros(n), where=denom > 0)
        trial, trial_loss = _line_search(loss, c, target - c, current)
        if trial is None:
            break
        shift = np.linalg.norm(trial - c)
        c, current = trial, trial_loss
        if shift <= tol * np.linalg.norm(c):
            break
    c = np.clip(c, 0.0, None)  # steps from a nonnegative start stay nonnegative; clip rounding
    c /= np.linalg.norm(c)
    return c, _product_correlation(adj, c)


def discrete_core_periphery(matrix, *, seed: int = 0, restarts: int | None = None) -> tuple[np.ndarray, float]:
    r"""Discrete core-periphery model: the core that best matches the ideal pattern.

    The ideal pattern [1]_ is

    .. math::

        \delta_{ij} = \begin{cases} 1 & i \in C \text{ or } j \in C \\
                                    0 & \text{otherwise} \end{cases} \qquad (i \ne j),

    i.e. a complete core, complete core-periphery ties (the paper's standard
    choice for the off-diagonal blocks, taken here; the paper also discusses
    leaving them out) and an empty periphery.  The core maximises the Pearson
    correlation between :math:`a_{ij}` and :math:`\delta_{ij}` over the
    :math:`N = n(n-1)` off-diagonal cells.  With :math:`s = |C|`, :math:`m` ties and
    :math:`m_{PP}` ties inside the periphery,

    .. math::

        \sum \delta = N - (n-s)(n-s-1), \qquad \sum a\delta = m - m_{PP}, \qquad
        r = \frac{N \sum a\delta - m \sum\delta}
                 {\sqrt{(N m - m^2)(N \sum\delta - (\sum\delta)^2)}} ,

    so moving actor :math:`v` changes :math:`s` by one and :math:`m_{PP}` by the
    number of ties between :math:`v` and the periphery; that count is kept for all
    actors and updated from :math:`v`'s ties after each move.  The search is
    steepest ascent by single moves (into or out of the core) until none improves
    :math:`r`, from ``restarts`` starts: the best core made of the highest-degree
    actors (every threshold on total degree is scored), then random cores drawn
    from ``numpy.random.default_rng(seed)``: up to 1,000 actors each actor is in
    with probability 1/2; above, the degree start with each actor's membership
    flipped with probability ``100 / n`` (about 100 changes), since an ascent
    from a random half of a large network takes ``n / 2`` moves of ``O(n)``
    each and ends far below the degree start.  As :math:`r` falls with
    :math:`m_{PP}`, the best move out of the core is the core actor with the
    fewest ties to the periphery and the best move in the periphery actor with
    the most, so each step compares two candidates.  The core keeps between 1
    and ``n - 2`` actors, the sizes for which the pattern varies.

    Parameters
    ----------
    matrix : scipy.sparse array or array_like, shape (n, n)
        Tie values of one relation, ``n >= 3``; nonzero off-diagonal cells are ties.
    seed : int
    restarts : int, optional
        Number of starts (at least 1).  Default: 20 up to 1,000 actors, then
        ``10,000 / n`` (at least 2), which bounds the work of the starts (each
        ascent takes up to a few thousand moves of ``O(n)`` time; measured
        40 ms per start at 5,000 actors and 12,500 ties).

    Returns
    -------
    core : numpy.ndarray of bool, shape (n,)
        When there are no ties, or every pair is tied, the correlation is
        undefined: the mask then marks the actors with ties and the correlation is
        NaN.
    correlation : float

    Examples
    --------
    >>> import numpy as np
    >>> a = np.zeros((5, 5)); a[:2, :] = a[:, :2] = 1; np.fill_diagonal(a, 0)
    >>> core, r = discrete_core_periphery(a)
    >>> core.tolist(), round(r, 6)
    ([True, True, False, False, False], 1.0)
    """
    adj = _binary(matrix, min_actors=3)
    if restarts is None:
        restarts = 20 if adj.shape[0] <= _UNIFORM_STARTS else max(2, 10 * _UNIFORM_STARTS // adj.shape[0])
    if int(restarts) < 1:
        raise UsageError(f"restarts must be at least 1, got {restarts}; use e.g. restarts=20")
    n = adj.shape[0]
    n_cells, n_ties = n * (n - 1), adj.nnz
    both = (adj + adj.T).tocsr()  # ordered ties between each pair: a_ij + a_ji
    degree = np.asarray(both.sum(axis=1)).ravel()
    if n_ties in (0, n_cells):
        return degree > 0, float("nan")

    def corr(size, tied_pp):
        # floats throughout: N * sum(delta) overflows int64 near n = 10^5
        size = np.asarray(size, dtype=np.float64)
        cells, ties = float(n_cells), float(n_ties)
        ideal = cells - (n - size) * (n - size - 1)
        num = cells * (ties - tied_pp) - ties * ideal
        den = (cells * ties - ties**2) * (cells * ideal - ideal**2)
        with np.errstate(invalid="ignore", divide="ignore"):
            r = num / np.sqrt(den)
        return np.where((size >= 1) & (size <= n - 2), r, -np.inf)

    def corr_one(size, tied_pp):
        # corr for one move, in plain floats (the same operations, so the same value)
        if not 1 <= size <= n - 2:
            return -math.inf
        cells, ties = float(n_cells), float(n_ties)
        ideal = cells - (n - size) * (n - size - 1.0)
        den = (cells * ties - ties**2) * (cells * ideal - ideal**2)
        if not den > 0:
            return float(corr(size, tied_pp))
        return (cells * (ties - tied_pp) - ties * ideal) / math.sqrt(den)

    rng = np.random.default_rng(seed)
    first = _degree_start(adj, degree, corr)
    flip = 0.5 if n <= _UNIFORM_STARTS else _FLIPS / n
    starts = [first]
    starts += [(rng.random(n) < 0.5) if n <= _UNIFORM_STARTS else first ^ (rng.random(n) < flip)
               for _ in range(int(restarts) - 1)]
    best_mask, best_r = None, -np.inf
    for mask in starts:
        mask = _repair(mask, degree)
        periphery = (~mask).astype(np.float64)
        to_periphery = both @ periphery
        tied_pp = float(periphery @ (adj @ periphery))
        size = int(mask.sum())
        r = float(corr(size, tied_pp))
        # Moving a core actor out scores best for the smallest count of ties to the
        # periphery, moving one in for the largest (the score is monotone in the
        # count): two candidates, the first actor among equals, as an argmax over
        # all actors would choose.  The two keys are kept up to date move by move.
        key_out = np.where(mask, to_periphery, np.inf)
        key_in = np.where(mask, -np.inf, to_periphery)
        while True:
            out_v = int(np.argmin(key_out))
            in_v = int(np.argmax(key_in))
            cand = (corr_one(size - 1, tied_pp + float(to_periphery[out_v])) if mask[out_v] else -math.inf,
                    corr_one(size + 1, tied_pp - float(to_periphery[in_v])) if not mask[in_v] else -math.inf)
            pick = 0 if cand[0] > cand[1] or (cand[0] == cand[1] and out_v < in_v) else 1
            v = (out_v, in_v)[pick]
            if not cand[pick] > r + 1e-12:
                break
            r = float(cand[pick])
            sign = 1.0 if mask[v] else -1.0  # core -> periphery adds ties to m_PP
            tied_pp += sign * to_periphery[v]
            size -= int(sign)
            mask[v] = not mask[v]
            lo, hi = both.indptr[v], both.indptr[v + 1]
            # v joined the periphery (sign +1) or left it (sign -1)
            nbrs = both.indices[lo:hi]
            to_periphery[nbrs] += sign * both.data[lo:hi]
            touched = np.append(nbrs, v)
            key_out[touched] = np.where(mask[touched], to_periphery[touched], np.inf)
            key_in[touched] = np.where(mask[touched], -np.inf, to_periphery[touched])
        if r > best_r:
            best_mask, best_r = mask, r
    return best_mask, float(best_r)


def _line_search(loss, c, step, current):
    """Take the Jacobi step, halved until the squared error does not grow (None if never)."""
    t = 1.0
    while t >= 1.0 / 1024:
        trial = c + t * step
        trial_loss = loss(trial)
        if trial_loss <= current:
            return trial, trial_loss
        t *= 0.5
    return None, current


def _repair(mask: np.ndarray, degree: np.ndarray) -> np.ndarray:
    """A start with 1 .. n-2 core actors: add the best-tied or drop the least-tied actors."""
    mask = mask.copy()
    by_degree = np.argsort(-degree, kind="stable")
    if not mask.any():
        mask[by_degree[0]] = True
    excess = int(mask.sum()) - (mask.size - 2)
    if excess > 0:
        in_core = by_degree[mask[by_degree]]
        mask[in_core[-excess:]] = False
    return mask


def _binary(matrix, *, min_actors: int) -> sp.csr_array:
    """0/1 CSR of the nonzero off-diagonal cells."""
    mat = sp.csr_array(matrix) if sp.issparse(matrix) else sp.csr_array(np.asarray(matrix, dtype=np.float64))
    if mat.ndim != 2 or mat.shape[0] != mat.shape[1]:
        raise UsageError(f"a tie matrix must be square (n, n), got shape {mat.shape}; pass one relation's matrix")
    n = mat.shape[0]
    if n < min_actors:
        raise UsageError(
            f"a core-periphery fit needs at least {min_actors} actors, got {n}; use a longer period or more actors"
        )
    mat.sum_duplicates()
    coo = mat.tocoo()
    keep = (coo.row != coo.col) & (coo.data != 0)
    return sp.csr_array(
        (np.ones(int(keep.sum())), (coo.row[keep], coo.col[keep])), shape=(n, n), dtype=np.float64
    )


def _product_correlation(adj: sp.csr_array, c: np.ndarray) -> float:
    """Pearson correlation of a_ij with c_i c_j over the off-diagonal cells, from sums."""
    n = adj.shape[0]
    n_cells, n_ties = n * (n - 1), adj.nnz
    s1, s2, s4 = c.sum(), (c * c).sum(), (c**4).sum()
    sum_y = s1 * s1 - s2
    sum_yy = s2 * s2 - s4
    sum_xy = c @ (adj @ c)
    num = n_cells * sum_xy - n_ties * sum_y
    den = (n_cells * n_ties - n_ties**2) * (n_cells * sum_yy - sum_y**2)
    if not den > 0:
        return float("nan")
    return float(num / np.sqrt(den))


def _degree_start(adj: sp.csr_array, degree: np.ndarray, corr) -> np.ndarray:
    """The best core among "the s highest-degree actors", every s scored at once."""
    n = adj.shape[0]
    rank = np.empty(n, dtype=np.int64)
    rank[np.argsort(-degree, kind="stable")] = np.arange(n)
    coo = adj.tocoo()
    # a tie lies inside the periphery of the top-s core iff both ends rank >= s
    low = np.minimum(rank[coo.row], rank[coo.col])
    inside = np.cumsum(np.bincount(low, minlength=n)[::-1])[::-1]  # ties with low >= s
    sizes = np.arange(n)
    scores = corr(sizes, inside[sizes].astype(np.float64))
    best = int(np.argmax(scores))
    return rank < best
