"""How many planted moves can be found at all: an oracle bound for the planted studies of bench_recovery.py.

Not a test: ``python tests/benchmarks/bench_oracle.py [--seeds 101-105] [--settings sparse,...] [--fits]``.

The studies are those of :mod:`bench_recovery` (same generator, same
settings, imported, not copied).  Three rows per setting, mean over seeds:

``oracle``
    knows the planted block rates (``r_in`` inside a position, ``r_out``
    between), the planted move rate (moves per actor step of the study), the
    founding period of the fifth position (closed before it) and every other
    actor's true position in every period.  For each actor it computes the
    exact posterior of its own chain by forward-backward (Rabiner 1989) under
    the generating law with a Markov prior of that move rate (spread evenly
    over the other open positions), and from the two-slice marginals the
    probability that the actor changed position between consecutive periods,
    :math:`1 - \\sum_k q(z_{t-1} = k, z_t = k)`.  Vectorised over actors.
    Nothing estimated can do better on average at telling a moving actor
    from a staying one (it is the Bayes posterior given more than the data).
``truth-start``
    the dynamic model (``DynamicSBM``, 5 positions, the fifth closed before
    the founding period) with its EM begun at the planted memberships and
    the parameters estimated from them: separates a failure to find the
    optimum (if it does well here but not in ``fitted``) from a failure of
    estimation or of the model (if it does badly here too).
``fitted``
    ``DynamicSBM(5, transition_prior=P).fit`` as the pipeline runs it
    (``--fits``; starts, births), on the same matrices; ``--prior P``
    (default 300, the measured strength; 0 is the model's default, off).

Columns: ``recall@p0.9`` is the exact-period recall at the lowest threshold
of the change probability at which precision is still >= 0.9 (the best a
threshold can do for the target; the threshold is chosen on the truth, so
this is an upper bound, not an estimate); ``thr`` that threshold;
``p@0.5``/``r@0.5`` precision and recall of actor-steps whose change
probability is >= 0.5; ``r_cand`` the share of planted moves where the most
probable position changes (a move is a candidate for the pipeline only
there); ``p_map``/``r_map`` precision and recall of the pipeline's rule
(most probable position changes and change probability >= 0.5); ``brier``
the mean squared error of the change probability over all actor-steps
(calibration and sharpness together).

``oracle xF`` (``--scales F,...``): the oracle on the same studies drawn with
both rates multiplied by ``F`` (same contrast, ``F`` times the ties): how many
more ties the target would need.

Exact-period recall is bounded by quiet periods: an actor with no tie in the
period it moves cannot be placed there, however good the method.  The row
``oracle`` says how much of the target that leaves.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.special import logsumexp

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_recovery import K, N, SETTINGS, T, generate  # noqa: E402

from tracker.models import dynamic as dyn  # noqa: E402

B = K + 1  # four planted positions and the one founded at T // 2


def study(seed: int, setting: str, scale: float = 1.0) -> dict:
    """One planted study as arrays: labels (T, n) with -1 where absent, counts per period, moves (T, n).

    ``scale`` multiplies both rates of the setting (same contrast, more ties), to ask how many
    ties the target needs; 1 is the setting as bench_recovery.py has it.
    """
    r_in, r_out = (scale * r for r in SETTINGS[setting])
    events, roster, truth, planted, founded = generate(seed, r_in, r_out)
    n = N + 1
    years = sorted(truth)
    labels = np.full((len(years), n), -1, dtype=np.int64)
    for t, year in enumerate(years):
        for actor, k in truth[year].items():
            labels[t, int(actor[1:])] = k
    src = events["source"].str[1:].astype(int).to_numpy()
    dst = events["target"].str[1:].astype(int).to_numpy()
    when = events["year"].to_numpy() - years[0]
    mats = []
    for t in range(len(years)):
        sel = when == t
        a = sp.coo_array((np.ones(sel.sum()), (src[sel], dst[sel])), shape=(n, n)).tocsr()
        mats.append(sp.csr_array(a + a.T))  # undirected counts, both directions
    moves = np.zeros(labels.shape, dtype=bool)
    for actor, year in planted:
        moves[years.index(int(year)), int(actor[1:])] = True
    return {"labels": labels, "mats": mats, "moves": moves, "found": years.index(int(founded)),
            "rates": (r_in, r_out)}


def steps(labels: np.ndarray) -> np.ndarray:
    """Actor-steps that can be moves: present in ``t - 1`` and ``t`` (T, n), row 0 False."""
    present = labels >= 0
    out = np.zeros_like(present)
    out[1:] = present[1:] & present[:-1]
    return out


def oracle_change(s: dict) -> tuple[np.ndarray, np.ndarray]:
    """Exact change probabilities (T, n) and most probable positions (T, n) under the oracle's knowledge."""
    labels, mats = s["labels"], s["mats"]
    Tn, n = labels.shape
    r_in, r_out = s["rates"]
    lam = np.full((B, B), r_out)
    np.fill_diagonal(lam, r_in)
    present = labels >= 0
    step = steps(labels)
    rho = s["moves"].sum() / step.sum()  # the planted move rate per actor step
    active = np.ones((Tn, B), dtype=bool)
    active[: s["found"], K] = False
    # emissions e[t, i, k]: Poisson log-likelihood of i's ties given the others' true positions
    E = np.zeros((Tn, n, B))
    for t in range(Tn):
        Z = np.zeros((n, B))
        Z[present[t], labels[t, present[t]]] = 1.0
        counts = mats[t] @ Z  # ties of i to each position
        exposure = Z.sum(axis=0)[None, :] - Z  # other present actors per position
        E[t] = counts @ np.log(lam).T - exposure @ lam.T
        E[t, ~present[t]] = 0.0
    neg = -np.inf
    log_pi = np.where(active, 0.0, neg)
    log_pi = log_pi - logsumexp(log_pi, axis=1, keepdims=True)
    # transition into period t: stay with 1 - rho, else evenly over the other open positions
    log_P = np.empty((Tn, B, B))
    for t in range(Tn):
        open_ = np.flatnonzero(active[t])
        P = np.zeros((B, B))
        for k in range(B):
            others = open_[open_ != k]
            P[k, others] = rho / max(others.size, 1)
            P[k, k] = 1.0 - rho if active[t, k] else 0.0
            if not active[t, k]:
                P[k, others] = 1.0 / others.size
        with np.errstate(divide="ignore"):
            log_P[t] = np.log(P)
    first = present.argmax(axis=0)
    alpha = np.full((Tn, n, B), neg)
    for t in range(Tn):
        start = log_pi[t][None, :] + E[t]
        if t == 0:
            alpha[t] = start
        else:
            moved = logsumexp(alpha[t - 1][:, :, None] + log_P[t][None], axis=1) + E[t]
            alpha[t] = np.where((first == t)[:, None], start, moved)
        alpha[t][~present[t]] = neg
    beta = np.zeros((Tn, n, B))
    for t in range(Tn - 2, -1, -1):
        back = logsumexp(log_P[t + 1][None] + (E[t + 1] + beta[t + 1])[:, None, :], axis=2)
        beta[t] = np.where(present[t + 1][:, None], back, 0.0)
    change = np.full((Tn, n), np.nan)
    post = alpha + beta
    with np.errstate(invalid="ignore"):
        post = post - logsumexp(post, axis=2, keepdims=True)
    for t in range(1, Tn):
        sel = step[t]
        joint = alpha[t - 1][sel][:, :, None] + log_P[t][None] + (E[t] + beta[t])[sel][:, None, :]
        joint = np.exp(joint - logsumexp(joint, axis=(1, 2), keepdims=True))
        change[t, sel] = 1.0 - np.trace(joint, axis1=1, axis2=2)
    return change, np.where(present, post.argmax(axis=2), -1)


