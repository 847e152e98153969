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

import dataclasses

import numpy as np
import pandas as pd
import scipy.sparse as sp

from tracker.execution import map_tasks, task_seeds
from tracker.longitudinal.confidence import MoveCalibrator
from tracker.pipeline.fitting import is_dynamic

__all__ = ["DEFAULT_ALIGN", "simulation_template", "planted", "held_out_density", "simulated_moves", "real_share",
           "calibrated_confidence", "calibration_check", "posterior_feature", "fitted_chain", "chain_draw",
           "chain_studies", "studies_needed", "ece_floor", "MIN_CANDIDATES", "MAX_STUDIES"]

#: Alignment settings used when a fit has none stored.
DEFAULT_ALIGN = {"weight_overlap": 0.5, "link_threshold": 0.2, "split_threshold": 0.3, "max_gap": 0,
                 "include_isolates": False}


def simulation_template(store, info: dict, periods: list, alignment) -> dict:
    """What simulated studies are drawn from: the fit's settings, and per period its actors,
    relations, observed matrices, fitted labels and position -> track map."""
    from tracker.blockmodel.fitting import FitSettings

    params = info["params"]
    settings = FitSettings(**{**params, "relations": tuple(params["relations"]) if params.get("relations") else None,
                              "draws": 0})
    snaps = {s.period: s for s in store.snapshots([p.period for p in periods], settings.relations)}
    template = []
    for pp in periods:
        snap = snaps[pp.period]
        if tuple(snap.actors) != tuple(pp.actors):
            raise ValueError(f"period {pp.period}: the fitted actors differ from the stored ties; refit first")
        template.append(_Period(pp.period, tuple(snap.actors), tuple(snap.relations), tuple(snap.matrices),
                                np.asarray(pp.labels), pp.n_positions, pp.isolates,
                                np.asarray(alignment.assignment[pp.period])))
    return {"settings": settings, "template": template, "observed": snaps}


@dataclasses.dataclass(frozen=True, eq=False)
class _Period:
    period: str
    actors: tuple
    relations: tuple
    matrices: tuple
    labels: np.ndarray
    n_positions: int
    isolates: int | None
    assignment: np.ndarray  # position -> track


def planted(template: list, moves: pd.DataFrame, keep: np.ndarray) -> tuple[list, pd.DataFrame]:
    """Planted labels per period and planted tracks: the fitted ones, with the moves not kept undone.

    An actor whose move is not kept stays in the track it left (in the
    position of that track in each later period where the track has one) until
    its next kept move.  Changes into or out of the tieless position are kept
    as fitted.  Returns (labels per period, truth table ``period, actor, track``).
    """
    labels = [p.labels.copy() for p in template]
    tracks = [p.assignment[p.labels] for p in template]
    undone = {(a, str(t)) for a, t, k in zip(moves["actor"], moves["to_period"], keep) if not k}
    if undone:
        index = [{a: i for i, a in enumerate(p.actors)} for p in template]
        position_of = [{int(tr): k for k, tr in enumerate(p.assignment) if tr >= 0} for p in template]
        for actor in {a for a, _ in undone}:
            current, previous = None, None
            for t, p in enumerate(template):
                i = index[t].get(actor)
                if i is None:
                    continue
                fitted = int(tracks[t][i])
                if current is None:
                    current = fitted
                elif (actor, p.period) in undone or (fitted == previous and fitted != 0):
                    k = position_of[t].get(current)
                    if k is not None and fitted != 0:
                        labels[t][i] = k
                        tracks[t][i] = current
                    else:
                        current = fitted
                else:
                    current = fitted
                previous = fitted
    truth = pd.concat([pd.DataFrame({"period": p.period, "actor": list(p.actors), "track": tr})
                       for p, tr in zip(template, tracks)], ignore_index=True)
    return labels, truth


