"""When positions of the dynamic blockmodel are born: a stated criterion.

A dynamic blockmodel with ``B`` positions (:mod:`tracker.models.dynamic`)
lets a position be *closed* before its birth period ``b``: no actor may start
in it or enter it before ``b`` (Matias & Miele 2017 allow empty groups; the
closing is the ``active`` mask of the chain's laws).  This module decides,
for each position, whether it is open from the first period or born later,
and when.

Criterion
---------
For position ``k`` and a candidate birth ``b`` (``b = 0``: open from the
start) let :math:`\\mathcal{L}_k(b)` be the variational bound (evidence lower
bound) of the model refitted by EM with ``k`` closed before ``b``.  With a
prior that gives probability 1/2 to "open from the start" and spreads the
other half evenly over the ``T - 1`` later periods, the chosen birth is

.. math::

    b_k^* = \\arg\\max_b \\; \\mathcal{L}_k(b) - [b > 0] \\log(T - 1),

a maximum a posteriori choice with the bound standing in for the log
evidence (a Bayes factor approximated by the bound; Kass & Raftery 1995).
So a position opens at ``b`` rather than earlier only when the data are
better explained with it closed before ``b``; a position is closed where it
would hold no actors, or only actors whose posterior prefers another
position once it is closed.  Candidates are the ``b`` before which ``k``
holds at most ``evict`` actor-periods of posterior mass (moving more out of
a position by closing it is not a birth but a different partition, and the
refit would only lose bound).

Founding proposals
------------------
EM from a partition of all periods fills every position from the first
period: a position founded mid-series is absorbed and its slot is spent on a
split of an older position, which the criterion above can never close.  So,
as in split-and-merge EM (Ueda, Nakano, Ghahramani & Hinton 2000), each fit is
also offered *merge-and-found* proposals: for each period ``b`` in which
actors first appear (a new position needs someone to found it), and each
position ``k``, the actor-periods of ``k`` go to their best other position
(highest emission term given everyone else), the actors first seen in ``b``
found ``k`` from ``b`` on, and ``k`` is closed before ``b``.  The proposals
are ranked by the bound of their starting (hard) assignment and EM is run from
the best ``FOUND_TRIALS`` of them (the cost stays a few EM runs however many
periods bring newcomers).  A proposal is kept if its bound beats the current one by more than the prior
cost ``log(T - 1)``; the best proposal over ``(k, b)`` wins, and its birth
period is then chosen by the criterion above.

References
----------
.. [1] Matias, C. & Miele, V. (2017). Statistical clustering of temporal
   networks through a dynamic stochastic block model. JRSS-B 79, 1119-1141.
.. [2] Ueda, N., Nakano, R., Ghahramani, Z. & Hinton, G. E. (2000). SMEM
   algorithm for mixture models. Neural Computation 12, 2109-2128.
.. [3] Kass, R. E. & Raftery, A. E. (1995). Bayes factors. JASA 90, 773-795.
"""

from __future__ import annotations

import dataclasses

import numpy as np

__all__ = ["choose_births", "birth_cost", "occupancy", "birth_candidates"]

#: Most actor-periods of posterior mass a birth may move out of a position.
EVICT = 3.0

#: Founding proposals refitted by EM (the best-ranked by their starting bound).
FOUND_TRIALS = 3


def birth_cost(T: int) -> float:
    """Prior cost of a birth after the first period: ``log(T - 1)`` (see the module docstring)."""
    if int(T) < 1:
        raise ValueError(f"the number of periods must be at least 1; got {T!r}")
    return float(np.log(max(int(T) - 1, 1)))


def occupancy(gamma: np.ndarray, index: list, k: int) -> np.ndarray:
    """Expected number of present actors in position ``k`` per period: :math:`\\sum_{i \\in t} q(z_{it} = k)`."""
    return np.array([gamma[t, idx, k].sum() for t, idx in enumerate(index)])


def birth_candidates(occ: np.ndarray, evict: float = EVICT) -> np.ndarray:
    """Periods ``b >= 1`` at which a position with occupancy ``occ`` may be born.

    ``b`` qualifies when at most ``evict`` actor-periods sit in the position
    before ``b`` and it holds at least half an actor from ``b`` on.

    Examples
    --------
    >>> birth_candidates([0.0, 1.0, 0.0, 2.0, 5.0], evict=1.0).tolist()
    [1, 2, 3]
    """
    occ = np.asarray(occ, dtype=float)
    if occ.ndim != 1 or (occ < 0).any():
        raise ValueError("occupancy must be a 1-d array of non-negative expected counts")
    before = np.concatenate([[0.0], np.cumsum(occ)])[:-1]
    after = np.cumsum(occ[::-1])[::-1]
    b = np.arange(occ.size)
    slack = 1e-9 * max(1.0, float(occ.sum()))  # rounding of the cumulative sums
    return b[(b >= 1) & (before <= evict + slack) & (after >= 0.5 - slack)]


