"""Image matrices: the 0/1 summary of each block under a stated criterion.

An image has one entry per relation and ordered pair of positions.  The
criteria follow Wasserman & Faust (1994, sec. 10.2):

* ``"zero-block"`` (lean fit): 1 unless the block holds no tie at all;
* ``"one-block"``: 1 only if the block is complete (every possible tie present);
* ``"density"`` (alpha density): 1 if the block density reaches ``alpha``,
  by default the relation's whole-network density (common practice);
* ``"max-value"``: 1 if the largest value in the block reaches ``cut``
  (the valued analogue of zero-block);
* ``"mean-value"``: 1 if the block's mean value per possible cell reaches the
  mean of all off-diagonal values (the valued analogue of alpha density);
* ``"above-background"`` (noise-aware, for sparse data with stray ties): 1
  only if the block holds clearly more ties than the relation's background
  rate, its whole-network density ``d``: the one-sided binomial tail
  :math:`P(X \\ge t)`, :math:`X \\sim \\mathrm{Bin}(p, d)`, is at most
  ``level / L`` (``level`` = :data:`BACKGROUND_LEVEL` = 0.05 unless given,
  ``L`` = the relation's blocks that can hold a tie: a Bonferroni bound,
  so that a network of uniformly scattered ties gets an all-0 image with
  probability at least 0.95).  Zero-block stays the textbook criterion
  and the default; under it one stray tie makes a block 1.

A 1 in an image asserts ties, so under every criterion a block without any
tie is 0, and so is a block in which no tie is possible (the diagonal block of
a one-actor position).

References
----------
.. [1] Wasserman, S. & Faust, K. (1994). Social Network Analysis, ch. 10.
"""

from __future__ import annotations

import numpy as np

from tracker.blockmodel.blocks import BlockStats
from tracker.errors import UsageError

__all__ = ["CRITERIA", "BACKGROUND_LEVEL", "image", "perfect_fit", "above_background"]

CRITERIA = ("zero-block", "one-block", "density", "max-value", "mean-value", "above-background")

#: Family-wise level of the above-background criterion per relation (common practice: 5%).
BACKGROUND_LEVEL = 0.05


def image(stats: BlockStats, criterion: str, *, alpha=None, cut=None, level: float | None = None) -> np.ndarray:
    """The image matrix of a blockmodel under one criterion.

    Parameters
    ----------
    stats : BlockStats
        Block tables from :func:`tracker.blockmodel.blocks.block_stats`.
    criterion : str
        One of :data:`CRITERIA`.
    alpha : float or sequence of float, optional
        Density threshold for ``"density"``, one value or one per relation, in
        ``[0, 1]``.  Default: each relation's whole-network density
        :math:`\\sum t / \\sum p` (Wasserman & Faust 1994, sec. 10.2.2).
    cut : float or sequence of float, optional
        Value threshold for ``"max-value"``, one value or one per relation.
        Default: the median of the relation's non-zero values
        (``stats.network_median_positive``).  Rationale: the max-value
        criterion asks whether a block holds at least one *strong* tie; the
        median non-zero value makes "strong" mean "at least as strong as a
        typical tie" and adapts to the scale of the data (counts of events,
        0-4 ratings, weights).  On 0/1 data it equals 1, so the criterion
        then coincides with zero-block, as it should.
    level : float, optional
        Family-wise level of ``"above-background"`` (default
        :data:`BACKGROUND_LEVEL`), in ``(0, 1)``.

    Returns
    -------
    numpy.ndarray of int, shape (R, B, B)
        1 where the block is judged tied, else 0.

    Notes
    -----
    With ``t`` ties, ``p`` possible ties, total ``s`` and maximum ``m`` per
    block, and whole-network density ``d`` and mean ``\\bar x``:

    .. math::

        \\text{zero-block: } t > 0 \\qquad
        \\text{one-block: } t = p > 0 \\qquad
        \\text{density: } t/p \\ge \\alpha \\\\
        \\text{max-value: } m \\ge c \\qquad
        \\text{mean-value: } s/p \\ge \\bar x

    each also requiring ``t > 0``.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> from tracker.blockmodel.blocks import block_stats
    >>> from tracker.blockmodel.partition import Partition
    >>> a = sp.csr_array(np.array([[0, 1, 0], [1, 0, 0], [0, 1, 0]], dtype=float))
    >>> s = block_stats([a], [True], Partition(np.array([0, 0, 1]), 2))
    >>> image(s, "zero-block")[0].tolist(), image(s, "one-block")[0].tolist()
    ([[1, 0], [1, 0]], [[1, 0], [0, 0]])
    """
    if criterion not in CRITERIA:
        raise UsageError(
            f"unknown image criterion {criterion!r}; use one of: {', '.join(CRITERIA)}"
        )
    n_rel = stats.n_relations
    tied = (stats.ties > 0) & (stats.possible > 0)
    if criterion == "zero-block":
        out = tied
    elif criterion == "one-block":
        out = tied & (stats.ties == stats.possible)
    elif criterion == "density":
        level = _per_relation(alpha, stats.network_density, n_rel, "alpha")
        if np.any((level < 0) | (level > 1)):
            raise UsageError("alpha must lie between 0 and 1; give a density such as 0.25")
        out = tied & (stats.density >= level[:, None, None])
    elif criterion == "max-value":
        level = _per_relation(cut, stats.network_median_positive, n_rel, "cut")
        out = tied & (stats.maximum >= level[:, None, None])
    elif criterion == "mean-value":
        out = tied & (stats.mean_value >= stats.network_mean[:, None, None])
    else:
        out = tied & above_background(stats, BACKGROUND_LEVEL if level is None else level)
    return out.astype(np.int64)


