r"""Evolutionary fitting: each period fitted by its own method, paying for change.

Fitting each period alone turns noise into false moves: in a sparse year an
actor's few ties can point anywhere.  Evolutionary clustering (Chakrabarti,
Kumar & Tomkins [1]_) fits period *t* by minimising the method's **own**
objective plus a history cost,

.. math::

    \text{cost}_t(z_t) \;=\; Q_t(z_t) \;+\; \lambda_t \, H(z_t, z_{t-1}),

in time order, each period given the partition found for the one before
(online, as in [1]_; an actor absent or tieless in between keeps its last
tied position as its history).  The method and its objective :math:`Q_t` are
never replaced: ``fit --method X`` stores X's partition.

=============  ==============================================  =====================================
method         objective :math:`Q_t` (the method's own)        history cost :math:`H`
=============  ==============================================  =====================================
structural     the linkage criterion on structural-            pairs apart before and placed
               equivalence dissimilarities (Ward: within-      together pay :math:`\lambda` in the
               position sum of squared distances)              dissimilarity (membership form, Chi
                                                               et al. [2]_)
concor         correlation split, :math:`\sum_{same} r -       :math:`\pm\lambda` on the first
               \sum_{apart} r`, iterated                       correlation of pairs together/apart
                                                               before
optimize       inconsistencies with ideal blocks               :math:`\lambda` per actor whose
               (Doreian, Batagelj & Ferligoj [3]_)             position differs from its previous
=============  ==============================================  =====================================

``regular`` is refused: REGE similarities are iterated over the neighbours'
similarities and their hierarchical clustering has no objective that a
per-change cost could be added to without redefining the method.  ``sbm``
is refused too: the statistical model over periods is a method of its own
name, not a smoothed per-period SBM.

**Unit of the penalty.**  The objectives have different units (squared
distances, correlations, cells), so the setting ``c`` is relative: the
absolute :math:`\lambda_t` is ``c`` times the period's per-actor objective
scale, computed from the method's unsmoothed partition of that period
(:func:`tracker.blockmodel.evolution.per_actor_scale` for structural: the
objective divided by the number of actors; the mean absolute correlation
for CONCOR; inconsistencies per tied actor for optimize).  ``c = 1`` means
one change costs as much as an average actor contributes to the objective,
so an actor changes position only when staying would make it fit worse than
the average actor fits.  The default, :data:`DEFAULT_PENALTY` ``= 0.5``, is
half that: on planted data (tests/helpers/planted.py, 90 actors, 3 cohesive
positions, densities 0.5/0.05, 9 movers, seeds 0-2) structural equivalence
found 23 of 27 planted moves among 54 reported with ``c = 0``, 23 among 27
with ``c = 0.5`` and 11 among 18 with ``c = 1``; with a dense core
(0.4/0.04) ``c = 0`` reported 137-174 moves per study, ``c = 0.5`` 4-10.
``c = 0`` calls the method exactly as without smoothing.

**Large periods.**  Above the exact limit of structural equivalence (8,000
tied actors, :data:`tracker.blockmodel.embedding.EXACT_LIMIT`) the penalty is
applied in the embedding of the profiles, with memory proportional to the ties
(:func:`tracker.blockmodel.embedding.smoothed_embedded_positions`), and the
period's diagnostics say so; CONCOR refuses periods above its own limit
(:data:`tracker.blockmodel.concor.SIZE_LIMIT`) with the alternatives.

References
----------
.. [1] Chakrabarti, D., Kumar, R. & Tomkins, A. (2006). Evolutionary clustering. KDD.
.. [2] Chi, Y., Song, X., Zhou, D., Hino, K. & Tseng, B. L. (2007). Evolutionary
   spectral clustering by incorporating temporal smoothness. KDD.
.. [3] Doreian, P., Batagelj, V. & Ferligoj, A. (2005). Generalized Blockmodeling.
   Cambridge University Press.
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np

from tracker.blockmodel.partition import Partition
from tracker.errors import UsageError

__all__ = ["DEFAULT_PENALTY", "OBJECTIVES", "smoothing_penalty", "evolutionary_partitions", "smoothed_fits"]

#: Default relative change penalty ``c`` (module docstring).
DEFAULT_PENALTY = 0.5

#: Methods that can be smoothed, and the objective the penalty is added to.
OBJECTIVES = {
    "structural": "linkage criterion on structural-equivalence dissimilarities (Ward: within-position "
                  "sum of squares) + c x per-actor objective for each pair joined against its history",
    "concor": "CONCOR correlation split with first correlations moved by +-c x mean |r| for pairs "
              "together/apart before",
    "optimize": "inconsistencies + c x (inconsistencies per tied actor) for each actor that changes position",
}


def smoothing_penalty(method: str, smoothing) -> float:
    """The relative penalty ``c`` that a fit with ``smoothing`` runs, or a usage error.

    ``"auto"`` is :data:`DEFAULT_PENALTY` for the methods of :data:`OBJECTIVES`
    and 0 (each period alone) for the others; a number above 0 for another
    method is refused rather than ignored.
    """
    if isinstance(smoothing, str):
        if smoothing != "auto":
            raise UsageError(f"--smooth takes auto, off or a number, not {smoothing!r}")
        return DEFAULT_PENALTY if method in OBJECTIVES else 0.0
    value = float(smoothing)
    if not value >= 0:
        raise UsageError("--smooth must be 0 or more")
    if value > 0 and method not in OBJECTIVES:
        raise UsageError(
            f"--smooth {value:g} cannot be honoured by method {method!r}: it has no objective to add a "
            f"change penalty to; smoothing is defined for {', '.join(OBJECTIVES)}. Use --smooth off"
        )
    return value


def evolutionary_partitions(
    matrices_per_period: Sequence[Sequence],
    directed: Sequence[bool],
    actors_per_period: Sequence[Sequence[str]],
    n_positions,
    *,
    method: str = "structural",
    change_penalty: float = DEFAULT_PENALTY,
    seed: int = 0,
    frozen: Sequence[Partition] = (),
    **options,
) -> list[Partition]:
    """Each period's partition by ``method``, with a cost per change from the period before.

    Parameters
    ----------
    matrices_per_period : sequence of sequences of scipy.sparse arrays
        For each period (in time order), one matrix per relation.
    directed : sequence of bool
    actors_per_period : sequence of sequences of str
        Each period's actors, in matrix order.
    n_positions : int or "auto"
        As for :func:`tracker.blockmodel.positions.find_positions`.
    method : str
        One of :data:`OBJECTIVES`.
    change_penalty : float
        ``c``, relative to the per-actor objective (module docstring); 0 fits
        each period alone with exactly the method's own call.
    seed : int
    frozen : sequence of Partition
        Partitions of the first ``len(frozen)`` periods to keep (an earlier fit
        extended by new periods); they are the history of the next period.
    **options
        Passed to ``find_positions`` (criterion, method options ...).

    Returns
    -------
    list of Partition
        One per period after the frozen ones; ``diagnostics["smoothing"]`` holds
        ``method``, ``objective``, ``penalty`` (c), ``unit`` and, where the
        method reports it, ``penalty_absolute`` (:math:`\\lambda_t`).
    """
    from tracker.blockmodel.positions import find_positions

    n_t = len(matrices_per_period)
    if len(actors_per_period) != n_t:
        raise UsageError("give one actor list per period")
    if len(frozen) > n_t:
        raise UsageError("more frozen partitions than periods")
    c = smoothing_penalty(method, float(change_penalty))
    history: dict[str, int] = {}
    out = []
    for t, (mats, actors) in enumerate(zip(matrices_per_period, actors_per_period)):
        actors = [str(a) for a in actors]
        if any(m.shape != (len(actors), len(actors)) for m in mats):
            raise UsageError(f"period {t + 1}: matrix size differs from the number of actors")
        prior = np.array([history.get(a, -1) for a in actors], dtype=np.int64)
        if t < len(frozen):
            part = frozen[t]
        else:
            part = _fit_period(find_positions, mats, directed, n_positions, method, c, seed, prior, options)
            out.append(part)
        labels = np.asarray(part.labels)
        for a, lab in zip(actors, labels):
            if part.isolates is None or lab != part.isolates:
                history[a] = int(lab)
    return out


def _fit_period(find_positions, mats, directed, n_positions, method, c, seed, prior, options) -> Partition:
    record = {"method": method, "objective": OBJECTIVES[method], "penalty": c,
              "unit": "x per-actor objective of the unsmoothed fit"}
    if c == 0 or not (prior >= 0).any():
        part = find_positions(mats, directed, n_positions, method=method, seed=seed, **options)
    elif method == "optimize":
        part = _optimize_period(find_positions, mats, directed, n_positions, c, seed, prior, options, record)
    else:
        part = find_positions(mats, directed, n_positions, method=method, seed=seed, prior_labels=prior,
                              change_penalty=c, **options)
    return Partition(part.labels, part.n_positions, part.isolates, {**part.diagnostics, "smoothing": record})


def _optimize_period(find_positions, mats, directed, n_positions, c, seed, prior, options, record) -> Partition:
    """optimize: lambda = c x inconsistencies per tied actor of the unsmoothed partition."""
    from tracker.blockmodel.optimize import partition_cost

    alone = find_positions(mats, directed, n_positions, method="optimize", seed=seed, **options)
    tied = np.ones(alone.labels.size, dtype=bool) if alone.isolates is None else alone.labels != alone.isolates
    k = alone.n_positions - (alone.isolates is not None)
    if tied.sum() < 2 or k < 1:
        return alone
    sub = [m[np.flatnonzero(tied)][:, np.flatnonzero(tied)] for m in mats]
    kinds = options.get("block_types", ("null", "complete"))
    scale = partition_cost(sub, directed, alone.labels[tied], k, block_types=kinds) / tied.sum()
    lam = c * max(scale, 1.0 / tied.sum())
    record["penalty_absolute"] = float(lam)
    fixed_k = k if isinstance(n_positions, str) else n_positions
    prior = np.where(prior < fixed_k, prior, -1)
    return find_positions(mats, directed, fixed_k, method="optimize", seed=seed, prior_labels=prior,
                          change_penalty=lam, **options)


def smoothed_fits(snapshots, settings, *, frozen: Sequence[Partition] = (),
                  progress: Callable[[str], None] | None = None) -> list:
    """Evolutionary fits of a run of snapshots, described like per-period fits.

    :func:`evolutionary_partitions` with ``settings.method`` and its options,
    ``c`` = :func:`smoothing_penalty` ``(settings.method, settings.smoothing)``,
    then each period described by
    :func:`tracker.blockmodel.fitting.fit_partition`.

    Parameters
    ----------
    snapshots : sequence of tracker.snapshot.Snapshot
        In time order, all with the same relations.
    settings : tracker.blockmodel.fitting.FitSettings
    frozen : sequence of Partition
        Stored partitions of the first ``len(frozen)`` snapshots, kept exactly.
    progress : callable, optional
        Called with each period's label once it is described.

    Returns
    -------
    list of tracker.blockmodel.fitting.PeriodFit
        One per snapshot after the frozen ones.
    """
    from tracker.blockmodel.fitting import fit_partition

    snapshots = list(snapshots)
    if not snapshots:
        return []
    names = [r.name for r in snapshots[0].relations]
    if any([r.name for r in snap.relations] != names for snap in snapshots):
        raise UsageError("the periods hold different relations; select the relations to fit together")
    c = smoothing_penalty(settings.method, settings.smoothing)
    parts = evolutionary_partitions(
        [s.matrices for s in snapshots], list(snapshots[0].directed), [s.actors for s in snapshots],
        settings.positions, method=settings.method, change_penalty=c, seed=settings.seed, frozen=list(frozen),
        criterion=settings.criterion, alpha=settings.alpha, cut=settings.cut,
        k_range=(settings.k_min, settings.k_max), **settings.options,
    )
    out = []
    for snap, part in zip(snapshots[len(frozen):], parts):
        out.append(fit_partition(snap, part, settings))
        if progress is not None:
            progress(snap.period)
    return out
