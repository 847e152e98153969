r"""How sure is a move?  The share of bootstrap refits that reproduce it.

A period's tie values are counts of events.  A bootstrap replicate of the period
draws the same number of events again, with replacement, from the observed ones
(Efron's nonparametric bootstrap [1]_ applied to the events, as for resampling
network data in Snijders & Borgatti [2]_):

.. math::

    E = \operatorname{round}\Big(\sum_{(i,j)} x_{ij}\Big), \qquad
    (x^*_{ij}) \sim \operatorname{Multinomial}\big(E, \; x_{ij} / \textstyle\sum x\big)

over the ordered pairs of a directed relation, or the unordered pairs
(:math:`i < j`) of an undirected one, which is then mirrored.  Only observed ties
can be drawn, so memory stays proportional to the ties.

A move of actor *a* from track *f* (period *s*) to track *g* (period *t*) is
reproduced in a replicate when refitting both periods on resampled events puts
*a* in *f* at *s* and in *g* at *t*.  Refitted positions carry arbitrary
numbers, so each refit is first matched to the original positions of its period
by the Hungarian method on Jaccard overlap (Kuhn [3]_); the original position
gives the track.  The confidence is the share of replicates that reproduce the
move.

References
----------
.. [1] Efron, B. (1979). Bootstrap methods: another look at the jackknife.
   Annals of Statistics 7, 1-26.
.. [2] Snijders, T. A. B. & Borgatti, S. P. (1999). Non-parametric standard errors
   and tests for network statistics. Connections 22, 161-170.
.. [3] Kuhn, H. W. (1955). The Hungarian method for the assignment problem.
   Naval Research Logistics Quarterly 2, 83-97.
"""

from __future__ import annotations

from typing import Callable, Mapping, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from tracker.errors import UsageError
from tracker.longitudinal.align import max_weight_matching

__all__ = ["resample_matrices", "move_confidence"]


def resample_matrices(matrices: Sequence, directed: Sequence[bool], rng: np.random.Generator) -> list:
    """One bootstrap replicate of a period's events (see the module docstring).

    Parameters
    ----------
    matrices : sequence of scipy.sparse arrays
        One ``n x n`` matrix of event counts per relation (zero diagonal; symmetric
        when undirected).
    directed : sequence of bool
    rng : numpy.random.Generator

    Returns
    -------
    list of scipy.sparse.csr_array
        Same shapes; each relation keeps its total number of events (rounded).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> a = sp.csr_array(np.array([[0, 3, 1], [3, 0, 0], [1, 0, 0]], dtype=float))
    >>> b = resample_matrices([a], [False], np.random.default_rng(0))[0]
    >>> float(b.sum()) / 2, bool((abs(b - b.T)).sum() == 0)
    (4.0, True)
    """
    if len(matrices) != len(directed):
        raise UsageError("give one directedness flag per relation")
    out = []
    for mat, is_directed in zip(matrices, directed):
        coo = sp.coo_array(mat)
        n = coo.shape[0]
        keep = (coo.data > 0) & (coo.row != coo.col)
        if not is_directed:
            keep &= coo.row < coo.col
        rows, cols, vals = coo.row[keep], coo.col[keep], coo.data[keep].astype(np.float64)
        total = vals.sum()
        events = int(round(total))
        if events == 0 or vals.size == 0:
            out.append(sp.csr_array((n, n), dtype=np.float64))
            continue
        counts = rng.multinomial(events, vals / total).astype(np.float64)
        hit = counts > 0
        rows, cols, counts = rows[hit], cols[hit], counts[hit]
        if not is_directed:
            rows, cols = np.concatenate([rows, cols]), np.concatenate([cols, rows])
            counts = np.concatenate([counts, counts])
        out.append(sp.csr_array((counts, (rows, cols)), shape=(n, n), dtype=np.float64))
    return out


