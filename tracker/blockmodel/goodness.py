"""Goodness of fit of a blockmodel: inconsistencies, density correlation, permutation test.

* **Inconsistencies** count the cells that disagree with the image: the
  missing ties of blocks imaged 1 plus the present ties of blocks imaged 0
  (Doreian, Batagelj & Ferligoj 2005, ch. 6).
* **Density correlation** is the Pearson correlation, over all off-diagonal
  cells of all relations, between the 0/1 data and the density of the cell's
  block (Wasserman & Faust 1994, sec. 10.4.2).  It is computed from the block
  tables alone.
* **Relabelling baseline** (descriptive, *not* a test of structure): the
  statistic of a partition compared with its values after random
  relabellings of the actors.  For a partition *fitted to these data* it
  says almost nothing: the fit was chosen to beat relabellings, so even
  networks drawn without any positions come out "significant" (on random
  digraphs 88 of 100 at 0.05; ``tests/inference/test_fit_test.py``).  The
  fit test of a fitted partition is :mod:`tracker.inference.fit_test`, which
  refits on null-model draws.  The relabelling baseline is valid only for a
  partition fixed *before* seeing the data (e.g. given by attributes).

References
----------
.. [1] Wasserman, S. & Faust, K. (1994). Social Network Analysis, ch. 10.
.. [2] Doreian, P., Batagelj, V. & Ferligoj, A. (2005). Generalized Blockmodeling.
.. [3] Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be
   zero. Statistical Applications in Genetics and Molecular Biology 9(1).
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np
import scipy.sparse as sp

from tracker.blockmodel.blocks import BlockStats, block_stats
from tracker.blockmodel.image import image as image_matrix
from tracker.blockmodel.image import perfect_fit
from tracker.blockmodel.partition import Partition
from tracker.errors import UsageError

__all__ = [
    "inconsistencies",
    "density_correlation",
    "density_correlation_of_tables",
    "permutation_test",
    "fit_summary",
    "STATISTICS",
]

STATISTICS = ("density-correlation",)


def inconsistencies(stats: BlockStats, image: np.ndarray) -> np.ndarray:
    """Cells that disagree with an image, per relation.

    .. math::

        e_r = \\sum_{k,l:\\ b_{rkl}=1} (p_{kl} - t_{rkl})
              + \\sum_{k,l:\\ b_{rkl}=0} t_{rkl}

    (Doreian, Batagelj & Ferligoj 2005: null-block and complete-block
    inconsistencies).  Undirected relations count unordered pairs: only the
    blocks ``k <= l`` are summed (their tables are symmetric; so should the
    image be).

    Parameters
    ----------
    stats : BlockStats
    image : array of 0/1, shape (R, B, B)

    Returns
    -------
    numpy.ndarray of int, shape (R,)

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> from tracker.blockmodel.blocks import block_stats
    >>> a = sp.csr_array(np.array([[0, 1, 0], [0, 0, 0], [0, 1, 0]], dtype=float))
    >>> s = block_stats([a], [True], Partition(np.array([0, 0, 1]), 2))
    >>> inconsistencies(s, np.array([[[1, 0], [1, 0]]])).tolist()  # one 0 in each 1-block
    [2]
    """
    img = np.asarray(image)
    if img.shape != stats.ties.shape:
        raise ValueError(f"image has shape {img.shape}, expected {stats.ties.shape}")
    one = img.astype(bool)
    err = np.where(one, stats.possible - stats.ties, stats.ties)
    err = err * _block_mask(stats.directed, stats.n_positions)
    return err.sum(axis=(1, 2)).astype(np.int64)


def density_correlation(stats: BlockStats) -> float:
    """Pearson correlation between the 0/1 data and the block densities.

    Over all cells that can hold a tie (pooled over relations; unordered pairs
    for undirected relations), let ``x`` be 1 for a tie and ``d`` the density of
    the cell's block.  With ``N = sum p``, ``sum x = sum x^2 = sum d = T =
    sum t`` and ``sum x d = sum d^2 = Q = sum t^2 / p``,

    .. math::

        \\rho = \\frac{N Q - T^2}{\\sqrt{(N T - T^2)(N Q - T^2)}}
              = \\sqrt{\\frac{N Q - T^2}{N T - T^2}} ,

    the square root of the share of the data's variance that lies between
    blocks (Wasserman & Faust 1994, sec. 10.4.2 for the statistic).

    Returns
    -------
    float
        In ``[0, 1]``.  ``nan`` when the data do not vary (no tie, or every
        possible tie present); 0 when the data vary but all blocks have the
        same density (the partition explains none of the variance; a direct
        Pearson computation would divide by zero there).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> from tracker.blockmodel.blocks import block_stats
    >>> a = sp.csr_array(np.array([[0, 1, 0], [1, 0, 0], [0, 0, 0]], dtype=float))
    >>> density_correlation(block_stats([a], [False], Partition(np.array([0, 0, 1]), 2)))
    1.0
    """
    return _correlation(stats.ties, stats.possible, stats.directed)


def density_correlation_of_tables(ties, possible, directed: Sequence[bool], *, leave_out: int | None = None) -> float:
    """:func:`density_correlation` from stored block tables, optionally without one position.

    ``ties`` and ``possible`` are ``(R, B, B)`` tables as in :class:`BlockStats`.
    ``leave_out`` (0-based) drops that position's rows and columns first.  Dropping
    the position of the actors without ties gives the statistic over the actors
    with a tie: such actors hold no tie, so the other blocks are unchanged, and
    only the isolates' empty blocks (which raise the correlation for reasons
    unrelated to the tied actors' positions) go.  That is the statistic of the
    fit test (:mod:`tracker.inference.fit_test`).

    Examples
    --------
    >>> t = [[[2, 1, 0], [1, 0, 0], [0, 0, 0]]]; p = [[[2, 2, 4], [2, 0, 2], [4, 2, 2]]]
    >>> round(density_correlation_of_tables(t, p, [True]), 3), round(
    ...     density_correlation_of_tables(t, p, [True], leave_out=2), 3)
    (0.829, 0.5)
    """
    t = np.asarray(ties, dtype=np.float64)
    p = np.asarray(possible, dtype=np.float64)
    if t.shape != p.shape or t.ndim != 3 or t.shape[1] != t.shape[2] or t.shape[0] != len(directed):
        raise ValueError("ties and possible must be (R, B, B) tables with one directed flag per relation")
    if leave_out is not None:
        keep = np.arange(t.shape[1]) != int(leave_out)
        t, p = t[:, keep][:, :, keep], p[:, keep][:, :, keep]
    return _correlation(t, p, directed)


def permutation_test(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    partition: Partition,
    *,
    draws: int = 199,
    seed: int = 0,
    statistic: str | Callable[[BlockStats], float] = "density-correlation",
) -> tuple[float, float, np.ndarray]:
    """Relabelling baseline: the partition's fit against random relabellings (descriptive).

    Not a test of a partition fitted to the same data (see the module
    docstring and :mod:`tracker.inference.fit_test`); valid for a partition
    fixed in advance.  Each draw permutes the label vector among the actors (same position sizes,
    same graph) and recomputes the statistic.  The p-value is

    .. math::

        p = \\frac{1 + \\#\\{s^{(b)} \\ge s_{obs}\\}}{\\text{draws} + 1}

    (Wasserman & Faust 1994, sec. 10.4; Phipson & Smyth 2010 for the ``+ 1``).

    Parameters
    ----------
    matrices, directed
        The relations (see :func:`tracker.blockmodel.blocks.block_stats`).
    partition : Partition
    draws : int
        Number of random relabellings.
    seed : int
        Seed of :func:`numpy.random.default_rng`.
    statistic : "density-correlation" or callable
        A name from :data:`STATISTICS`, or a function of :class:`BlockStats`
        returning a float where larger means more structure.

    Returns
    -------
    observed : float
    p_value : float
        ``nan`` when the observed statistic is ``nan``.
    null_values : numpy.ndarray, shape (draws,)
    """
    if int(draws) != draws or draws < 1:
        raise UsageError(f"draws must be a positive whole number; got {draws!r}")
    draws = int(draws)
    if not callable(statistic) and statistic not in STATISTICS:
        raise UsageError(
            f"unknown statistic {statistic!r}; use one of: {', '.join(STATISTICS)}, or a function"
        )
    matrices = list(matrices)
    directed = tuple(bool(d) for d in directed)
    stats = block_stats(matrices, directed, partition)
    rng = np.random.default_rng(seed)
    labels = partition.labels
    null = np.empty(draws)

    if callable(statistic):
        observed = float(statistic(stats))
        for b in range(draws):
            perm = Partition(rng.permutation(labels), partition.n_positions)
            null[b] = float(statistic(block_stats(matrices, directed, perm)))
    else:
        observed = density_correlation(stats)
        # Position sizes do not change under relabelling, so neither do the
        # possible-tie counts; only the tie counts are recomputed, O(nnz) each.
        cells = [_tie_cells(m, d) for m, d in zip(matrices, directed)]
        n_pos = partition.n_positions
        for b in range(draws):
            perm = rng.permutation(labels)
            ties = np.stack([_tie_table(perm, rows, cols, d, n_pos) for (rows, cols), d in zip(cells, directed)])
            null[b] = _correlation(ties, stats.possible, directed)

    if np.isnan(observed):
        return observed, float("nan"), null
    p_value = (1.0 + np.count_nonzero(null >= observed - 1e-12)) / (draws + 1.0)
    return observed, float(p_value), null


def fit_summary(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    partition: Partition,
    criterion: str = "zero-block",
    alpha=None,
    cut=None,
) -> dict:
    """The fit of a partition in one dictionary of plain Python values.

    Returns
    -------
    dict
        ``criterion``; ``image`` (nested lists, ``[relation][row][column]``);
        ``inconsistencies`` (total, int); ``inconsistencies_by_relation``
        (list of int); ``density_correlation`` (float, may be ``nan``);
        ``perfect_fit`` (bool).
    """
    stats = block_stats(matrices, directed, partition)
    img = image_matrix(stats, criterion, alpha=alpha, cut=cut)
    err = inconsistencies(stats, img)
    return {
        "criterion": criterion,
        "image": img.tolist(),
        "inconsistencies": int(err.sum()),
        "inconsistencies_by_relation": [int(e) for e in err],
        "density_correlation": density_correlation(stats),
        "perfect_fit": perfect_fit(stats),
    }


def _block_mask(directed: Sequence[bool], n_pos: int) -> np.ndarray:
    """``(R, B, B)`` 0/1: the blocks that hold distinct cells (``k <= l`` when undirected)."""
    upper = np.triu(np.ones((n_pos, n_pos), dtype=np.int64))
    return np.stack([np.ones_like(upper) if d else upper for d in directed]) if directed else np.zeros((0, n_pos, n_pos), np.int64)


def _correlation(ties: np.ndarray, possible: np.ndarray, directed: Sequence[bool]) -> float:
    """Density correlation from tie and possible-tie tables (see :func:`density_correlation`)."""
    t = np.asarray(ties, dtype=np.float64)
    p = np.asarray(possible, dtype=np.float64)
    live = (p > 0) & (_block_mask(directed, p.shape[-1]) == 1)
    big_n = p[live].sum()
    big_t = t[live].sum()
    q = (t[live] ** 2 / p[live]).sum()
    var_x = big_n * big_t - big_t**2
    if var_x <= 0:
        return float("nan")
    between = max(big_n * q - big_t**2, 0.0)
    return float(min(np.sqrt(between / var_x), 1.0))


def _tie_cells(matrix: sp.sparray, is_directed: bool) -> tuple[np.ndarray, np.ndarray]:
    """Row and column of each tie (each unordered pair once when undirected)."""
    coo = sp.coo_array(matrix)
    keep = (coo.data != 0) & (coo.row != coo.col)
    if not is_directed:
        keep &= coo.row < coo.col
    return coo.row[keep].astype(np.int64), coo.col[keep].astype(np.int64)


def _tie_table(labels, rows, cols, is_directed: bool, n_pos: int) -> np.ndarray:
    """Tie counts per block for one relation, counted as in :func:`block_stats`."""
    t = np.bincount(labels[rows] * n_pos + labels[cols], minlength=n_pos * n_pos).reshape(n_pos, n_pos)
    if not is_directed:
        # An unordered pair between k and l belongs to both (k, l) and (l, k).
        t = t + t.T - np.diag(np.diag(t))
    return t
