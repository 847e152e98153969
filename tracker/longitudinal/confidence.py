r"""How sure is a move?  The probability that it is real, learned on studies where the truth is known.

A move's confidence should be the probability that the actor really changed
position between those periods.  Reproducibility under resampling is not that:
a false move produced by a sparse period is reproduced as often as the noise
that made it.  So the confidence is learned, by a parametric bootstrap
(Efron & Tibshirani [1]_, ch. 6) from the fitted model itself:

1. **Simulate.**  Each period is redrawn from the fitted blockmodel: the
   fitted positions of every present actor (so the fitted moves are the
   planted moves) and a Bernoulli tie in each pair with the fitted block
   density :math:`t_{kl}/p_{kl}` of its block, per relation
   (:func:`simulate_period`; a stochastic blockmodel, Holland, Laskey &
   Leinhardt [2]_).  The tieless actors' position has density 0, so they stay
   tieless.
2. **Refit** each simulated study with the fit's own procedure and settings
   (method, smoothing, alignment) and list its moves.  Each reported move is
   *real* when the actor's planted track differs between the two periods.
3. **Score.**  Each move gets a few features that any method's result has
   (:data:`FEATURES`: the actor's ties in both periods, how long it stays in
   the new track and stayed in the old one, and the share of its ties that go
   to the new and the old track's members in each period).
4. **Calibrate.**  A logistic regression on those features gives a raw score,
   mapped to a probability by isotonic regression (Zadrozny & Elkan [3]_;
   scikit-learn's ``CalibratedClassifierCV(method="isotonic")``), both learned
   on the simulated moves (:class:`MoveCalibrator`).  The observed study's
   moves are then scored by the same map.

The procedure is checked, on the user's own study, by
:func:`reliability`: moves of simulated studies scored by a map learned on the
*other* simulated studies (two folds), binned by confidence, against the share
that is real, with the expected calibration error (ECE; Naeini, Cooper &
Hauskrecht [4]_; Guo et al. [5]_ for the equal-width-bin form).

References
----------
.. [1] Efron, B. & Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.
.. [2] Holland, P. W., Laskey, K. B. & Leinhardt, S. (1983). Stochastic blockmodels:
   first steps. Social Networks 5, 109-137.
.. [3] Zadrozny, B. & Elkan, C. (2002). Transforming classifier scores into accurate
   multiclass probability estimates. KDD.
.. [4] Naeini, M. P., Cooper, G. F. & Hauskrecht, M. (2015). Obtaining well calibrated
   probabilities using Bayesian binning. AAAI.
.. [5] Guo, C., Pleiss, G., Sun, Y. & Weinberger, K. Q. (2017). On calibration of modern
   neural networks. ICML.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

__all__ = ["FEATURES", "simulate_period", "move_features", "true_moves_mask", "MoveCalibrator", "reliability"]

#: Features of a move, computed by :func:`move_features`.
FEATURES = ("ties_from", "ties_to", "stay_after", "stay_before", "affinity_to", "affinity_from")


def simulate_period(labels: np.ndarray, density: np.ndarray, directed: Sequence[bool],
                    rng: np.random.Generator, values: Mapping | None = None) -> list:
    """One period drawn from a blockmodel: a Bernoulli tie per pair with its block's density.

    With ``values`` (``{(r, k, l): (tie values, their probabilities)}``)
    each tie of block ``(k, l)`` of relation ``r`` carries a value drawn from
    that law (e.g. the events per tie observed in the block); blocks not in
    ``values``, and every tie without ``values``, carry 1.

    Parameters
    ----------
    labels : numpy.ndarray of int, shape (n,)
        Position of each actor, ``0 .. B-1``.
    density : numpy.ndarray, shape (R, B, B)
        Tie probability per relation and block (values above 1 are taken as 1).
    directed : sequence of bool
        One flag per relation.
    rng : numpy.random.Generator

    Returns
    -------
    list of scipy.sparse.csr_array
        One matrix per relation (symmetric when undirected, zero diagonal), 0/1
        unless ``values`` are given.
        Each block's number of ties is Binomial(possible pairs, density), placed
        on distinct pairs drawn uniformly: the same law as one coin per pair,
        with memory proportional to the ties.

    Examples
    --------
    >>> a = simulate_period(np.array([0, 0, 1]), np.ones((1, 2, 2)), [False], np.random.default_rng(0))[0]
    >>> a.toarray().astype(int).tolist()
    [[0, 1, 1], [1, 0, 1], [1, 1, 0]]
    """
    labels = np.asarray(labels, dtype=np.int64)
    density = np.asarray(density, dtype=np.float64)
    if density.ndim != 3 or density.shape[0] != len(directed):
        raise ValueError("density must have shape (relations, B, B), one relation per directed flag")
    n = labels.size
    n_pos = density.shape[1]
    if n and labels.max() >= n_pos:
        raise ValueError("a label is outside the blocks of density")
    members = [np.flatnonzero(labels == k) for k in range(n_pos)]
    out = []
    for r, is_directed in enumerate(directed):
        rows, cols, vals = [], [], []
        for k in range(n_pos):
            for l in range(n_pos) if is_directed else range(k, n_pos):
                p = min(max(float(density[r, k, l]), 0.0), 1.0)
                nk, nl = members[k].size, members[l].size
                if p == 0 or nk == 0 or nl == 0:
                    continue
                if k != l:
                    possible = nk * nl
                elif is_directed:
                    possible = nk * (nk - 1)
                else:
                    possible = nk * (nk - 1) // 2
                if possible == 0:
                    continue
                m = int(rng.binomial(possible, p))
                idx = rng.choice(possible, size=m, replace=False).astype(np.int64)
                i, j = _decode(idx, nk, nl, k == l, is_directed)
                rows.append(members[k][i])
                cols.append(members[l][j])
                law = (values or {}).get((r, k, l))
                vals.append(np.ones(m) if law is None else rng.choice(np.asarray(law[0], dtype=np.float64), size=m,
                                                                      p=np.asarray(law[1], dtype=np.float64)))
        r_all = np.concatenate(rows) if rows else np.zeros(0, dtype=np.int64)
        c_all = np.concatenate(cols) if cols else np.zeros(0, dtype=np.int64)
        v_all = np.concatenate(vals) if vals else np.zeros(0)
        if not is_directed:
            r_all, c_all, v_all = np.concatenate([r_all, c_all]), np.concatenate([c_all, r_all]), np.tile(v_all, 2)
        out.append(sp.csr_array((v_all, (r_all, c_all)), shape=(n, n)))
    return out


def _decode(idx, nk, nl, diagonal, directed):
    """Pair index -> (row, column) inside a block; diagonal blocks skip i == j (and j < i if undirected)."""
    if not diagonal:
        return idx // nl, idx % nl
    if directed:
        i = idx // (nk - 1)
        jj = idx % (nk - 1)
        return i, jj + (jj >= i)
    # Row-major index of the pair (i < j) in the strict upper triangle.
    n = nk
    i = (n - 2 - np.floor(np.sqrt(-8.0 * idx + 4.0 * n * (n - 1) - 7) / 2.0 - 0.5)).astype(np.int64)
    j = idx + i + 1 - n * (n - 1) // 2 + (n - i) * ((n - i) - 1) // 2
    return i, j.astype(np.int64)


def move_features(moves: pd.DataFrame, tracks: pd.DataFrame, order: Sequence[str],
                  matrices: Mapping[str, Sequence], actors: Mapping[str, Sequence[str]]) -> np.ndarray:
    """The :data:`FEATURES` of each move, shape ``(len(moves), 6)``.

    Parameters
    ----------
    moves : pandas.DataFrame
        ``actor, from_period, to_period, from_track, to_track``.
    tracks : pandas.DataFrame
        ``period, actor, track``: every actor's track in every period.
    order : sequence of str
        The periods in time order.
    matrices, actors : mappings keyed by period
        Each period's matrices (one per relation) and its actors in matrix order.

    Notes
    -----
    ``ties_*`` is log(1 + number of actors tied to the mover, any relation,
    either direction); ``stay_after`` (``stay_before``) log(1 + consecutive
    periods in the new track from the move on (in the old one up to it));
    ``affinity_to`` is, at the destination period, the share of the mover's
    tied actors in the new track minus the share in the old one, and
    ``affinity_from`` the share in the old track minus the new at the period
    left (0 for an actor without ties).
    """
    n_moves = len(moves)
    out = np.zeros((n_moves, len(FEATURES)))
    if n_moves == 0:
        return out
    order = [str(p) for p in order]
    rank = {p: i for i, p in enumerate(order)}
    wide = tracks.pivot_table(index="actor", columns="period", values="track", aggfunc="first")
    wide = wide.reindex(columns=order)
    grid = wide.to_numpy(dtype=np.float64)  # NaN where absent
    row_of = {a: i for i, a in enumerate(wide.index)}
    adjacency = {p: _neighbours(matrices[p]) for p in set(moves["from_period"].astype(str)) | set(moves["to_period"].astype(str))}
    index = {p: {a: i for i, a in enumerate(actors[p])} for p in adjacency}
    track_of = {p: _track_vector(tracks, p, actors[p]) for p in adjacency}
    for m, (a, fp, tp, ft, tt) in enumerate(zip(moves["actor"], moves["from_period"].astype(str),
                                                  moves["to_period"].astype(str), moves["from_track"],
                                                  moves["to_track"])):
        row = grid[row_of[a]]
        out[m, 2] = np.log1p(_run(row, rank[tp], +1, tt))
        out[m, 3] = np.log1p(_run(row, rank[fp], -1, ft))
        for col, period, mine, other in ((0, fp, ft, tt), (1, tp, tt, ft)):
            adj = adjacency[period]
            i = index[period][a]
            nb = adj.indices[adj.indptr[i]:adj.indptr[i + 1]]
            out[m, col] = np.log1p(nb.size)
            if nb.size:
                where = track_of[period][nb]
                share = (np.mean(where == mine) - np.mean(where == other))
                out[m, 5 if col == 0 else 4] = share
    return out


def _neighbours(mats) -> sp.csr_array:
    total = None
    for mat in mats:
        b = sp.csr_array(mat, dtype=np.float64)
        b = b + b.T
        total = b if total is None else total + b
    total = sp.csr_array(total)
    total.setdiag(0)
    total.eliminate_zeros()
    return total


def _track_vector(tracks, period, actors) -> np.ndarray:
    sub = tracks[tracks["period"].astype(str) == period].set_index("actor")["track"]
    return np.array([sub.get(a, -1) for a in actors], dtype=np.int64)


def _run(row, start, step, track) -> int:
    """Consecutive presences in ``track`` from ``start`` walking by ``step`` (absences skipped)."""
    count, t = 0, start
    while 0 <= t < row.size:
        if not np.isnan(row[t]):
            if int(row[t]) != int(track):
                break
            count += 1
        t += step
    return count


def true_moves_mask(moves: pd.DataFrame, truth: pd.DataFrame) -> np.ndarray:
    """Whether each move is real: the actor's planted track differs between its two periods.

    ``truth`` has columns ``period, actor, track`` (the planted tracks).
    """
    if len(moves) == 0:
        return np.zeros(0, dtype=bool)
    key = truth.set_index(["period", "actor"])["track"]
    before = key.reindex(list(zip(moves["from_period"].astype(str), moves["actor"]))).to_numpy()
    after = key.reindex(list(zip(moves["to_period"].astype(str), moves["actor"]))).to_numpy()
    return (before != after) & ~pd.isna(before) & ~pd.isna(after)


class MoveCalibrator:
    """Features of a move -> probability that it is real (logistic score, isotonic map).

    With ``monotone=True`` the only feature is a model's own probability of
    the move (a dynamic fit's posterior change probability), and the map is
    one isotonic regression of "real" on it (Zadrozny & Elkan 2002): monotone,
    so a more probable move under the model never gets a lower confidence.
    Rows whose feature is NaN (no posterior) get NaN.

    ``fit(X, y)`` learns from simulated moves (``y`` real or not); with fewer
    than 3 real or 3 false moves there is nothing to separate, and every move
    gets the share of real moves (with one pseudo-move of each kind); without
    any simulated move, NaN (unknown).
    """

    def __init__(self, monotone: bool = False) -> None:
        self.monotone = bool(monotone)
        self.model_ = None
        self.rate_ = 0.5

    def fit(self, features: np.ndarray, real: np.ndarray) -> "MoveCalibrator":
        from sklearn.calibration import CalibratedClassifierCV
        from sklearn.linear_model import LogisticRegression
        from sklearn.pipeline import make_pipeline
        from sklearn.preprocessing import StandardScaler

        real = np.asarray(real, dtype=bool)
        self.rate_ = (real.sum() + 0.5) / (real.size + 1.0) if real.size else float("nan")
        self.model_ = None
        if min(real.sum(), (~real).sum()) >= 3 and self.monotone:
            from sklearn.isotonic import IsotonicRegression

            x = np.asarray(features, dtype=np.float64)[:, 0]
            ok = np.isfinite(x)
            self.model_ = IsotonicRegression(y_min=0.0, y_max=1.0, increasing=True,
                                             out_of_bounds="clip").fit(x[ok], real[ok].astype(np.float64))
        elif min(real.sum(), (~real).sum()) >= 3:
            base = make_pipeline(StandardScaler(), LogisticRegression(max_iter=1000))
            self.model_ = CalibratedClassifierCV(base, method="isotonic", cv=3).fit(features, real)
        return self

    def steps(self) -> dict:
        """The monotone map as ``{"raw": [...], "confidence": [...]}`` (knots; linear in between, clipped outside).

        Only for ``monotone=True``; without a fitted map, no knots and every
        move gets ``rate`` (the pooled share of real moves; None: unknown).
        """
        if not self.monotone:
            raise ValueError("only a monotone map has steps")
        rate = None if np.isnan(self.rate_) else float(self.rate_)
        if self.model_ is None:
            return {"raw": [], "confidence": [], "rate": rate}
        return {"raw": [float(x) for x in self.model_.X_thresholds_],
                "confidence": [float(y) for y in self.model_.y_thresholds_], "rate": rate}

    @staticmethod
    def apply_steps(steps: dict, raw: np.ndarray) -> np.ndarray:
        """Confidence of raw probabilities under a stored map (:meth:`steps`); NaN stays NaN."""
        raw = np.asarray(raw, dtype=np.float64)
        if not steps.get("raw"):
            rate = steps.get("rate")
            return np.where(np.isfinite(raw), np.nan if rate is None else float(rate), np.nan)
        out = np.interp(raw, steps["raw"], steps["confidence"])
        return np.where(np.isfinite(raw), np.clip(out, 0.0, 1.0), np.nan)

    def predict(self, features: np.ndarray) -> np.ndarray:
        features = np.asarray(features, dtype=np.float64)
        if features.shape[0] == 0:
            return np.zeros(0)
        if self.model_ is None:
            return np.full(features.shape[0], self.rate_)
        if self.monotone:
            x = features[:, 0]
            out = np.full(x.size, np.nan)
            ok = np.isfinite(x)
            if ok.any():
                out[ok] = self.model_.predict(x[ok])
            return np.clip(out, 0.0, 1.0)
        return np.clip(self.model_.predict_proba(features)[:, 1], 0.0, 1.0)


def reliability(confidence: np.ndarray, real: np.ndarray, bins: int = 5) -> tuple[pd.DataFrame, float]:
    r"""Reliability table and expected calibration error over equal-width bins.

    .. math:: \mathrm{ECE} = \sum_b \frac{n_b}{N} \,\bigl|\,\bar y_b - \bar c_b\bigr|

    (Naeini et al. 2015; Guo et al. 2017).  Returns a table with ``bin_low,
    bin_high, moves, mean_confidence, share_real`` (empty bins kept with NaN)
    and the ECE (NaN without moves).

    >>> table, ece = reliability(np.array([0.1, 0.9, 0.9]), np.array([0, 1, 0]))
    >>> round(ece, 3), table["moves"].tolist()
    (0.333, [1, 0, 0, 0, 2])
    """
    confidence = np.asarray(confidence, dtype=np.float64)
    real = np.asarray(real, dtype=np.float64)
    if bins < 1:
        raise ValueError("bins must be at least 1")
    which = np.minimum((confidence * bins).astype(np.int64), bins - 1)
    rows = []
    ece = 0.0
    for b in range(bins):
        mask = which == b
        n_b = int(mask.sum())
        mean_c = float(confidence[mask].mean()) if n_b else float("nan")
        share = float(real[mask].mean()) if n_b else float("nan")
        rows.append({"bin_low": b / bins, "bin_high": (b + 1) / bins, "moves": n_b,
                     "mean_confidence": mean_c, "share_real": share})
        if n_b:
            ece += n_b / confidence.size * abs(share - mean_c)
    return pd.DataFrame(rows), (float(ece) if confidence.size else float("nan"))