def above_background(stats: BlockStats, level: float = BACKGROUND_LEVEL) -> np.ndarray:
    """Blocks whose ties clearly exceed the relation's whole-network density (see the module docstring).

    Returns a boolean ``(R, B, B)`` array: the binomial upper tail
    ``P(X >= t | p, d)`` (``scipy.stats.binom.sf(t - 1, p, d)``) is at most
    ``level / L``, with ``L`` the relation's blocks that can hold a tie
    (``k <= l`` for an undirected relation, whose table is symmetric).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> from tracker.blockmodel.blocks import block_stats
    >>> from tracker.blockmodel.partition import Partition
    >>> a = np.zeros((20, 20)); a[:10, :10] = 1; np.fill_diagonal(a, 0); a[15, 3] = 1  # one stray tie
    >>> s = block_stats([sp.csr_array(a)], [True], Partition(np.repeat([0, 1], 10), 2))
    >>> above_background(s)[0].astype(int).tolist(), image(s, "zero-block")[0].tolist()
    ([[1, 0], [0, 0]], [[1, 0], [1, 0]])
    """
    from scipy.stats import binom

    if not 0 < float(level) < 1:
        raise UsageError(f"the above-background level must lie between 0 and 1, not {level}")
    ties = np.asarray(stats.ties, dtype=np.float64)
    possible = np.asarray(stats.possible, dtype=np.float64)
    d = np.asarray(stats.network_density, dtype=np.float64)[:, None, None]
    n_pos = stats.n_positions
    upper = np.triu(np.ones((n_pos, n_pos), dtype=bool))
    mask = np.stack([np.ones_like(upper) if dr else upper for dr in stats.directed]) if len(stats.directed) else \
        np.zeros((0, n_pos, n_pos), bool)
    live = (possible > 0) & mask
    n_blocks = np.maximum(live.sum(axis=(1, 2)), 1)[:, None, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        tail = binom.sf(ties - 1, possible, np.clip(d, 0.0, 1.0))
    return (possible > 0) & (ties > 0) & (tail <= level / n_blocks) & (ties > d * possible)


def perfect_fit(stats: BlockStats) -> bool:
    """Whether every block is empty or complete, in every relation.

    This is exact structural equivalence of the partition (Lorrain & White
    1971; Wasserman & Faust 1994, sec. 10.2.1): blocks where no tie is
    possible are ignored.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> from tracker.blockmodel.blocks import block_stats
    >>> from tracker.blockmodel.partition import Partition
    >>> a = sp.csr_array(np.array([[0, 1, 0], [1, 0, 0], [0, 0, 0]], dtype=float))
    >>> perfect_fit(block_stats([a], [False], Partition(np.array([0, 0, 1]), 2)))
    True
    """
    live = stats.possible > 0
    exact = (stats.ties == 0) | (stats.ties == stats.possible)
    return bool(np.all(exact | ~live))


def _per_relation(value, default: np.ndarray, n_rel: int, name: str) -> np.ndarray:
    """A threshold given once or per relation, as an ``(R,)`` float array."""
    if value is None:
        return np.asarray(default, dtype=np.float64)
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == 0:
        return np.full(n_rel, float(arr))
    if arr.shape != (n_rel,):
        raise UsageError(f"{name} needs one value or one per relation ({n_rel}); got {arr.size}")
    return arr