def model_periods(s: dict) -> tuple[list, list]:
    """The study as the dynamic model takes it (present actors, one undirected relation), and their indices."""
    present = s["labels"] >= 0
    periods, index = [], []
    for t, mat in enumerate(s["mats"]):
        idx = np.flatnonzero(present[t])
        periods.append(([f"a{i:03d}" for i in idx], [sp.csr_array(mat[idx][:, idx])], [False]))
        index.append(idx)
    return periods, index


def model_arrays(model, s: dict) -> tuple[np.ndarray, np.ndarray]:
    """Change probabilities and most probable positions of a fitted model on the study's (T, n) grid."""
    Tn, n = s["labels"].shape
    change = np.full((Tn, n), np.nan)
    lab = np.full((Tn, n), -1)
    present = s["labels"] >= 0
    for t in range(Tn):
        idx = np.flatnonzero(present[t])  # the order model_periods gave the model
        change[t, idx] = model.change_probability_[t]
        lab[t, idx] = model.labels_[t]
    return change, lab


def truth_start(s: dict, prior: float = dyn.MEASURED_PRIOR):
    """The dynamic model's EM begun at the planted memberships (fifth position closed before its founding)."""
    periods, _ = model_periods(s)
    data = dyn._prepare_periods(periods, False, False)
    Tn = data.T
    gamma = np.zeros((Tn, data.n, B))
    pos = np.array([int(a[1:]) for a in data.actors])
    for t in range(Tn):
        lab = s["labels"][t, pos]
        ok = lab >= 0
        gamma[t, np.flatnonzero(ok), lab[ok]] = 1.0
        gamma[t, ~ok] = 1.0 / B
    state = dyn._State(gamma, np.zeros((data.n, B, B)), np.zeros((data.n, B)), np.zeros(data.n),
                       dyn._all_stats(data, gamma))
    # chain statistics of the planted memberships, for the first M-step
    first = data.first
    state.g0 = gamma[first, np.arange(data.n)]
    for t in range(1, Tn):
        sel = (t > first) & (t <= data.last)
        state.xi[sel] += gamma[t - 1, sel][:, :, None] * gamma[t, sel][:, None, :]
    active = np.ones((Tn, B), dtype=bool)
    active[: s["found"], K] = False
    params = dyn._m_step(data, state, B, active)
    model = dyn.DynamicSBM(B, transition_prior=prior)
    state, params, history, n_iter = dyn._em_with_prior(data, state, params, B, np.random.default_rng(0), 100, 1e-6,
                                                        prior)
    model._set_results(data, state, params, history, n_iter, B)
    return model