def held_out_density(labels: np.ndarray, actors: tuple, n_pos: int, others: list, n_relations: int,
                     own: tuple = ()) -> np.ndarray:
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

    if not others:
        others = [(actors, own)]
    index = {a: i for i, a in enumerate(actors)}
    ties = np.zeros((n_relations, n_pos, n_pos))
    possible = np.zeros((n_relations, n_pos, n_pos))
    for other_actors, other_matrices in others:
        where = np.array([index.get(a, -1) for a in other_actors])
        keep = np.flatnonzero(where >= 0)
        lab = np.asarray(labels)[where[keep]]
        z = sp.csr_array((np.ones(keep.size), (keep, lab)), shape=(len(other_actors), n_pos))
        size = np.bincount(lab, minlength=n_pos).astype(np.float64)
        pairs = np.outer(size, size) - np.diag(size)
        for r, mat in enumerate(other_matrices[:n_relations]):
            binary = sp.csr_array((sp.csr_array(mat) > 0).astype(np.float64))
            ties[r] += np.asarray((z.T @ (binary @ z)).toarray())
            possible[r] += pairs
    return np.divide(ties, possible, out=np.zeros_like(ties), where=possible > 0)


def _one_study(template, settings, align_params, moves, keep_probability, seed):
    """Draw one study from ``template``, refit it with ``settings``, return (features, real) of its moves.

    Each fitted move is planted with probability ``keep_probability`` (drawn
    here from ``seed``), the others undone (:func:`planted`).
    """
    from tracker.longitudinal.confidence import simulate_period
    from tracker.snapshot import Snapshot

    rng = np.random.default_rng(seed)
    keep = rng.random(len(moves)) < np.asarray(keep_probability, dtype=np.float64)
    labels, truth = planted(template, moves, keep)
    snaps = []
    for t, p in enumerate(template):
        others = [(template[u].actors, template[u].matrices) for u in (t - 1, t + 1) if 0 <= u < len(template)]
        density = held_out_density(labels[t], p.actors, p.n_positions, others, len(p.relations), p.matrices)
        if p.isolates is not None:
            density[:, p.isolates, :] = 0.0
            density[:, :, p.isolates] = 0.0
        mats = simulate_period(labels[t], density, [r.directed for r in p.relations], rng)
        snaps.append(Snapshot(p.period, p.actors, p.relations, tuple(mats)))
    return _refit_and_score(snaps, settings, align_params, truth)


def _one_chain_study(template, settings, align_params, chain, seed):
    """Draw one study from a dynamic fit's model (:func:`chain_draw`, :func:`fitted_chain`), refit it: (features, real)."""
    from tracker.longitudinal.confidence import simulate_period
    from tracker.snapshot import Snapshot

    rng = np.random.default_rng(seed)
    labels, truth = chain_draw(template, chain, rng)
    snaps = [Snapshot(p.period, p.actors, p.relations,
                      tuple(simulate_period(labels[t], chain["tie_prob"], [r.directed for r in p.relations], rng,
                                            values=chain["values"])))
             for t, p in enumerate(template)]
    return _refit_and_score(snaps, settings, align_params, truth)


def _refit_and_score(snaps, settings, align_params, truth):
    """Refit simulated periods with the fit's own procedure; (features, real) of the moves it reports."""
    from tracker.longitudinal.align import PeriodPositions, align, memberships
    from tracker.longitudinal.confidence import move_features, true_moves_mask
    from tracker.longitudinal.movement import moves as find_moves
    from tracker.pipeline.fitting import fit_snapshots
    from tracker.pipeline.tracking import identity_alignment

    fits = fit_snapshots(snaps, settings)
    pps = [PeriodPositions(f.period, f.actors, f.partition.labels, f.partition.n_positions, f.partition.isolates,
                           f.stats.density) for f in fits]
    dynamic = is_dynamic(settings)
    if dynamic:
        alignment = identity_alignment(pps)
    else:
        alignment = align(pps, weight_overlap=align_params["weight_overlap"],
                          link_threshold=align_params["link_threshold"],
                          split_threshold=align_params["split_threshold"], max_gap=align_params["max_gap"])
    members = memberships(pps, alignment)
    order = [p.period for p in pps]
    found = find_moves(members, order, ignore_tracks=() if align_params.get("include_isolates") else (0,))
    if dynamic:
        feats = posterior_feature([(f.period, f.diagnostics) for f in fits], found)
    else:
        feats = move_features(found, members, order, {s.period: s.matrices for s in snaps},
                              {s.period: s.actors for s in snaps})
    return feats, true_moves_mask(found, truth)


