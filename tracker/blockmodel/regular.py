r"""Positions of regularly equivalent actors.

Regularly equivalent actors (White & Reitz 1983) have ties of the same kinds to
and from equivalent others, not necessarily to the same others: two managers
are equivalent because each has some subordinates, not the same subordinates.
Exact positions are the maximal regular equivalence of the binary data
(Borgatti & Everett 1993); approximate positions cluster the graded REGE
similarities of the valued data (White & Reitz 1983; Wasserman & Faust 1994,
sec. 12.4).

References
----------
.. [1] White, D. R. & Reitz, K. P. (1983). Graph and semigroup homomorphisms on
   networks of relations. Social Networks 5, 193-234.
.. [2] Borgatti, S. P. & Everett, M. G. (1993). Two algorithms for computing
   regular equivalence. Social Networks 15, 361-376.
.. [3] Wasserman, S. & Faust, K. (1994). Social Network Analysis, ch. 12.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.spatial.distance import squareform

from tracker.blockmodel.equivalence import (
    _check_n_positions,
    _first_appearance,
    _refine_regular,
    _validate,
    rege_similarities,
)
from tracker.errors import UsageError

__all__ = ["RegularPositions"]

_LINKAGES = ("single", "complete", "average", "weighted")


class RegularPositions:
    r"""Find positions of (approximately) regularly equivalent actors.

    With ``exact=True`` the positions are the classes of the maximal regular
    equivalence of the binary data (:func:`.equivalence.maximal_regular_partition`;
    any non-zero value is a tie).  That partition is unique, so ``n_positions``
    is then ignored and the number of positions is whatever the data give (it
    may exceed ``n_positions``).

    Otherwise the REGE similarities :math:`M_{ij}`
    (:func:`.equivalence.rege_similarities`, ``iterations`` steps) are turned
    into dissimilarities :math:`1 - M_{ij}` and clustered hierarchically, and
    the tree is cut into at most ``n_positions`` clusters (fewer when merges tie
    at the cut height).  With ``n_positions >= n`` every actor is a position of
    its own.  The method is deterministic; ``seed`` is unused.

    Parameters
    ----------
    n_positions : int
    seed : int, default 0
        Unused.
    exact : bool, default False
    iterations : int, default 3
    linkage : {"average", "complete", "single", "weighted"}, default "average"
    match : {"pair", "arc"}, default "pair"
        How REGE matches ties; see :func:`.equivalence.rege_similarities`.

    Attributes
    ----------
    labels_ : numpy.ndarray of int, shape (n,)
    n_positions_ : int
    similarities_ : numpy.ndarray, shape (n, n), or None
        The REGE similarities (``None`` when ``exact=True``).
    linkage_ : numpy.ndarray, shape (n - 1, 4)
        The merge tree (empty when no clustering was done).
    n_iter_ : int
        Refinement steps (``exact=True``) or REGE steps (0 when no clustering
        was needed).

    Examples
    --------
    Two directed paths 0 -> 1 -> 2 and 3 -> 4 -> 5: sources, middles, sinks.

    >>> import numpy as np, scipy.sparse as sp
    >>> x = sp.csr_array(([1.0] * 4, ([0, 1, 3, 4], [1, 2, 4, 5])), shape=(6, 6))
    >>> RegularPositions(3, exact=True).fit([x], [True]).labels_
    array([0, 1, 2, 0, 1, 2])
    >>> RegularPositions(3).fit([x], [True]).labels_
    array([0, 1, 2, 0, 1, 2])

    References
    ----------
    .. [1] White, D. R. & Reitz, K. P. (1983). Social Networks 5, 193-234.
    .. [2] Borgatti, S. P. & Everett, M. G. (1993). Social Networks 15, 361-376.
    """

    def __init__(
        self, n_positions, *, seed=0, exact=False, iterations=3, linkage="average", match="pair"
    ):
        self.n_positions = n_positions
        self.seed = seed
        self.exact = exact
        self.iterations = iterations
        self.linkage = linkage
        self.match = match

    def fit(self, matrices: Sequence, directed: Sequence[bool]) -> "RegularPositions":
        """Find the positions of the actors of ``matrices`` (one sparse matrix per relation)."""
        self.similarities_ = None
        self.linkage_ = np.empty((0, 4))
        if self.exact:
            labels, self.n_iter_ = _refine_regular(matrices, directed)
            self.labels_ = labels
            self.n_positions_ = int(labels.max()) + 1 if labels.size else 0
            return self
        n_positions = _check_n_positions(self.n_positions)
        if self.linkage not in _LINKAGES:
            raise UsageError(f"unknown linkage {self.linkage!r}; use one of {', '.join(_LINKAGES)}")
        _, _, n = _validate(matrices, directed)
        self.n_iter_ = 0
        if n_positions >= n:
            labels = np.arange(n)
        elif n_positions == 1:
            labels = np.zeros(n, dtype=np.int64)
        else:
            sim = rege_similarities(matrices, directed, self.iterations, match=self.match)
            self.similarities_ = sim
            self.n_iter_ = self.iterations
            dist = 1.0 - sim
            np.fill_diagonal(dist, 0.0)
            self.linkage_ = linkage(squareform(dist, checks=False), method=self.linkage)
            labels = fcluster(self.linkage_, t=n_positions, criterion="maxclust")
        self.labels_ = _first_appearance(labels)
        self.n_positions_ = int(self.labels_.max()) + 1 if n else 0
        return self
