"""Calibrated move confidence and its self-check, for any stored fit.

Simulated studies are drawn from the stored fit (its positions per period,
its block densities, its moves), refitted with the fit's own procedure
(:func:`tracker.pipeline.fitting.fit_snapshots`, whatever the method) and
aligned as the study was; their moves, whose truth is known, teach and check
the map from a move's features to the probability that it is real (the maths
is in :mod:`tracker.longitudinal.confidence`).  Functions here read the store
and never write.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from tracker.execution import map_tasks, task_seeds

__all__ = ["DEFAULT_ALIGN", "simulation_template", "simulated_moves", "calibrated_confidence", "calibration_check"]

#: Alignment settings used when a fit has none stored.
DEFAULT_ALIGN = {"weight_overlap": 0.5, "link_threshold": 0.2, "split_threshold": 0.3, "max_gap": 0,
                 "include_isolates": False}


def simulation_template(store, info: dict, periods: list, alignment) -> dict:
    """What a simulated study is drawn from: per period actors, fitted labels, block densities; the truth."""
    from tracker.blockmodel.fitting import FitSettings

    params = info["params"]
    settings = FitSettings(**{**params, "relations": tuple(params["relations"]) if params.get("relations") else None,
                              "draws": 0})
    snaps = {s.period: s for s in store.snapshots([p.period for p in periods], settings.relations)}
    template, truth = [], []
    order = [p.period for p in periods]
    for t, pp in enumerate(periods):
        snap = snaps[pp.period]
        if tuple(snap.actors) != tuple(pp.actors):
            raise ValueError(f"period {pp.period}: the fitted actors differ from the stored ties; refit first")
        others = [snaps[order[u]] for u in (t - 1, t + 1) if 0 <= u < len(order)]
        density = held_out_density(pp, others, len(snap.relations))
        if pp.isolates is not None:
            density[:, pp.isolates, :] = 0.0
            density[:, :, pp.isolates] = 0.0
        template.append((pp.period, tuple(snap.actors), tuple(snap.relations), np.asarray(pp.labels), density))
        track = alignment.assignment[pp.period][np.asarray(pp.labels)]
        truth.append(pd.DataFrame({"period": pp.period, "actor": list(pp.actors), "track": track}))
    return {"settings": settings, "template": template, "truth": pd.concat(truth, ignore_index=True),
            "observed": snaps}


def held_out_density(pp, others: list, n_relations: int) -> np.ndarray:
    """Block densities of period ``pp``'s positions measured on the ties of other periods.

    The densities of a partition measured on the ties it was fitted to are
    inflated: a clustering of noise finds dense blocks in it.  Measured on
    the neighbouring periods' ties of the same actors (held-out data, the
    partition fixed), a partition that tracks real positions keeps its
    contrast and one that fits noise loses it, so simulated studies are not
    easier than the observed one.  Falls back to the period's own ties when
    it has no neighbour (a one-period fit).
    """
    import scipy.sparse as sp

    n_pos = pp.n_positions
    if not others:
        return np.array(pp.density, dtype=np.float64) if pp.density is not None else np.zeros((n_relations, n_pos, n_pos))
    index = {a: i for i, a in enumerate(pp.actors)}
    ties = np.zeros((n_relations, n_pos, n_pos))
    possible = np.zeros((n_relations, n_pos, n_pos))
    for snap in others:
        where = np.array([index.get(a, -1) for a in snap.actors])
        keep = np.flatnonzero(where >= 0)
        lab = np.asarray(pp.labels)[where[keep]]
        z = sp.csr_array((np.ones(keep.size), (keep, lab)), shape=(len(snap.actors), n_pos))
        size = np.bincount(lab, minlength=n_pos).astype(np.float64)
        pairs = np.outer(size, size) - np.diag(size)
        for r, mat in enumerate(snap.matrices[:n_relations]):
            binary = sp.csr_array((sp.csr_array(mat) > 0).astype(np.float64))
            ties[r] += np.asarray((z.T @ (binary @ z)).toarray())
            possible[r] += pairs
    return np.divide(ties, possible, out=np.zeros_like(ties), where=possible > 0)


def _one_study(template, settings, align_params, truth, seed):
    """Draw one study from ``template``, refit it with ``settings``, return (features, real) of its moves."""
    from tracker.longitudinal.align import PeriodPositions, align, memberships
    from tracker.longitudinal.confidence import move_features, simulate_period, true_moves_mask
    from tracker.longitudinal.movement import moves as find_moves
    from tracker.pipeline.fitting import fit_snapshots
    from tracker.pipeline.tracking import identity_alignment
    from tracker.snapshot import Snapshot

    rng = np.random.default_rng(seed)
    snaps = []
    for period, actors, relations, labels, density in template:
        mats = simulate_period(labels, density, [r.directed for r in relations], rng)
        snaps.append(Snapshot(period, actors, relations, tuple(mats)))
    fits = fit_snapshots(snaps, settings)
    pps = [PeriodPositions(f.period, f.actors, f.partition.labels, f.partition.n_positions, f.partition.isolates,
                           f.stats.density) for f in fits]
    if settings.options.get("joint"):
        alignment = identity_alignment(pps)
    else:
        alignment = align(pps, weight_overlap=align_params["weight_overlap"],
                          link_threshold=align_params["link_threshold"],
                          split_threshold=align_params["split_threshold"], max_gap=align_params["max_gap"])
    members = memberships(pps, alignment)
    order = [p.period for p in pps]
    found = find_moves(members, order, ignore_tracks=() if align_params.get("include_isolates") else (0,))
    feats = move_features(found, members, order, {s.period: s.matrices for s in snaps},
                          {s.period: s.actors for s in snaps})
    return feats, true_moves_mask(found, truth)


def simulated_moves(store, info: dict, periods: list, alignment, align_params: dict, studies: int, seed: int):
    """Features and truth of the moves of ``studies`` simulated studies: a list of (features, real)."""
    if studies < 1:
        raise ValueError("studies must be at least 1")
    sim = simulation_template(store, info, periods, alignment)
    params = {**DEFAULT_ALIGN, **{k: v for k, v in align_params.items() if k in DEFAULT_ALIGN}}
    tasks = [(sim["template"], sim["settings"], params, sim["truth"], s) for s in task_seeds(seed, studies)]
    return map_tasks(_one_study, tasks, label="simulated studies")


def calibrated_confidence(store, info: dict, periods: list, alignment, moves: pd.DataFrame, studies: int,
                          seed: int, align_params: dict | None = None) -> np.ndarray:
    """Probability that each observed move is real (:mod:`tracker.longitudinal.confidence`)."""
    from tracker.longitudinal.align import memberships
    from tracker.longitudinal.confidence import MoveCalibrator, move_features

    if len(moves) == 0:
        return np.zeros(0)
    runs = simulated_moves(store, info, periods, alignment, align_params or {}, studies, seed)
    model = MoveCalibrator().fit(np.vstack([f for f, _ in runs]), np.concatenate([r for _, r in runs]))
    snaps = {s.period: s for s in store.snapshots([p.period for p in periods],
                                                  info["params"].get("relations") or None)}
    members = memberships(periods, alignment)
    order = [p.period for p in periods]
    feats = move_features(moves, members, order, {p: s.matrices for p, s in snaps.items()},
                          {p: s.actors for p, s in snaps.items()})
    return model.predict(feats)


def calibration_check(store, info: dict, periods: list, alignment, *, studies: int = 20, seed: int = 0,
                      align_params: dict | None = None, bins: int = 5) -> dict:
    """Reliability of move confidence on studies simulated from this fit (two-fold cross-fitting).

    The simulated studies are split in two halves by order; each half's moves
    are scored by a map learned on the other half, so no move is scored by a
    map that saw it.  Returns ``{"studies", "moves", "real", "ece",
    "share_real_at_08", "moves_at_08", "bins": [...]}``.
    """
    from tracker.longitudinal.confidence import MoveCalibrator, reliability

    if studies < 2:
        raise ValueError("the calibration check needs at least 2 simulated studies")
    runs = simulated_moves(store, info, periods, alignment, align_params or {}, studies, seed)
    fold = np.arange(len(runs)) % 2
    conf, real = [], []
    for f in (0, 1):
        train = [runs[i] for i in range(len(runs)) if fold[i] != f]
        test = [runs[i] for i in range(len(runs)) if fold[i] == f]
        model = MoveCalibrator().fit(np.vstack([x for x, _ in train]), np.concatenate([y for _, y in train]))
        for x, y in test:
            conf.append(model.predict(x))
            real.append(y)
    conf = np.concatenate(conf) if conf else np.zeros(0)
    real = np.concatenate(real) if real else np.zeros(0, dtype=bool)
    table, ece = reliability(conf, real, bins)
    high = conf >= 0.8
    return {
        "studies": int(studies), "moves": int(conf.size), "real": int(real.sum()),
        "ece": None if np.isnan(ece) else round(float(ece), 4),
        "moves_at_08": int(high.sum()),
        "share_real_at_08": round(float(real[high].mean()), 4) if high.any() else None,
        "bins": [{k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in row.items()}
                 for row in table.to_dict("records")],
        "seed": int(seed), "align": {**DEFAULT_ALIGN, **(align_params or {})},
    }