def fitted_chain(template: list, diagnostics: dict) -> dict:
    r"""The dynamic model a fit stands for: what :func:`chain_draw` and :func:`_one_chain_study` draw from.

    ``initial`` (:math:`\pi`) and ``transition`` (:math:`P`) are the fit's
    own (stored in each period's diagnostics).  ``active[t, k]``: position
    ``k`` holds an actor in period ``t`` in the fit (a position not yet born
    or already ended takes nobody, as in the fitted model's laws).

    Ties: a pair of positions ``(k, l)`` is tied with probability
    :math:`\theta_{kl} / \bar v_{kl}` and a tie carries a number of events
    drawn from the events per tie observed in that block (its empirical law,
    all periods pooled, the fit's most probable positions), so the mean
    events per pair is the fitted rate :math:`\theta_{kl}` while the count
    law is the data's, not the Poisson law the model assumes: real event
    counts are overdispersed, and a Poisson world hides how far a few
    repeated events can pull an actor.  :math:`\theta` is the fit's block
    rates when stored (``rates``), otherwise (older fits, and degree-corrected
    ones, whose rates are not events per pair) events over possible pairs of
    the most probable positions; :math:`\bar v_{kl}` is the mean events per
    tie observed in the block (1 where it has none).  A Bernoulli fit's
    rates are tie probabilities and its ties carry 1.
    """
    n_pos = max(p.n_positions for p in template)
    R = len(template[0].relations)
    active = np.zeros((len(template), n_pos), dtype=bool)
    tied, events, pairs = (np.zeros((R, n_pos, n_pos)) for _ in range(3))
    cells = []
    for t, p in enumerate(template):
        active[t, np.unique(p.labels)] = True
        z = sp.csr_array((np.ones(len(p.actors)), (np.arange(len(p.actors)), p.labels)), shape=(len(p.actors), n_pos))
        size = np.bincount(p.labels, minlength=n_pos).astype(np.float64)
        for r, mat in enumerate(p.matrices[:R]):
            m = sp.csr_array(mat, dtype=np.float64).tocoo()
            keep = m.data > 0
            rows, cols, vals = m.row[keep], m.col[keep], m.data[keep]
            cells.append(pd.DataFrame({"r": r, "k": p.labels[rows], "l": p.labels[cols], "v": vals}))
            tied[r] += np.asarray((z.T @ sp.csr_array((np.ones(rows.size), (rows, cols)), shape=m.shape) @ z).toarray())
            events[r] += np.asarray((z.T @ sp.csr_array((vals, (rows, cols)), shape=m.shape) @ z).toarray())
            pairs[r] += np.outer(size, size) - np.diag(size)
    bernoulli = diagnostics.get("model", "poisson") == "bernoulli"
    rates = diagnostics.get("rates")
    if rates is None or diagnostics.get("degree_corrected"):
        rates = np.divide(tied if bernoulli else events, pairs, out=np.zeros_like(events), where=pairs > 0)
    rates = np.asarray(rates, dtype=np.float64).reshape(R, n_pos, n_pos)
    values = {}
    if bernoulli:
        tie_prob = np.clip(rates, 0.0, 1.0)
    else:
        per_tie = np.divide(events, tied, out=np.ones_like(events), where=tied > 0)
        tie_prob = np.clip(rates / per_tie, 0.0, 1.0)
        if cells:
            law = pd.concat(cells, ignore_index=True).groupby(["r", "k", "l"])["v"].value_counts(normalize=True)
            for (r, k, l), sub in law.groupby(level=[0, 1, 2]):
                values[(int(r), int(k), int(l))] = (sub.index.get_level_values("v").to_numpy(), sub.to_numpy())
    return {"initial": np.asarray(diagnostics["initial"], dtype=np.float64),
            "transition": np.asarray(diagnostics["transition"], dtype=np.float64),
            "rates": rates, "tie_prob": tie_prob, "values": values, "active": active}


