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
  mean of all off-diagonal values (the valued analogue of alpha density).

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

__all__ = ["CRITERIA", "image", "perfect_fit"]

CRITERIA = ("zero-block", "one-block", "density", "max-value", "mean-value")


def image(stats: BlockStats, criterion: str, *, alpha=None, cut=None) -> np.ndarray:
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
    else:
        out = tied & (stats.mean_value >= stats.network_mean[:, None, None])
    return out.astype(np.int64)


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