def fitted(s: dict, prior: float = dyn.MEASURED_PRIOR):
    periods, _ = model_periods(s)
    return dyn.DynamicSBM(B, seed=0, transition_prior=prior).fit(periods)


def scores(change: np.ndarray, lab: np.ndarray, s: dict) -> dict:
    step = steps(s["labels"])
    p = change[step]
    real = s["moves"][step]
    p = np.nan_to_num(p, nan=0.0)
    order = np.argsort(-p, kind="stable")
    hits = np.cumsum(real[order])
    prec = hits / np.arange(1, p.size + 1)
    # thresholds only between distinct values
    distinct = np.r_[p[order][1:] < p[order][:-1], True]
    ok = distinct & (prec >= 0.9)
    best = int(np.flatnonzero(ok)[-1]) if ok.any() else -1
    recall_09 = hits[best] / real.sum() if best >= 0 else 0.0
    thr = float(p[order][best]) if best >= 0 else float("nan")
    at = p >= 0.5
    cand = np.zeros_like(step)
    cand[1:] = (lab[1:] != lab[:-1]) & step[1:]
    cand = cand[step]
    rep = cand & at
    return {
        "recall@p0.9": recall_09, "thr": thr,
        "p@0.5": real[at].mean() if at.any() else np.nan, "r@0.5": real[at].sum() / real.sum(),
        "r_cand": real[cand].sum() / real.sum(),
        "p_map": real[rep].mean() if rep.any() else np.nan, "r_map": real[rep].sum() / real.sum(),
        "brier": float(np.mean((p - real) ** 2)),
    }


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--seeds", default="101-105")
    parser.add_argument("--settings", default=",".join(SETTINGS))
    parser.add_argument("--fits", action="store_true", help="also the model begun at the truth and the default fit")
    parser.add_argument("--prior", type=float, default=dyn.MEASURED_PRIOR,
                        help="transition prior strength of the fitted rows (the model's default is 0, off)")
    parser.add_argument("--scales", default="", help="also the oracle with both rates multiplied, e.g. 1.5,2,3")
    args = parser.parse_args()
    lo, hi = (int(x) for x in args.seeds.split("-"))
    rows = []
    for setting in args.settings.split(","):
        for seed in range(lo, hi + 1):
            s = study(seed, setting)
            rows.append(dict(scores(*oracle_change(s), s), setting=setting, row="oracle", seed=seed))
            for scale in [float(x) for x in args.scales.split(",") if x]:
                scaled = study(seed, setting, scale)
                rows.append(dict(scores(*oracle_change(scaled), scaled), setting=setting, row=f"oracle x{scale:g}",
                                 seed=seed))
            if args.fits:
                for name, make in (("truth-start", truth_start), ("fitted", fitted)):
                    rows.append(dict(scores(*model_arrays(make(s, args.prior), s), s), setting=setting, row=name,
                                     seed=seed))
    frame = pd.DataFrame(rows)
    table = frame.groupby(["setting", "row"], sort=False).mean(numeric_only=True).drop(columns="seed")
    print(f"seeds {args.seeds}, mean over seeds")
    print(table.round(3).to_string())


if __name__ == "__main__":
    main()