def chain_draw(template: list, chain: dict, rng: np.random.Generator) -> tuple[list, pd.DataFrame]:
    r"""Positions of every present actor drawn from the fitted Markov chain; (labels per period, truth).

    An actor's first presence draws from :math:`\pi`, each later presence
    ``t`` (previous presence ``s``) from row :math:`z_s` of :math:`P^{t-s}`
    (the chain runs on through absences), each restricted to the positions
    active in that period and renormalised.  The truth table is ``period,
    actor, track`` with track = position + 1 (positions mean the same in every
    period in a dynamic fit).
    """
    pi, P, active = chain["initial"], chain["transition"], chain["active"]
    n_pos = P.shape[0]
    everyone = pd.Index(pd.unique(np.concatenate([np.asarray(p.actors, dtype=object) for p in template])))
    last_t = np.full(len(everyone), -1, dtype=np.int64)  # each actor's previous presence and position
    last_z = np.full(len(everyone), -1, dtype=np.int64)
    labels, rows = [], []
    steps = {0: np.eye(n_pos)}
    for t, p in enumerate(template):
        idx = everyone.get_indexer(list(p.actors))
        prev_t, prev_z = last_t[idx], last_z[idx]
        law = np.tile(pi, (len(p.actors), 1))
        for gap in np.unique(t - prev_t[prev_t >= 0]):
            if int(gap) not in steps:
                steps[int(gap)] = np.linalg.matrix_power(P, int(gap))
            who = (prev_t >= 0) & (t - prev_t == gap)
            law[who] = steps[int(gap)][prev_z[who]]
        law = law * active[t]
        total = law.sum(axis=1, keepdims=True)
        law = np.where(total > 0, law / np.where(total > 0, total, 1.0), active[t] / max(active[t].sum(), 1))
        z = (rng.random((len(p.actors), 1)) > np.cumsum(law, axis=1)).sum(axis=1).clip(0, n_pos - 1)
        labels.append(z.astype(np.int64))
        last_t[idx], last_z[idx] = t, z
        rows.append(pd.DataFrame({"period": p.period, "actor": list(p.actors), "track": z + 1}))
    return labels, pd.concat(rows, ignore_index=True)


def posterior_feature(diagnostics, moves: pd.DataFrame) -> np.ndarray:
    """A dynamic fit's raw change probability of each move, as a one-column feature matrix.

    ``diagnostics`` are ``(period, diagnostics dict or JSON)`` pairs
    (:func:`tracker.pipeline.tracking.dynamic_move_confidence`).
    """
    from tracker.pipeline.tracking import dynamic_move_confidence

    frame = pd.DataFrame({"period": [p for p, _ in diagnostics], "diagnostics": [d for _, d in diagnostics]})
    return dynamic_move_confidence(frame, moves).reshape(-1, 1)


def simulated_moves(sim: dict, moves: pd.DataFrame, keep_probability, align_params: dict, studies: int,
                    seed: int) -> list:
    """Features and truth of the moves of ``studies`` studies simulated from ``sim``: a list of (features, real)."""
    if studies < 1:
        raise ValueError("studies must be at least 1")
    params = {**DEFAULT_ALIGN, **{k: v for k, v in (align_params or {}).items() if k in DEFAULT_ALIGN}}
    moves = moves[["actor", "from_period", "to_period"]].reset_index(drop=True)
    keep = np.broadcast_to(np.asarray(keep_probability, dtype=np.float64), (len(moves),)).copy()
    tasks = [(sim["template"], sim["settings"], params, moves, keep, s) for s in task_seeds(seed, studies)]
    return map_tasks(_one_study, tasks, label="simulated studies")


