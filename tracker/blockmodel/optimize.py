"""Direct optimisation of a partition against ideal block types.

Generalized blockmodeling (Doreian, Batagelj & Ferligoj 2005) chooses the
partition of the actors into ``B`` positions that minimises the number of
inconsistencies between the data and the nearest ideal block of an allowed
type.  For relation ``r`` and block ``(k, l)`` with ``t`` ties among ``p``
possible cells (self-ties excluded), the block types here cost

.. math::

    \\delta_{null} = t, \\qquad \\delta_{complete} = p - t, \\qquad
    \\delta_{regular} = (n_l - c)\\, n_k + (n_k - q)\\, c ,

where ``q`` is the number of rows of the block holding at least one tie and
``c`` the number of such columns (the regular-block deviation of Doreian,
Batagelj & Ferligoj 2005, ch. 7).  It equals :math:`n_k n_l - q c`, the number
of cells lying in a row or a column without any tie, and is 0 exactly when
every row and column holds a tie (the definition of a regular block); both
are checked by brute force in ``tests/blockmodel/test_regular_definitions.py``.
The criterion is

.. math::

    P(\\phi) = \\sum_r w_r \\sum_{k,l} \\min_{T \\in \\text{allowed}}
               \\delta_T(r, k, l)
               \\; + \\; \\lambda \\, \\#\\{i : \\phi(i) \\ne \\phi_0(i)\\},

with ``w_r = 1`` for a directed relation and ``w_r = 1/2`` for an undirected
one read as its symmetric matrix (so that null and complete costs count each
unordered pair once, as in :mod:`tracker.blockmodel.blocks`), and an optional
penalty ``lambda`` per actor whose position differs from a prior one
``phi_0`` (evolutionary clustering, Chakrabarti, Kumar & Tomkins 2006).
Valued data are binarised: any non-zero value is a tie.

The search is the relocation-and-exchange local search of Doreian, Batagelj
& Ferligoj (2005, ch. 6) from many starts.  It keeps, per actor, the number
of its ties to and from each position (two ``n x R x B`` arrays), the block
tie counts and the position sizes, all updated in ``O(deg_i)`` when actor
``i`` moves; evaluating every relocation of one actor is then
``O(R B^3)`` vectorised work, and every exchange of one actor with all actors
of other positions ``O(n R B^2)``.  Nothing of size ``n^2`` is ever built.

Ties in the criterion are broken in favour of more homogeneous blocks (a
larger :math:`\\sum_r w_r \\sum_{kl} t_{rkl}^2 / p_{kl}`, which orders
partitions like the density correlation).  Sparse data make the criterion
flat -- every partition whose blocks are all sparser than 1/2 costs the total
number of ties -- and without the tie-breaker a random start would rarely
move.  The returned cost is ``P`` itself; the tie-breaker only orders
candidates of equal ``P``.

With ``"regular"`` allowed, the rows and columns of each block that hold a
tie are tracked as well (updated in ``O(deg_i)`` per move; a relocation is
evaluated in ``O(deg_i B + R B^3)``), but exchanges are not tried: their
effect on those counts depends on the neighbourhoods of both actors and has
no cheap update.  Regular blockmodels are therefore found by relocations
only, which stops at a local optimum somewhat more often; use more restarts.

References
----------
.. [1] Doreian, P., Batagelj, V. & Ferligoj, A. (2005). Generalized
   Blockmodeling. Cambridge University Press.
.. [2] Chakrabarti, D., Kumar, R. & Tomkins, A. (2006). Evolutionary
   clustering. KDD.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import scipy.sparse as sp

from tracker.errors import UsageError

__all__ = ["BLOCK_TYPES", "optimize_partition", "partition_cost", "OptimizedPositions"]

BLOCK_TYPES = ("null", "complete", "regular")

_OPTIONS = ("init_labels", "prior_labels", "change_penalty", "max_sweeps")


def optimize_partition(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    n_positions: int,
    *,
    seed: int = 0,
    restarts: int = 50,
    init_labels=None,
    prior_labels=None,
    change_penalty: float = 0.0,
    block_types: Sequence[str] = ("null", "complete"),
    max_sweeps: int = 100,
    structural_start: bool = True,
    return_all: bool = False,
):
    """Find the partition with the fewest inconsistencies by local search.

    Parameters
    ----------
    matrices : sequence of scipy.sparse arrays
        One ``n x n`` matrix per relation; any non-zero value is a tie.
    directed : sequence of bool
    n_positions : int
        ``B``, the number of positions.
    seed : int
        Seed of :func:`numpy.random.default_rng` (random starts, visiting order).
    restarts : int
        Number of random starts (balanced random labellings).
    init_labels : array of int, optional
        One more start, tried first.
    prior_labels : array of int, optional
        Earlier positions, ``-1`` where unknown; also used as a start (unknown
        actors placed at random).
    change_penalty : float
        ``lambda``: cost added per actor whose label differs from a known prior label.
    block_types : sequence of str
        Allowed ideal blocks, from :data:`BLOCK_TYPES`.
    max_sweeps : int
        Most passes over the actors per start.
    structural_start : bool
        Also start from :class:`tracker.blockmodel.structural.StructuralPositions`
        when that module is present.
    return_all : bool
        Also return the objective reached from each start.

    Returns
    -------
    labels : numpy.ndarray of int, shape (n,)
        Positions ``0 .. B-1``; no position is empty when ``n >= B``.
    cost : float
        The criterion ``P`` of the labels, penalty included.
    start_costs : numpy.ndarray
        Only with ``return_all``: criterion reached from each start, in the
        order init_labels, prior_labels, structural, random starts.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> a = np.zeros((6, 6)); a[:3, :3] = 1; a[3:, 3:] = 1; np.fill_diagonal(a, 0)
    >>> labels, cost = optimize_partition([sp.csr_array(a)], [False], 2, restarts=5)
    >>> cost, len(set(labels[:3])), len(set(labels[3:])), bool(labels[0] != labels[3])
    (0.0, 1, 1, True)
    """
    matrices, directed = _check_relations(matrices, directed)
    n = matrices[0].shape[0] if matrices else 0
    B = _check_positive_int(n_positions, "n_positions")
    allow = _check_block_types(block_types)
    restarts = _check_count(restarts, "restarts")
    max_sweeps = _check_positive_int(max_sweeps, "max_sweeps")
    penalty = float(change_penalty)
    if not np.isfinite(penalty) or penalty < 0:
        raise UsageError(f"change_penalty must be a non-negative number; got {change_penalty!r}")
    prior = None if prior_labels is None else _check_labels(prior_labels, n, B, "prior_labels", allow_unknown=True)
    init = None if init_labels is None else _check_labels(init_labels, n, B, "init_labels")

    if n == 0:
        empty = np.zeros(0, dtype=np.int64)
        return (empty, 0.0, np.zeros(0)) if return_all else (empty, 0.0)

    rng = np.random.default_rng(seed)
    adj, adj_t, weights = _binary_relations(matrices, directed)
    starts: list[np.ndarray] = []
    if init is not None:
        starts.append(init)
    if prior is not None:
        filled = prior.copy()
        unknown = filled < 0
        filled[unknown] = rng.integers(B, size=int(unknown.sum()))
        starts.append(filled)
    if structural_start:
        labels = _structural_labels(matrices, directed, B, seed, n)
        if labels is not None:
            starts.append(labels)
    for _ in range(restarts):
        starts.append(rng.permutation(np.arange(n) % B))
    if not starts:
        starts.append(rng.permutation(np.arange(n) % B))

    best_labels, best_cost, best_spread = None, np.inf, np.inf
    costs = np.empty(len(starts))
    for s, start in enumerate(starts):
        state = _SearchState(adj, adj_t, weights, B, start, allow, prior, penalty)
        state.fill_empty()
        state.local_search(rng, max_sweeps)
        costs[s] = state.current
        better = state.current < best_cost - _tol(best_cost)
        same = abs(state.current - best_cost) <= _tol(best_cost)
        if better or (same and state.spread < best_spread - _tol(best_spread)):
            best_labels, best_cost, best_spread = state.labels.copy(), state.current, state.spread
    if return_all:
        return best_labels, float(best_cost), costs
    return best_labels, float(best_cost)


def partition_cost(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    labels,
    n_positions: int,
    *,
    block_types: Sequence[str] = ("null", "complete"),
    prior_labels=None,
    change_penalty: float = 0.0,
) -> float:
    """The criterion ``P`` of given labels, computed from scratch.

    See the module docstring for the formula.  Useful to score a partition
    found by another method against the same ideal block types.
    """
    matrices, directed = _check_relations(matrices, directed)
    n = matrices[0].shape[0] if matrices else 0
    B = _check_positive_int(n_positions, "n_positions")
    labels = _check_labels(labels, n, B, "labels")
    prior = None if prior_labels is None else _check_labels(prior_labels, n, B, "prior_labels", allow_unknown=True)
    if n == 0:
        return 0.0
    adj, adj_t, weights = _binary_relations(matrices, directed)
    state = _SearchState(adj, adj_t, weights, B, labels, _check_block_types(block_types), prior, float(change_penalty))
    return float(state.current)


class OptimizedPositions:
    """Positions by direct optimisation of ideal block types.

    Parameters
    ----------
    n_positions : int
    seed : int
    restarts : int
        Number of random starts.
    block_types : tuple of str
        Allowed ideal blocks, from :data:`BLOCK_TYPES`.
    init : {"structural", "random"}
        ``"structural"`` adds a start from structural-equivalence positions.
    **options
        ``init_labels``, ``prior_labels``, ``change_penalty``, ``max_sweeps``
        of :func:`optimize_partition`.

    Attributes
    ----------
    labels_ : numpy.ndarray of int
    cost_ : float
        Criterion of ``labels_`` (penalty included).
    inconsistencies_ : float
        Criterion of ``labels_`` without the change penalty.
    restart_costs_ : numpy.ndarray
        Criterion reached from each start (see :func:`optimize_partition`).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> a = np.zeros((6, 6)); a[:3, 3:] = 1
    >>> model = OptimizedPositions(2, restarts=5).fit([sp.csr_array(a)], [True])
    >>> model.cost_, sorted(np.bincount(model.labels_).tolist())
    (0.0, [3, 3])

    References
    ----------
    .. [1] Doreian, P., Batagelj, V. & Ferligoj, A. (2005). Generalized Blockmodeling.
    """

    def __init__(
        self,
        n_positions: int,
        *,
        seed: int = 0,
        restarts: int = 50,
        block_types: Sequence[str] = ("null", "complete"),
        init: str = "structural",
        **options,
    ) -> None:
        self.n_positions = n_positions
        self.seed = seed
        self.restarts = restarts
        self.block_types = block_types
        self.init = init
        self.options = options

    def fit(self, matrices: Sequence[sp.sparray], directed: Sequence[bool]) -> "OptimizedPositions":
        unknown = sorted(set(self.options) - set(_OPTIONS))
        if unknown:
            raise UsageError(
                f"unknown option(s) {', '.join(unknown)} for the optimize method; "
                f"known: {', '.join(_OPTIONS)}"
            )
        if self.init not in ("structural", "random"):
            raise UsageError(f"init must be 'structural' or 'random'; got {self.init!r}")
        labels, cost, costs = optimize_partition(
            matrices,
            directed,
            self.n_positions,
            seed=self.seed,
            restarts=self.restarts,
            block_types=self.block_types,
            structural_start=self.init == "structural",
            return_all=True,
            **self.options,
        )
        self.labels_ = labels
        self.cost_ = cost
        self.restart_costs_ = costs
        self.inconsistencies_ = partition_cost(
            matrices, directed, labels, self.n_positions, block_types=self.block_types
        )
        return self


class _SearchState:
    """Incremental counts for the local search.

    ``rout[i, r, k]``: ties of relation ``r`` from ``i`` to position ``k``;
    ``rin[i, r, k]``: ties to ``i`` from position ``k``; ``ties[r, k, l]``:
    ordered tie count of block ``(k, l)`` (an undirected relation is held as
    its symmetric matrix and weighted 1/2); with regular blocks also
    ``rows[r, k, l]`` (actors of ``k`` with a tie to ``l``) and
    ``cols[r, k, l]`` (actors of ``l`` with a tie from ``k``).
    """

    def __init__(self, adj, adj_t, weights, n_positions, labels, allow, prior, penalty):
        self.adj, self.adj_t = adj, adj_t
        self.weights = np.asarray(weights, dtype=np.float64)
        self.R = len(adj)
        self.B = int(n_positions)
        self.n = adj[0].shape[0]
        self.allow = allow
        self.regular = allow[2]
        self.prior = prior
        self.penalty = float(penalty) if prior is not None else 0.0
        self.eye = eye = np.eye(self.B)
        # _shift_rows[a, b, 0, k, 0] = [k == b] - [k == a]: where a row moves
        # when an actor goes from a to b (columns likewise).
        self._shift_rows = eye[None, :, None, :, None] - eye[:, None, None, :, None]
        self._shift_cols = eye[None, :, None, None, :] - eye[:, None, None, None, :]
        self._flat_weights = np.repeat(self.weights, self.B * self.B)
        self.labels = np.asarray(labels, dtype=np.int64).copy()
        self.recount()

    # -- exact recomputation (start of a search; reference for tests) ------
    def recount(self) -> None:
        n, B, R = self.n, self.B, self.R
        z = sp.csr_array((np.ones(n), (np.arange(n), self.labels)), shape=(n, B))
        self.sizes = np.bincount(self.labels, minlength=B).astype(np.float64)
        self.rout = np.empty((n, R, B))
        self.rin = np.empty((n, R, B))
        self.ties = np.empty((R, B, B))
        for r in range(R):
            self.rout[:, r, :] = (self.adj[r] @ z).toarray()
            self.rin[:, r, :] = (self.adj_t[r] @ z).toarray()
            self.ties[r] = (z.T @ (self.adj[r] @ z)).toarray()
        if self.regular:
            onehot = np.zeros((n, B))
            onehot[np.arange(n), self.labels] = 1.0
            # rows[r, k, l] = #{u in k : rout[u, r, l] > 0}
            self.rows = np.einsum("uk,url->rkl", onehot, (self.rout > 0).astype(np.float64))
            # cols[r, k, l] = #{v in l : rin[v, r, k] > 0}
            self.cols = np.einsum("vl,vrk->rkl", onehot, (self.rin > 0).astype(np.float64))
        else:
            self.rows = self.cols = None
        self.changes = self._changes(self.labels)
        self._refresh()

    def _refresh(self) -> None:
        possible, inverse = _possible(self.sizes, self.eye)
        obj, spread = self.scores(self.ties, possible, inverse, self.sizes, self.rows, self.cols)
        self.current = float(obj) + self.penalty * self.changes
        self.spread = float(spread)
        self.tol = _tol(self.current)
        self.spread_tol = _tol(self.spread)
        self._possible = (possible, inverse)
        self._tables = {}

    def _changes(self, labels) -> float:
        if self.prior is None:
            return 0.0
        known = self.prior >= 0
        return float(np.count_nonzero(labels[known] != self.prior[known]))

    # -- the criterion, vectorised over leading candidate axes ------------
    def scores(self, ties, possible, inverse, sizes, rows=None, cols=None):
        """Criterion (without penalty) and tie-breaker for candidate block tables.

        ``ties`` has shape ``(..., R, B, B)``; ``possible`` and its inverse
        ``(..., 1, B, B)`` (inverse 0 where nothing is possible); ``sizes``
        ``(..., B)`` (used by regular blocks only).  The tie-breaker is
        ``-sum_r w_r sum_kl t^2 / p``: lower means more homogeneous blocks, and
        for fixed data it orders partitions exactly like the density
        correlation of :func:`tracker.blockmodel.goodness.density_correlation`.
        """
        allow = self.allow
        best = ties if allow[0] else None
        if allow[1]:
            comp = possible - ties
            best = comp if best is None else np.minimum(best, comp, out=comp)
        if allow[2]:
            nk = sizes[..., None, :, None]
            nl = sizes[..., None, None, :]
            reg = (nl - cols) * nk + (nk - rows) * cols
            best = reg if best is None else np.minimum(best, reg, out=reg)
        share = ties * ties
        share *= inverse
        lead = ties.shape[:-3] + (-1,)
        obj = best.reshape(lead) @ self._flat_weights
        spread = -(share.reshape(lead) @ self._flat_weights)
        return obj, spread

    def _relocation_tables(self, a: int):
        """Possible-tie tables after moving one actor out of ``a`` into each position."""
        tables = self._tables.get(a)
        if tables is None:
            sizes = self.sizes.copy()
            sizes[a] -= 1
            cand_sizes = sizes[None, :] + self.eye
            possible, inverse = _possible(cand_sizes, self.eye)
            tables = self._tables[a] = (cand_sizes, possible, inverse)
        return tables

    def _penalty_vector(self, i: int) -> np.ndarray:
        """Penalty of actor ``i`` in each position."""
        if self.prior is None or self.prior[i] < 0 or self.penalty == 0.0:
            return np.zeros(self.B)
        out = np.full(self.B, self.penalty)
        out[self.prior[i]] = 0.0
        return out

    # -- relocations -------------------------------------------------------
    def relocation_objectives(self, i: int) -> tuple[np.ndarray, np.ndarray]:
        """Criterion and tie-breaker after moving actor ``i`` to each position."""
        a = self.labels[i]
        ro, ri = self.rout[i], self.rin[i]
        cand = self.ties[None] + self._shift_rows[a] * ro[None, :, None, :]
        cand += self._shift_cols[a] * ri[None, :, :, None]
        cand_sizes, possible, inverse = self._relocation_tables(a)
        rows = cols = None
        if self.regular:
            rows, cols = self._regular_candidates(i, a)
        obj, spread = self.scores(cand, possible, inverse, cand_sizes, rows, cols)
        obj += self.penalty * self.changes
        if self.penalty and self.prior[i] >= 0:
            pen = self._penalty_vector(i)
            obj += pen - pen[a]
        obj[a] = self.current
        spread[a] = self.spread
        return obj, spread

    def _regular_candidates(self, i: int, a: int):
        """Tied-row and tied-column counts after moving ``i`` to each position.

        Moving ``i`` carries its own row (column) indicators from position
        ``a`` to the target; an in-neighbour ``u`` loses its tie to ``a`` when
        ``i`` was its only one there and gains a tie to the target when it had
        none; likewise for out-neighbours and columns.  Valid for targets other
        than ``a`` (the caller restores ``a``).
        """
        B, labels = self.B, self.labels
        idx = np.arange(B)
        own_row = (self.rout[i] > 0).astype(np.float64)  # (R, B)
        own_col = (self.rin[i] > 0).astype(np.float64)
        rows = self.rows.copy()
        cols = self.cols.copy()
        rows[:, a, :] -= own_row
        cols[:, :, a] -= own_col
        rows = np.repeat(rows[None], B, axis=0)
        cols = np.repeat(cols[None], B, axis=0)
        rows[idx, :, idx, :] += own_row
        cols[idx, :, :, idx] += own_col
        for r in range(self.R):
            ins = _neighbours(self.adj_t[r], i)
            if ins.size:
                lab = labels[ins]
                counts = self.rout[ins, r, :]
                rows[:, r, :, a] -= np.bincount(lab[counts[:, a] == 1], minlength=B)[None, :]
                gain = np.zeros((B, B))
                np.add.at(gain, lab, (counts == 0).astype(np.float64))  # gain[k, target]
                rows[idx, r, :, idx] += gain.T
            outs = _neighbours(self.adj[r], i)
            if outs.size:
                lab = labels[outs]
                counts = self.rin[outs, r, :]
                cols[:, r, a, :] -= np.bincount(lab[counts[:, a] == 1], minlength=B)[None, :]
                gain = np.zeros((B, B))
                np.add.at(gain, lab, (counts == 0).astype(np.float64))  # gain[l, target]
                cols[idx, r, idx, :] += gain.T
        return rows, cols

    def move(self, i: int, b: int) -> None:
        """Move actor ``i`` to position ``b``, updating every count in O(deg_i)."""
        a = self.labels[i]
        if a == b:
            return
        ro, ri = self.rout[i], self.rin[i]
        self.ties[:, a, :] -= ro
        self.ties[:, b, :] += ro
        self.ties[:, :, a] -= ri
        self.ties[:, :, b] += ri
        if self.regular:
            own_row = (ro > 0).astype(np.float64)
            own_col = (ri > 0).astype(np.float64)
            self.rows[:, a, :] -= own_row
            self.rows[:, b, :] += own_row
            self.cols[:, :, a] -= own_col
            self.cols[:, :, b] += own_col
        for r in range(self.R):
            ins = _neighbours(self.adj_t[r], i)
            if ins.size:
                if self.regular:
                    lab = self.labels[ins]
                    np.subtract.at(self.rows[r, :, a], lab[self.rout[ins, r, a] == 1], 1.0)
                    np.add.at(self.rows[r, :, b], lab[self.rout[ins, r, b] == 0], 1.0)
                self.rout[ins, r, a] -= 1.0
                self.rout[ins, r, b] += 1.0
            outs = _neighbours(self.adj[r], i)
            if outs.size:
                if self.regular:
                    lab = self.labels[outs]
                    np.subtract.at(self.cols[r, a, :], lab[self.rin[outs, r, a] == 1], 1.0)
                    np.add.at(self.cols[r, b, :], lab[self.rin[outs, r, b] == 0], 1.0)
                self.rin[outs, r, a] -= 1.0
                self.rin[outs, r, b] += 1.0
        self.sizes[a] -= 1
        self.sizes[b] += 1
        if self.prior is not None and self.prior[i] >= 0:
            self.changes += float(b != self.prior[i]) - float(a != self.prior[i])
        self.labels[i] = b
        self._refresh()

    # -- exchanges (null and complete blocks only) ------------------------
    def exchange_objectives(self, i: int) -> tuple[np.ndarray, np.ndarray]:
        """Criterion after exchanging ``i`` with each actor of another position.

        Exchanging ``i`` (position ``a``) and ``j`` (position ``b``) leaves the
        sizes unchanged and adds ``D = rout'_j - rout_i`` to row ``a`` and
        subtracts it from row ``b`` (columns likewise with ``rin``), where
        ``rout'_j`` is ``j``'s row count after ``i`` has moved: the ``j -> i``
        tie now points into ``b``.

        Returns
        -------
        objectives, tie_breakers : numpy.ndarray, shape (m,)
        partners : numpy.ndarray of int, shape (m,)
        """
        a = self.labels[i]
        partners = np.flatnonzero(self.labels != a)
        m = partners.size
        if m == 0:
            return np.zeros(0), np.zeros(0), partners
        bj = self.labels[partners]
        shift = -self.eye[bj]
        shift[:, a] += 1.0  # e_a - e_b for each partner
        # Ties between i and each partner, per relation: j -> i and i -> j.
        to_i = np.zeros((self.R, self.n))
        from_i = np.zeros((self.R, self.n))
        for r in range(self.R):
            to_i[r, _neighbours(self.adj_t[r], i)] = 1.0
            from_i[r, _neighbours(self.adj[r], i)] = 1.0
        to_i = to_i[:, partners].T[:, :, None]  # (m, R, 1)
        from_i = from_i[:, partners].T[:, :, None]
        # rout'_j = rout_j - (j -> i) (e_a - e_b): after i moves, that tie points into b.
        d_row = self.rout[partners] - self.rout[i] - to_i * shift[:, None, :]
        d_col = self.rin[partners] - self.rin[i] - from_i * shift[:, None, :]
        cand = self.ties[None] + shift[:, None, :, None] * d_row[:, :, None, :]
        cand += shift[:, None, None, :] * d_col[:, :, :, None]
        possible, inverse = self._possible
        obj, spread = self.scores(cand, possible, inverse, self.sizes)
        changes = np.full(m, self.changes)
        if self.prior is not None:
            pi, pj = self.prior[i], self.prior[partners]
            if pi >= 0:
                changes += (bj != pi).astype(np.float64) - float(a != pi)
            known = pj >= 0
            changes += np.where(known, (a != pj).astype(np.float64) - (bj != pj), 0.0)
        return obj + self.penalty * changes, spread, partners

    def exchange(self, i: int, j: int) -> None:
        a, b = self.labels[i], self.labels[j]
        self.move(i, b)
        self.move(j, a)

    # -- search ------------------------------------------------------------
    def fill_empty(self) -> None:
        """Give every empty position an actor, taken where it costs least."""
        if self.n < self.B:
            return
        while True:
            empty = np.flatnonzero(self.sizes == 0)
            if empty.size == 0:
                return
            target = empty[0]
            donors = np.flatnonzero(self.sizes[self.labels] > 1)
            costs = np.array([self.relocation_objectives(i)[0][target] for i in donors])
            self.move(int(donors[int(np.argmin(costs))]), int(target))

    def improves(self, obj: np.ndarray, spread: np.ndarray) -> int:
        """Index of the best candidate if it beats the current state, else -1.

        Candidates are ordered by the criterion, then by the tie-breaker.
        Sparse data make the criterion flat (every partition whose blocks are
        all sparser than 1/2 costs the same), so without the tie-breaker a
        random start seldom moves; with it the search climbs towards
        homogeneous blocks until complete blocks pay off.
        """
        current, tol = self.current, self.tol
        low = obj.min()
        if low < current - tol:
            return int(np.where(obj <= low + tol, spread, np.inf).argmin())
        level = np.where(obj <= current + tol, spread, np.inf)
        best = int(level.argmin())
        return best if level[best] < self.spread - self.spread_tol else -1

    def local_search(self, rng: np.random.Generator, max_sweeps: int) -> None:
        """Best relocation per actor until none improves, then exchanges; repeat."""
        keep_nonempty = self.n >= self.B
        for _ in range(max_sweeps):
            moved = False
            for i in rng.permutation(self.n):
                a = self.labels[i]
                if keep_nonempty and self.sizes[a] <= 1:
                    continue
                b = self.improves(*self.relocation_objectives(i))
                if b >= 0:
                    self.move(i, b)
                    moved = True
            if moved:
                continue
            if self.regular or self.B < 2:
                return
            for i in rng.permutation(self.n):
                obj, spread, partners = self.exchange_objectives(i)
                if partners.size == 0:
                    continue
                k = self.improves(obj, spread)
                if k >= 0:
                    self.exchange(i, int(partners[k]))
                    moved = True
            if not moved:
                return


def _neighbours(csr: sp.csr_array, i: int) -> np.ndarray:
    return csr.indices[csr.indptr[i] : csr.indptr[i + 1]]


def _tol(value: float) -> float:
    # Criterion values are sums of block counts (halves for undirected
    # relations) plus penalties; this only absorbs rounding.
    value = abs(value)
    return 1e-9 * (value if value > 1.0 else 1.0) if value != np.inf else 0.0


def _possible(sizes: np.ndarray, eye: np.ndarray):
    """Possible ordered ties ``n_k n_l - delta_kl n_k`` as ``(..., 1, B, B)`` and its inverse."""
    nk = sizes[..., None, :, None]
    possible = nk * sizes[..., None, None, :] - eye * nk
    inverse = np.divide(1.0, possible, out=np.zeros(possible.shape), where=possible > 0)
    return possible, inverse


def _binary_relations(matrices, directed):
    """0/1 CSR patterns of each relation and its transpose, and relation weights."""
    adj, adj_t, weights = [], [], []
    for mat, is_directed in zip(matrices, directed):
        coo = sp.coo_array(mat)
        keep = (coo.data != 0) & (coo.row != coo.col)
        n = coo.shape[0]
        pattern = sp.csr_array(
            (np.ones(int(keep.sum())), (coo.row[keep], coo.col[keep])), shape=(n, n)
        )
        pattern.sum_duplicates()
        pattern.data[:] = 1.0
        pattern.sort_indices()
        adj.append(pattern)
        transposed = sp.csr_array(pattern.T)
        transposed.sort_indices()
        adj_t.append(transposed)
        weights.append(1.0 if is_directed else 0.5)
    return adj, adj_t, weights


def _structural_labels(matrices, directed, n_positions, seed, n):
    """Labels from structural equivalence, or None when that module is absent."""
    try:
        from tracker.blockmodel.structural import StructuralPositions
    except ImportError:
        # Written separately; without it the search simply has one start fewer.
        return None
    labels = np.asarray(StructuralPositions(n_positions, seed=seed).fit(matrices, directed).labels_)
    if labels.shape != (n,) or labels.size == 0:
        return None
    # Renumber to 0..k-1 so that any labelling scheme fits in n_positions.
    _, labels = np.unique(labels, return_inverse=True)
    if labels.max() >= n_positions:
        return None
    return labels.astype(np.int64)


def _check_relations(matrices, directed):
    matrices = list(matrices)
    directed = tuple(bool(d) for d in directed)
    if len(matrices) != len(directed):
        raise ValueError("give one directed flag per matrix")
    if not matrices:
        raise UsageError("no relation to analyse; select at least one relation")
    n = matrices[0].shape[0]
    for mat in matrices:
        if mat.shape != (n, n):
            raise ValueError(f"every matrix must be {n} x {n}; got {mat.shape}")
    return matrices, directed


def _check_positive_int(value, name: str) -> int:
    if isinstance(value, bool) or int(value) != value or value < 1:
        raise UsageError(f"{name} must be a positive whole number; got {value!r}")
    return int(value)


def _check_count(value, name: str) -> int:
    if isinstance(value, bool) or int(value) != value or value < 0:
        raise UsageError(f"{name} must be a whole number, 0 or more; got {value!r}")
    return int(value)


def _check_block_types(block_types) -> tuple[bool, bool, bool]:
    chosen = tuple(block_types)
    unknown = [t for t in chosen if t not in BLOCK_TYPES]
    if unknown or not chosen:
        raise UsageError(
            f"unknown or no block types {unknown or chosen!r}; choose from: {', '.join(BLOCK_TYPES)}"
        )
    return tuple(t in chosen for t in BLOCK_TYPES)


def _check_labels(labels, n: int, n_positions: int, name: str, allow_unknown: bool = False) -> np.ndarray:
    arr = np.asarray(labels)
    if arr.shape != (n,):
        raise UsageError(f"{name} needs one label per actor ({n}); got shape {arr.shape}")
    if arr.size and not np.issubdtype(arr.dtype, np.integer):
        if not np.all(np.equal(np.mod(arr, 1), 0)):
            raise UsageError(f"{name} must be whole numbers")
    arr = arr.astype(np.int64)
    low = -1 if allow_unknown else 0
    if arr.size and (arr.min() < low or arr.max() >= n_positions):
        raise UsageError(
            f"{name} must lie in {low} .. {n_positions - 1}"
            + (" (-1 = unknown)" if allow_unknown else "")
        )
    return arr
