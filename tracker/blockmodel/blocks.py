"""Block tables: ties, possible ties, totals and maxima per block.

For a partition of the actors into ``B`` positions and ``R`` relations, the
block of relation ``r`` from position ``k`` to position ``l`` holds the cells
``x_{ij}`` with ``i`` in ``k``, ``j`` in ``l`` and ``i != j``.  Its summary
numbers are

.. math::

    t_{rkl} = \\#\\{x_{ij} \\ne 0\\}, \\qquad
    s_{rkl} = \\sum x_{ij}, \\qquad
    m_{rkl} = \\max x_{ij}, \\qquad
    p_{kl} = n_k n_l - \\delta_{kl} n_k ,

and the block density is :math:`t_{rkl} / p_{kl}` (Wasserman & Faust 1994,
sec. 10.2).  An undirected relation counts each unordered pair once: its
diagonal blocks have :math:`p_{kk} = n_k (n_k - 1) / 2` possible ties and hold
half the non-zero cells of the symmetric matrix; its off-diagonal blocks keep
:math:`p_{kl} = n_k n_l` and the table is symmetric.

Everything is computed from the sparse products :math:`Z^T A Z`, where ``Z``
is the ``n x B`` membership matrix, and a group-by maximum over the non-zero
cells: time and memory are :math:`O(\\mathrm{nnz} + B^2)` per relation.

References
----------
.. [1] Wasserman, S. & Faust, K. (1994). Social Network Analysis, ch. 10.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import scipy.sparse as sp

from tracker.blockmodel.partition import Partition

__all__ = ["BlockStats", "block_stats"]


@dataclass(frozen=True, eq=False)
class BlockStats:
    """Summary numbers of every block of every relation.

    Arrays of shape ``(R, B, B)`` are indexed ``[relation, row position,
    column position]``.

    Attributes
    ----------
    ties : numpy.ndarray of int, shape (R, B, B)
        Number of cells with a non-zero value (unordered pairs for an
        undirected relation).
    possible : numpy.ndarray of int, shape (R, B, B)
        Number of cells: ``n_k n_l`` off the diagonal, ``n_k (n_k - 1)`` on it
        (``n_k (n_k - 1) / 2`` for an undirected relation).
    total : numpy.ndarray of float, shape (R, B, B)
        Sum of the values, counted like ``ties``.
    maximum : numpy.ndarray of float, shape (R, B, B)
        Largest value in the block; 0 for a block without ties.
    directed : tuple of bool
        Directedness of each relation.
    sizes : numpy.ndarray of int, shape (B,)
        Number of actors in each position.
    network_ties, network_possible : numpy.ndarray of int, shape (R,)
        Ties and possible ties of the whole network: ``n (n - 1)`` possible
        (``n (n - 1) / 2`` undirected).
    network_total : numpy.ndarray of float, shape (R,)
        Sum of all values (each unordered pair once when undirected).
    network_median_positive : numpy.ndarray of float, shape (R,)
        Median of the non-zero values (each unordered pair once when
        undirected); 0 for a relation without ties.  It is the default cut of
        the max-value image criterion (see :func:`tracker.blockmodel.image.image`).
    """

    ties: np.ndarray
    possible: np.ndarray
    total: np.ndarray
    maximum: np.ndarray
    directed: tuple[bool, ...]
    sizes: np.ndarray
    network_ties: np.ndarray
    network_possible: np.ndarray
    network_total: np.ndarray
    network_median_positive: np.ndarray

    @property
    def n_relations(self) -> int:
        return int(self.ties.shape[0])

    @property
    def n_positions(self) -> int:
        return int(self.sizes.size)

    @property
    def density(self) -> np.ndarray:
        """Block densities ``ties / possible``; 0 where no tie is possible."""
        return _ratio(self.ties, self.possible)

    @property
    def mean_value(self) -> np.ndarray:
        """Mean value per possible cell ``total / possible``; 0 where no cell exists."""
        return _ratio(self.total, self.possible)

    @property
    def network_density(self) -> np.ndarray:
        """Whole-network density per relation, shape ``(R,)``."""
        return _ratio(self.network_ties, self.network_possible)

    @property
    def network_mean(self) -> np.ndarray:
        """Mean of all off-diagonal values per relation, shape ``(R,)``."""
        return _ratio(self.network_total, self.network_possible)


def block_stats(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    partition: Partition,
) -> BlockStats:
    """Tabulate ties, possible ties, value totals and maxima per block.

    Parameters
    ----------
    matrices : sequence of scipy.sparse arrays
        One ``n x n`` tie-value matrix per relation, zero diagonal, symmetric
        when undirected.  Any non-zero value is a tie.
    directed : sequence of bool
        One flag per relation.
    partition : Partition
        The positions of the ``n`` actors.

    Returns
    -------
    BlockStats

    Notes
    -----
    ``ties = Z^T B Z`` and ``total = Z^T A Z`` where ``B`` is the 0/1 pattern
    of ``A``; for undirected relations the diagonal of both is halved so that
    each unordered pair counts once (Wasserman & Faust 1994, sec. 10.2).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> a = sp.csr_array(np.array([[0, 1, 0], [1, 0, 0], [0, 1, 0]], dtype=float))
    >>> s = block_stats([a], [True], Partition(np.array([0, 0, 1]), 2))
    >>> s.ties[0].tolist(), s.possible[0].tolist()
    ([[2, 0], [1, 0]], [[2, 2], [2, 0]])
    """
    matrices = list(matrices)
    directed = tuple(bool(d) for d in directed)
    if len(matrices) != len(directed):
        raise ValueError("give one directed flag per matrix")
    n, n_pos = partition.n, partition.n_positions
    labels = partition.labels
    sizes = partition.sizes().astype(np.int64)
    z = partition.indicator()
    full = np.outer(sizes, sizes) - np.diag(sizes)

    R = len(matrices)
    ties = np.zeros((R, n_pos, n_pos), dtype=np.int64)
    possible = np.zeros((R, n_pos, n_pos), dtype=np.int64)
    total = np.zeros((R, n_pos, n_pos), dtype=np.float64)
    maximum = np.zeros((R, n_pos, n_pos), dtype=np.float64)
    net_ties = np.zeros(R, dtype=np.int64)
    net_possible = np.zeros(R, dtype=np.int64)
    net_total = np.zeros(R, dtype=np.float64)
    net_median = np.zeros(R, dtype=np.float64)

    for r, (mat, is_directed) in enumerate(zip(matrices, directed)):
        coo = sp.coo_array(mat)
        if coo.shape != (n, n):
            raise ValueError(f"matrix {r} has shape {coo.shape}, expected {(n, n)}")
        keep = (coo.data != 0) & (coo.row != coo.col)
        rows, cols, vals = coo.row[keep], coo.col[keep], coo.data[keep].astype(np.float64)
        values = sp.csr_array((vals, (rows, cols)), shape=(n, n))
        pattern = sp.csr_array((np.ones(vals.size), (rows, cols)), shape=(n, n))
        t = np.rint((z.T @ pattern @ z).toarray()).astype(np.int64) if n else np.zeros((n_pos, n_pos), np.int64)
        s = (z.T @ values @ z).toarray() if n else np.zeros((n_pos, n_pos))

        # Group-by maximum over the non-zero cells: one pass over the ties.
        flat = np.full(n_pos * n_pos, -np.inf)
        np.maximum.at(flat, labels[rows] * n_pos + labels[cols], vals)
        flat[np.isneginf(flat)] = 0.0
        maximum[r] = flat.reshape(n_pos, n_pos)

        p = full.copy()
        if is_directed:
            upper = np.ones(vals.size, dtype=bool)
            net_possible[r] = n * (n - 1)
        else:
            # Each unordered pair sits twice in a diagonal block of Z^T A Z.
            idx = np.arange(n_pos)
            t[idx, idx] //= 2
            s[idx, idx] /= 2.0
            p[idx, idx] //= 2
            upper = rows < cols
            net_possible[r] = n * (n - 1) // 2
        ties[r], total[r], possible[r] = t, s, p
        net_ties[r] = int(upper.sum())
        net_total[r] = float(vals[upper].sum())
        net_median[r] = float(np.median(vals[upper])) if upper.any() else 0.0

    return BlockStats(
        ties=ties,
        possible=possible,
        total=total,
        maximum=maximum,
        directed=directed,
        sizes=sizes,
        network_ties=net_ties,
        network_possible=net_possible,
        network_total=net_total,
        network_median_positive=net_median,
    )


def _ratio(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """``num / den`` with 0 where ``den == 0``."""
    num = np.asarray(num, dtype=np.float64)
    den = np.asarray(den, dtype=np.float64)
    out = np.zeros(np.broadcast(num, den).shape)
    np.divide(num, den, out=out, where=den != 0)
    return out