def calibrated_confidence(store, info: dict, periods: list, alignment, moves: pd.DataFrame, studies: int,
                          seed: int, align_params: dict | None = None, record: dict | None = None) -> np.ndarray:
    r"""Probability that each observed move is real (:mod:`tracker.longitudinal.confidence`).

    Two rounds of ``studies`` simulated studies each.  The first plants every
    fitted move.  A fit of noisy data reports many false moves, so planting
    them all makes worlds with far more real moves than the observed one, and
    a map learned there is too sure.  The first round also measures how many
    false moves a simulated study reports (:math:`F`, the noise floor of the
    procedure) and which share :math:`d` of the planted moves it finds.  The
    second round plants each fitted move with its first-round probability
    rescaled to mean :math:`\pi = \max(0, 1 - F / (d M))` (:func:`real_share`):
    no move when the false moves a simulated study reports outnumber the
    planted moves it finds, and nearly every move when false moves are rare.
    This is a heuristic shrinkage, not a derived estimator: the number of
    moves a simulated study reports hardly depends on how many were planted
    when noise dominates, so it cannot identify the share of real moves.  It
    was chosen on planted data (structural and CONCOR, seeds 0-4) and is
    checked on unseen seeds by the tests and on the user's own study by
    :func:`calibration_check`.  The map of the second round is the one used.
    When the simulated studies report no move at all there is nothing to
    learn from, and every confidence is NaN (unknown) rather than a guess.

    A dynamic fit is calibrated on studies drawn from its own model
    (:func:`chain_draw`: each present actor's positions from the fitted
    Markov chain, events per pair from the fitted block rates), refitted with
    the dynamic model; the only feature is the refit's own posterior change
    probability :math:`p` (mean-field, plug-in parameters, so over-confident
    on sparse data).  The map is a monotone (isotonic) regression of "real"
    (the drawn chain changed between the two presences) on :math:`p` over
    every candidate change of the refits (the changes of the most probable
    position, the same set as the observed study's candidates), applied to
    the observed candidates' :math:`p`; the 0.5 reporting cut comes after.
    How many studies: :func:`studies_needed` (``studies`` is the floor).
    Why the chain and not the fitted moves: planting every observed candidate
    change makes worlds with as many real moves as the fit has candidates,
    which on sparse data are mostly noise, so the simulated share of real
    moves at a given :math:`p` was not the observed one; the chain moves
    actors at the fitted transition rate.  ``record`` (a dict), when given,
    receives the map (``confidence_map``: its steps, :meth:`MoveCalibrator.steps`),
    the number of studies and of simulated candidates.
    """
    if len(moves) == 0:
        return np.zeros(0)
    sim = simulation_template(store, info, periods, alignment)
    dynamic = is_dynamic(info["params"])
    if dynamic:
        stored = store.fit_periods(info["id"])
        feats = posterior_feature(list(zip(stored["period"], stored["diagnostics"])), moves)
    else:
        feats = _observed_features(sim, periods, alignment, moves)
    first, second = task_seeds(seed, 2)
    if dynamic:
        runs = chain_studies(sim, _chain_of(stored, sim), align_params, studies, first)
        model = MoveCalibrator(monotone=True).fit(np.vstack([f for f, _ in runs]), np.concatenate([r for _, r in runs]))
        if record is not None:
            record.update(calibration_studies=len(runs), calibration_candidates=int(sum(len(r) for _, r in runs)),
                          confidence_map=model.steps())
        return model.predict(feats)
    runs = simulated_moves(sim, moves, np.ones(len(moves)), align_params, studies, first)
    model = MoveCalibrator(monotone=dynamic).fit(np.vstack([f for f, _ in runs]), np.concatenate([r for _, r in runs]))
    conf = model.predict(feats)
    if np.isnan(conf).all():
        return conf
    keep = np.clip(conf * real_share(runs, len(moves)) / max(float(conf.mean()), 1e-12), 0.0, 1.0)
    runs = simulated_moves(sim, moves, keep, align_params, studies, second)
    model = MoveCalibrator(monotone=dynamic).fit(np.vstack([f for f, _ in runs]), np.concatenate([r for _, r in runs]))
    return model.predict(feats)


#: Simulated candidate changes wanted for the isotonic map of a dynamic fit (:func:`studies_needed`).
MIN_CANDIDATES = 500
#: Most studies simulated for one map, whatever the study (and never more than 10 x the floor).
MAX_STUDIES = 250


