"""The dynamic model's chain posteriors against enumeration, and its fast reductions against numpy's."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from tracker.models import dynamic as dyn


def enumerate_chains(E, first, last, pi, P, active):
    """Marginals, summed pairwise marginals, first marginals and entropy of each actor's chain by enumeration.

    Definition of the model: for actor ``i`` the chain runs over periods
    ``first_i .. last_i``; a path ``z`` has prior weight
    :math:`\\pi_{f}(z_f) \\prod_t P_t(z_{t-1}, z_t)` with the laws closed before a
    position's birth (:func:`tracker.models.dynamic._chain_laws`, written out
    here), and likelihood :math:`\\exp \\sum_t e_{t z_t}`; the posterior is
    their normalised product, its entropy :math:`-\\sum_z q(z) \\log q(z)`.
    """
    T, n, B = E.shape
    pis = pi[None, :] * active
    pis = pis / pis.sum(axis=1, keepdims=True)
    Ps = P[None, :, :] * active[:, None, :]
    Ps = Ps / Ps.sum(axis=2, keepdims=True)
    gamma = np.zeros((T, n, B))
    xi = np.zeros((n, B, B))
    g0 = np.zeros((n, B))
    entropy = np.zeros(n)
    for i in range(n):
        span = list(range(first[i], last[i] + 1))
        paths = list(itertools.product(range(B), repeat=len(span)))
        weights = []
        for path in paths:
            w = pis[span[0], path[0]] * np.prod([Ps[t, path[s - 1], path[s]] for s, t in enumerate(span) if s])
            weights.append(w * np.exp(sum(E[t, i, path[s]] for s, t in enumerate(span))))
        q = np.array(weights) / np.sum(weights)
        entropy[i] = -np.sum(q[q > 0] * np.log(q[q > 0]))
        for path, qp in zip(paths, q):
            g0[i, path[0]] += qp
            for s, t in enumerate(span):
                gamma[t, i, path[s]] += qp
                if s:
                    xi[i, path[s - 1], path[s]] += qp
    return gamma, xi, g0, entropy


@pytest.mark.parametrize("closed", [False, True])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_forward_backward_matches_enumeration(seed, closed):
    # source: brute force of the definition (every position path of every actor enumerated)
    rng = np.random.default_rng(seed)
    T, B = 5, 3
    first = np.array([0, 0, 1, 2, 0])
    last = np.array([4, 2, 4, 3, 0])
    n = first.size
    E = rng.normal(scale=2.0, size=(T, n, B))
    ts = np.arange(T)[:, None]
    E[(ts < first) | (ts > last)] = 0.0  # outside the chain: no emission
    E[3, 0] = 0.0  # actor 0 is absent in period 3, inside its span: it emits nothing there
    pi = rng.dirichlet(np.ones(B))
    P = rng.dirichlet(np.ones(B), size=B)
    active = np.ones((T, B), dtype=bool)
    if closed:
        active[:2, 2] = False  # position 2 born in period 2
    gamma, xi, g0, entropy = dyn._forward_backward(E, first, last, pi, P, active if closed else None)
    want = enumerate_chains(E, first, last, pi, P, active)
    running = (ts >= first) & (ts <= last)
    assert np.allclose(gamma[running], want[0][running], rtol=1e-10, atol=1e-13)
    assert np.allclose(xi, want[1], rtol=1e-10, atol=1e-13)
    assert np.allclose(g0, want[2], rtol=1e-10, atol=1e-13)
    assert np.allclose(entropy, want[3], rtol=1e-9, atol=1e-12)
    if closed:  # nobody is in a position before its birth
        assert np.abs(gamma[:2, :, 2][running[:2]]).max() < 1e-15


def test_e_step_pieces_share_one_forward_backward_and_equal_fresh_proposals():
    # source: brute force (each piece's proposal recomputed from scratch by _propose)
    rng = np.random.default_rng(4)
    names = [f"a{i}" for i in range(12)]
    import scipy.sparse as sp

    periods = []
    for _ in range(3):
        A = (rng.random((12, 12)) < 0.3).astype(float)
        np.fill_diagonal(A, 0.0)
        periods.append((names, [sp.csr_array(A)], [True]))
    data = dyn._prepare_periods(periods, False, False)
    B = 2
    labels = rng.integers(B, size=data.n)
    gamma = np.broadcast_to(np.eye(B)[labels], (data.T, data.n, B)).copy()
    state = dyn._State(gamma, np.zeros((data.n, B, B)), np.zeros((data.n, B)), np.zeros(data.n),
                       dyn._all_stats(data, gamma))
    params = dyn._Params(np.full(B, 0.5), np.full((B, B), 0.5), dyn._theta(data, state))
    chains = dyn._chains(data, state, params)
    piece = np.array([1, 4, 7])
    shared = dyn._propose(data, state, params, piece, chains)
    fresh = dyn._propose(data, state, params, piece)
    assert np.array_equal(shared.gamma, fresh.gamma) and np.array_equal(shared.xi, fresh.xi)
    untouched = np.setdiff1d(np.arange(data.n), piece)
    assert np.array_equal(shared.gamma[:, untouched], state.gamma[:, untouched])
    everyone = dyn._propose(data, state, params, np.arange(data.n), chains)
    assert np.array_equal(everyone.gamma, chains[0]) and np.array_equal(everyone.entropy, chains[3])


@settings(max_examples=40, deadline=None)
@given(arrays(np.float64, st.tuples(st.integers(1, 4), st.integers(1, 6), st.integers(1, 5)),
              elements=st.floats(-1e6, 1e6, allow_nan=False)))
def test_last_axis_reductions_equal_numpy(x):
    # source: numpy's own reductions (the same numbers, bit for bit: the sum runs left to right)
    assert np.array_equal(dyn._last_axis(np.add, x), x.sum(axis=-1))
    assert np.array_equal(dyn._last_axis(np.maximum, x), x.max(axis=-1))