def choose_births(data, state, params, B: int, rng, max_iter: int, tol: float, history: list):
    """Founding proposals, then each position's birth period by the criterion of the module docstring.

    Returns ``(state, params, history, births)``: ``births[k]`` is position
    ``k``'s first open period (0: open from the start).  Each accepted change
    raises the penalised bound :math:`\\mathcal{L} - \\log(T-1) \\times` (number
    of births); the bound itself can fall only when a founded position is
    reopened from the start, by less than the cost it saves.
    """
    from tracker.models import dynamic as dyn

    T = data.T
    cost = birth_cost(T)
    active = np.ones((T, B), dtype=bool) if params.active is None else params.active.copy()
    current = float(history[-1])
    founded = _found(data, state, params, B, rng, max_iter, tol, active, current, cost, dyn)
    if founded is not None:
        (state, params, more, _), active = founded
        history = history + [more[-1]]
        current = float(more[-1])
    births = np.zeros(B, dtype=np.int64)
    for k in range(B):
        opened = int(np.argmax(active[:, k])) if active[:, k].any() else 0
        candidates = birth_candidates(occupancy(state.gamma, data.index, k))
        options = []  # (score, bound, b, result, mask)
        if opened:
            options.append((current - cost, current, opened, None, active))
        else:
            options.append((current, current, 0, None, active))
        for b in candidates:
            if b == opened:
                continue
            trial = active.copy()
            trial[:, k] = True
            trial[:b, k] = False
            if (trial.sum(axis=1) == 0).any():
                continue
            result = dyn._em_loop(data, state, dataclasses.replace(params, active=trial), B, rng, max_iter, tol)
            bound = float(result[2][-1])
            options.append((bound - cost, bound, int(b), result, trial))
        if opened and 0 not in [o[2] for o in options]:
            trial = active.copy()
            trial[:, k] = True
            result = dyn._em_loop(data, state, dataclasses.replace(params, active=trial), B, rng, max_iter, tol)
            bound = float(result[2][-1])
            options.append((bound, bound, 0, result, trial))
        score, bound, b, result, mask = max(options, key=lambda o: (o[0], -o[2]))
        if result is not None:
            state, params, more, _ = result
            history = history + [more[-1]]
            current = bound
            active = mask
        births[k] = b
    return state, params, history, births


def _found(data, state, params, B, rng, max_iter, tol, active, current, cost, dyn):
    """The best merge-and-found proposal (see the module docstring), or None if none beats ``current + cost``."""
    T = data.T
    new_at = [np.flatnonzero(data.first == b) for b in range(T)]
    periods = [b for b in range(1, T) if new_at[b].size]
    if not periods:
        return None
    E = dyn._emissions(data, state, params)
    starts = []  # (bound at the start, k, b, state, params, mask)
    for k in range(B):
        best_other = _best_other(E, k)
        for b in periods:
            trial = active.copy()
            trial[:, k] = True
            trial[:b, k] = False
            if (trial.sum(axis=1) == 0).any():
                continue
            start_state, start_params = _proposal(data, state, params, best_other, k, b, new_at[b], trial, B, dyn)
            starts.append((dyn._elbo(data, start_state, start_params), k, b, start_state, start_params, trial))
    # EM only from the most promising starts: the proposals' hard-assignment bounds rank them
    starts.sort(key=lambda s: (-s[0], s[1], s[2]))
    best = None
    for _, k, b, start_state, start_params, trial in starts[:FOUND_TRIALS]:
        result = dyn._em_loop(data, start_state, start_params, B, rng, max_iter, tol)
        bound = float(result[2][-1])
        if bound - current > cost and (best is None or bound > best[0]):
            best = (bound, result, trial)
    return None if best is None else (best[1], best[2])


def _best_other(E, k):
    """Each actor-period's position of highest emission term other than ``k``, (T, n) (first of equals)."""
    scores = E.copy()
    scores[:, :, k] = -np.inf
    return scores.argmax(axis=2)


def _proposal(data, state, params, best, k, b, founders, active, B, dyn):
    """Start of a merge-and-found proposal: ``k`` emptied into the best other positions (``best``, from
    :func:`_best_other`), founded by ``founders`` at ``b``."""
    gamma = state.gamma.copy()
    mass = gamma[:, :, k].copy()
    gamma[:, :, k] = 0.0
    t_idx, i_idx = np.indices(best.shape)
    gamma[t_idx, i_idx, best] += mass  # one entry per actor-period: no index repeats
    gamma[b:, founders] = 0.0
    gamma[b:, founders, k] = 1.0
    stats = dyn._all_stats(data, gamma)
    n = data.n
    g0 = gamma[data.first, np.arange(n)]
    xi = np.zeros((n, B, B))
    for t in range(1, data.T):
        sel = np.flatnonzero((t > data.first) & (t <= data.last))
        if sel.size:
            xi[sel] += gamma[t - 1, sel][:, :, None] * gamma[t, sel][:, None, :]
    start = dyn._State(gamma, xi, g0, np.zeros(n), stats)
    start_params = dyn._m_step(data, start, B, active)
    theta = start_params.theta.copy()
    # a founding position seen with one actor has no pairs inside it yet: give it the mean
    # of the other positions' inside rates rather than zero, so that recruits are not barred
    others = np.delete(np.arange(B), k)
    for r in range(data.R):
        if theta[r, k, k] == 0.0:
            theta[r, k, k] = float(np.mean(np.diagonal(theta[r])[others]))
    # nobody has moved into k yet: give entries and moves into k the fit's usual rates rather
    # than the probability floor, which would bar the founders and every recruit
    P = start_params.P.copy()
    off = ~np.eye(B, dtype=bool)
    off[:, k] = False
    off[k, :] = False
    P[:, k] = P[off].mean() if off.any() else 1.0 / B
    P[k, k] = max(P[k, k], np.diag(params.P).mean())
    P /= P.sum(axis=1, keepdims=True)
    pi = start_params.pi.copy()
    pi[k] = 1.0 / B
    pi /= pi.sum()
    # other settings of the fit (priors, if any) are kept from ``params``
    return start, dataclasses.replace(params, pi=pi, P=P, theta=theta, active=active)