def studies_needed(candidates: int, studies: int, floor: int) -> int:
    r"""How many simulated studies give :data:`MIN_CANDIDATES` candidate changes: the rule.

    ``candidates`` were found in a first batch of ``studies`` studies.  The
    number of studies is :math:`\lceil C / \bar c\rceil` with :math:`\bar c`
    the candidates per study seen so far and :math:`C = 500`, clipped to
    ``[floor, min(10 floor, MAX_STUDIES)]`` (``floor``: the ``draws``
    option, so ``draws`` also bounds the time spent: at most ten times).  Why 500: the
    reliability check bins confidence in fifths, and the isotonic map's value
    on a stretch of raw probabilities is the share of real changes among the
    simulated candidates there; with 500 candidates a fifth of them (100)
    gives that share with binomial standard error at most
    :math:`0.5/\sqrt{100} = 0.05`, the ECE target.  A large study, with many
    candidates per simulated study, needs few simulations; a small or quiet
    one needs many.  With no candidate at all in the first batch, the cap.
    """
    if studies < 1 or floor < 1:
        raise ValueError("studies and floor must be at least 1")
    cap = max(min(10 * int(floor), MAX_STUDIES), int(floor))
    if candidates <= 0:
        return cap
    return int(np.clip(int(np.ceil(MIN_CANDIDATES * studies / candidates)), floor, cap))


def chain_studies(sim: dict, chain: dict, align_params: dict | None, floor: int, seed: int) -> list:
    """(features, real) of studies drawn from a dynamic fit's model and refitted; as many as :func:`studies_needed`.

    A first batch of ``floor`` studies, then the rest; study ``i`` always
    draws from the ``i``-th seed spawned from ``seed`` (:func:`task_seeds`),
    so the answer is the same for any number of workers.
    """
    floor = max(int(floor), 1)
    params = {**DEFAULT_ALIGN, **{k: v for k, v in (align_params or {}).items() if k in DEFAULT_ALIGN}}
    seeds = task_seeds(seed, MAX_STUDIES)
    task = lambda s: (sim["template"], sim["settings"], params, chain, s)  # noqa: E731
    runs = map_tasks(_one_chain_study, [task(s) for s in seeds[:floor]], label="simulated studies")
    more = studies_needed(sum(len(r) for _, r in runs), len(runs), floor)
    if more > len(runs):
        runs += map_tasks(_one_chain_study, [task(s) for s in seeds[len(runs):more]], label="simulated studies")
    return runs


def _chain_of(stored: pd.DataFrame, sim: dict) -> dict:
    import json

    last = stored["diagnostics"].iloc[-1]
    return fitted_chain(sim["template"], last if isinstance(last, dict) else json.loads(last or "{}"))


def real_share(runs: list, planted_moves: int) -> float:
    r""":math:`\pi = \max(0, 1 - F / (d M))` from studies where all ``M`` fitted moves were planted (a heuristic).

    ``F`` is the mean number of false moves a simulated study reports and
    ``d`` the mean share of planted moves it finds.
    """
    if planted_moves == 0 or not runs:
        return 0.0
    false = float(np.mean([(~np.asarray(r, dtype=bool)).sum() for _, r in runs]))
    found = float(np.mean([np.asarray(r, dtype=bool).sum() for _, r in runs])) / planted_moves
    if found <= 0:
        return 0.0
    return float(np.clip(1.0 - false / (found * planted_moves), 0.0, 1.0))


def _observed_features(sim, periods, alignment, moves) -> np.ndarray:
    from tracker.longitudinal.align import memberships
    from tracker.longitudinal.confidence import move_features

    snaps = sim["observed"]
    return move_features(moves, memberships(periods, alignment), [p.period for p in periods],
                         {p: s.matrices for p, s in snaps.items()}, {p: s.actors for p, s in snaps.items()})