def move_confidence(
    moves: pd.DataFrame,
    fit_period: Callable[[str, Sequence], object],
    *,
    matrices: Mapping[str, Sequence],
    directed: Sequence[bool],
    actors: Mapping[str, Sequence[str]],
    labels: Mapping[str, np.ndarray],
    assignment: Mapping[str, np.ndarray],
    draws: int = 50,
    seed: int = 0,
) -> np.ndarray:
    """Share of bootstrap replicates in which each move is reproduced.

    Parameters
    ----------
    moves : pandas.DataFrame
        Columns ``actor, from_period, to_period, from_track, to_track`` (as made by
        :func:`tracker.longitudinal.movement.moves`).
    fit_period : callable ``(period, matrices) -> labels``
        Refits one period on resampled matrices (same actors, same order) and returns
        position labels per actor (an array, or a ``Partition``).  The API layer
        passes the fitting it used for the study, e.g.
        :func:`tracker.longitudinal.smoothing.smoothed_refitter` or a wrapper of
        ``find_positions`` with a fixed seed.
    matrices, actors, labels, assignment : mappings keyed by period
        The period's observed matrices, its actors (in matrix order), the original
        position label of each actor, and the original position -> track map
        (``Alignment.assignment``).
    directed : sequence of bool
    draws : int
        Number of bootstrap replicates.
    seed : int

    Returns
    -------
    numpy.ndarray of float, shape (len(moves),)
        In [0, 1].

    Notes
    -----
    Cost: ``draws`` x (number of distinct periods named in ``moves``) calls of
    ``fit_period``, plus one multinomial draw over the ties of each refitted period;
    every move of a period shares the same refits.  With 50 draws and 10 periods
    that is 500 refits -- choose a fast fitting method or fewer draws on large studies.
    """
    n_moves = len(moves)
    if n_moves == 0:
        return np.zeros(0)
    if draws < 1:
        raise UsageError("draws must be at least 1")
    need = list(dict.fromkeys(list(moves["from_period"].astype(str)) + list(moves["to_period"].astype(str))))
    order = need
    for p in order:
        if p not in matrices or p not in actors or p not in labels or p not in assignment:
            raise UsageError(f"period {p} of a move has no matrices, actors, labels or tracks; pass them all")
    index = {p: {a: i for i, a in enumerate(actors[p])} for p in order}
    try:
        i_from = np.array([index[str(p)][a] for p, a in zip(moves["from_period"], moves["actor"])])
        i_to = np.array([index[str(p)][a] for p, a in zip(moves["to_period"], moves["actor"])])
    except KeyError as err:
        raise UsageError(f"actor {err.args[0]!r} of a move is not present in its period; check the moves") from None
    p_from = moves["from_period"].astype(str).to_numpy()
    p_to = moves["to_period"].astype(str).to_numpy()
    f_track = moves["from_track"].to_numpy(dtype=np.int64)
    g_track = moves["to_track"].to_numpy(dtype=np.int64)

    rng = np.random.default_rng(seed)
    hits = np.zeros(n_moves)
    for _ in range(draws):
        refit_tracks = {}
        for p in order:
            sample = resample_matrices(matrices[p], directed, rng)
            new = fit_period(p, sample)
            new = np.asarray(getattr(new, "labels", new), dtype=np.int64)
            refit_tracks[p] = _tracks_via_original(new, np.asarray(labels[p]), np.asarray(assignment[p]))
        ok_from = np.empty(n_moves, dtype=bool)
        ok_to = np.empty(n_moves, dtype=bool)
        for p in order:
            m = p_from == p
            ok_from[m] = refit_tracks[p][i_from[m]] == f_track[m]
            m = p_to == p
            ok_to[m] = refit_tracks[p][i_to[m]] == g_track[m]
        hits += ok_from & ok_to
    return hits / draws


def _tracks_via_original(new: np.ndarray, original: np.ndarray, assignment: np.ndarray) -> np.ndarray:
    """Track of each actor under a refit, through the best match of refit to original positions."""
    if new.size != original.size:
        raise UsageError("the refit returned another number of labels than the period has actors")
    b_new = int(new.max()) + 1 if new.size else 0
    b_old = assignment.size
    cont = np.zeros((b_new, b_old))
    np.add.at(cont, (new, original), 1.0)
    union = cont.sum(axis=1)[:, None] + cont.sum(axis=0)[None, :] - cont
    jac = np.divide(cont, union, out=np.zeros_like(cont), where=union > 0)
    rows, cols = max_weight_matching(jac)
    mapped = np.full(b_new, -1, dtype=np.int64)
    good = jac[rows, cols] > 0
    mapped[rows[good]] = assignment[cols[good]]
    return mapped[new]