def calibration_check(store, info: dict, periods: list, alignment, moves: pd.DataFrame, *, studies: int = 20,
                      seed: int = 0, align_params: dict | None = None, bins: int = 5) -> dict:
    """Reliability of move confidence on studies simulated from this fit.

    *Dynamic fit.*  Fresh studies are drawn from the fitted model
    (:func:`chain_draw`; as many as :func:`studies_needed` asks, ``studies``
    the floor) and refitted; every candidate change of theirs is scored with
    the map the alignment stored (``confidence_map``; learned afresh on
    other studies when none is stored) and compared with the drawn truth.
    This checks the map actually used, out of sample.

    *Descriptive fit* (two-fold cross-fitting).  The simulated studies plant
    each stored move with its stored confidence (1 where none was computed):
    worlds like the one the confidences describe.  The simulated studies are
    split in two halves by order; each half's moves are scored by a map
    learned on the other half, so no move is scored by a map that saw it.

    Returns ``{"studies", "moves", "real", "ece", "ece_floor", "ece_floor_95",
    "share_real_at_08", "moves_at_08", "bins": [...]}``; ``ece_floor`` is the
    mean ECE the same confidences would show if they were exactly calibrated
    (each move real with its confidence; 200 draws), ``ece_floor_95`` its 95th
    percentile: an ECE below that is within sampling noise.
    """
    from tracker.longitudinal.confidence import reliability
    from tracker.pipeline.tracking import alignment_settings

    if studies < 2:
        raise ValueError("the calibration check needs at least 2 simulated studies")
    sim = simulation_template(store, info, periods, alignment)
    if is_dynamic(info["params"]):
        conf, real, studies = _dynamic_check(store, info, sim, align_params or {}, studies, seed)
    else:
        conf, real = _cross_fitted(sim, moves, align_params, studies, seed)
    known = ~np.isnan(conf)  # NaN: no simulated move to learn from
    conf, real = conf[known], real[known]
    table, ece = reliability(conf, real, bins)
    floor = ece_floor(conf, bins, seed=seed)
    high = conf >= 0.8
    return {
        "studies": int(studies), "moves": int(conf.size), "real": int(real.sum()),
        "ece": None if np.isnan(ece) else round(float(ece), 4),
        "ece_floor": None if np.isnan(floor[0]) else round(floor[0], 4),
        "ece_floor_95": None if np.isnan(floor[1]) else round(floor[1], 4),
        "moves_at_08": int(high.sum()),
        "share_real_at_08": round(float(real[high].mean()), 4) if high.any() else None,
        "bins": [{k: (None if isinstance(v, float) and np.isnan(v) else v) for k, v in row.items()}
                 for row in table.to_dict("records")],
        "seed": int(seed), "align": {**DEFAULT_ALIGN, **alignment_settings(align_params)},
    }


def ece_floor(confidence: np.ndarray, bins: int = 5, draws: int = 200, seed: int = 0) -> tuple[float, float]:
    """Mean and 95th percentile of the ECE of ``confidence`` if it were exactly calibrated.

    Each move is drawn real with probability its confidence; the ECE of a
    finite set of moves is positive even then (each bin's share real is a
    binomial estimate), so this is the yardstick for a measured ECE
    (common practice: a parametric null by simulation).
    """
    from tracker.longitudinal.confidence import reliability

    confidence = np.asarray(confidence, dtype=np.float64)
    if confidence.size == 0:
        return float("nan"), float("nan")
    rng = np.random.default_rng(seed)
    values = [reliability(confidence, rng.random(confidence.size) < confidence, bins)[1] for _ in range(draws)]
    return float(np.mean(values)), float(np.percentile(values, 95))


def _dynamic_check(store, info, sim, align_params, studies, seed):
    stored = store.fit_periods(info["id"])
    chain = _chain_of(stored, sim)
    learn, test = task_seeds(seed, 2)
    steps = align_params.get("confidence_map")
    if steps is None:
        runs = chain_studies(sim, chain, align_params, max(int(align_params.get("draws") or 0), studies), learn)
        steps = MoveCalibrator(monotone=True).fit(np.vstack([f for f, _ in runs]),
                                                  np.concatenate([r for _, r in runs])).steps()
    runs = chain_studies(sim, chain, align_params, studies, test)
    raw = np.concatenate([f[:, 0] for f, _ in runs]) if runs else np.zeros(0)
    real = np.concatenate([r for _, r in runs]) if runs else np.zeros(0, dtype=bool)
    return MoveCalibrator.apply_steps(steps, raw), real, len(runs)


def _cross_fitted(sim, moves, align_params, studies, seed):
    keep = moves["confidence"].fillna(1.0).to_numpy(dtype=np.float64) if len(moves) else np.zeros(0)
    runs = simulated_moves(sim, moves, keep, align_params, studies, seed)
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
    return conf, real
