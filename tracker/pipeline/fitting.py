"""Fitting a study: the fit procedure of every period, from snapshots to stored-ready results.

The API (:meth:`tracker.api.Study.fit`) builds one
:class:`tracker.blockmodel.fitting.FitSettings`, and :func:`run_fit` chooses
how the periods are fitted: one dynamic model over all periods, smoothed across periods,
or each period alone.  Functions here read from the store and call pure
maths; they never write (the API stores the result).
"""

from __future__ import annotations

import json
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from tracker.errors import UsageError

__all__ = ["run_fit", "fit_snapshots", "deprecated_joint", "fit_dynamic", "is_dynamic", "check_dynamic", "frozen_prefix",
           "period_selection", "with_fit_tests", "with_q_values"]


def deprecated_joint(method: str, options: dict) -> tuple[str, dict, str | None]:
    """``(method, options, warning)``: the old ``joint`` option becomes the ``dynamic`` method."""
    if not options.get("joint"):
        return method, options, None
    if method not in ("sbm", DYNAMIC):
        raise UsageError(f"--joint was the dynamic blockmodel, not a {method} fit; use --method dynamic")
    rest = {k: v for k, v in options.items() if k != "joint"}
    return DYNAMIC, rest, "--joint is deprecated: it is now its own method; use --method dynamic"


def run_fit(store, settings, labels: list[str], progress: Callable[[str], None] | None = None) -> list:
    """Per-period results (:class:`tracker.blockmodel.fitting.PeriodFit`) of ``settings`` on periods ``labels``.

    The fit procedure itself is :func:`fit_snapshots` (no store); here the
    periods are read, an evolutionary fit continues from the stored earlier
    periods of the same fit, and each period's fit test is added
    (:func:`with_fit_tests`).  ``progress`` is called once per fitted
    period; the configured reporter (the command line's bar) follows the
    same count.
    """
    tick = _period_ticks(labels, progress)
    if is_dynamic(settings):
        if list(labels) != store.period_labels():
            raise UsageError("the dynamic model fits all periods together (a position is the same in every "
                             "period); drop --periods, or choose a per-period method such as --method structural")
        results = fit_snapshots(list(store.snapshots(labels, settings.relations)), settings, progress=tick)
    else:
        frozen_periods, frozen = [], []
        if _smoothed(settings) and len(store.period_labels()) > 1:
            frozen_periods, frozen = frozen_prefix(store, settings, labels)
        snaps = list(store.snapshots(frozen_periods + labels, settings.relations))
        results = fit_snapshots(snaps, settings, frozen=frozen, progress=tick)
    return with_fit_tests(store, settings, results)


def fit_snapshots(snapshots: list, settings, *, frozen: Sequence = (),
                  progress: Callable[[str], None] | None = None) -> list:
    """The fit procedure of ``settings`` on snapshots (no store): dynamic, evolutionary, or each period alone.

    Used by :func:`run_fit` and by the calibration check, which refits
    simulated studies with exactly the procedure of the stored fit.
    ``frozen`` partitions keep the first snapshots as stored (evolutionary
    fits only).  Periods fitted alone are independent tasks
    (:func:`tracker.execution.map_tasks`: every core, or a Dask cluster);
    each uses the fit's own seed, so the result does not depend on where or
    in what order they run.
    """
    from tracker.blockmodel.fitting import fit_snapshot
    from tracker.execution import map_tasks
    from tracker.longitudinal.smoothing import smoothed_fits, smoothing_penalty

    snapshots = list(snapshots)
    if is_dynamic(settings):
        results = fit_dynamic(snapshots, settings)
        if progress is not None:
            for snap in snapshots:
                progress(snap.period)
        return results
    if _smoothed(settings) and len(snapshots) > 1:
        return smoothed_fits(snapshots, settings, frozen=frozen, progress=progress)
    c = smoothing_penalty(settings.method, settings.smoothing)
    results = map_tasks(fit_snapshot, [(snap, settings) for snap in snapshots],
                        progress=None if progress is None else (lambda done, _total: progress(snapshots[done - 1].period)))
    for result in results:
        result.diagnostics["smoothing"] = {"method": settings.method, "penalty": c, "note": "each period fitted alone"}
    return results


def _smoothed(settings) -> bool:
    from tracker.longitudinal.smoothing import smoothing_penalty

    return not is_dynamic(settings) and smoothing_penalty(settings.method, settings.smoothing) > 0


#: Most tied actors in a period for which the fit test of a dynamic fit refits its
#: stochastic blockmodel from five starts; above it one start (the spectral one).
#: Measured on the scaling benchmark's generator at 20,000 actors (one period,
#: 2-core machine under load): five starts 33 s on the data and 52 s on a null
#: draw, one start 7 s and 21 s, with the same statistic on both.
ONE_START_LIMIT = 8000


def with_fit_tests(store, settings, results: list) -> list:
    """The results with ``p_value``/``draws``/``null_model`` of the fit test (:mod:`tracker.inference.fit_test`).

    Every period is refitted alone by the single-period procedure of
    ``settings`` (method, positions or ``auto`` with its range, options,
    seed) on the data and on ``settings.draws`` null draws; all refits of all
    periods go to one :func:`tracker.execution.map_tasks` batch.  With
    smoothing or the dynamic model, the stored partition links periods, but
    the test is of the period alone: whether this period's ties hold positions
    that the same method (for the dynamic model: the period's stochastic
    blockmodel, the same likelihood on one period) does not find in networks
    without them.  That blockmodel is refitted from five starts, or from one
    (the spectral start) when a period has more than :data:`ONE_START_LIMIT`
    tied actors and no ``restarts`` option is given; the data and the draws
    are always refitted alike, so the p-value stays that of a valid Monte Carlo
    test, and the fit's notes say so.
    """
    import dataclasses

    from tracker.inference.fit_test import Procedure, fit_tests, period_seed

    if not settings.draws or not results:
        return results
    method = settings.method
    options = {k: v for k, v in settings.options.items() if k != "joint"}
    if is_dynamic(settings):
        # The dynamic model restricted to one period is the period's stochastic blockmodel.
        method = "sbm"
        options = {k: v for k, v in options.items() if k in ("model", "degree_corrected", "restarts")}
    procedure = Procedure(method=method, positions=settings.positions, seed=settings.seed,
                          criterion=settings.criterion, alpha=settings.alpha, cut=settings.cut,
                          k_range=(settings.k_min, settings.k_max), options=options)
    wanted = [r.period for r in results]
    snaps = {s.period: s for s in store.snapshots(wanted, settings.relations)}
    note = None
    if method == "sbm" and "restarts" not in options:
        largest = max(int(s.tied().sum()) for s in snaps.values())
        if largest > ONE_START_LIMIT:
            options = {**options, "restarts": 1}
            note = (f"fit test: periods of up to {largest:,} tied actors exceed {ONE_START_LIMIT:,}, so the data and "
                    "every null draw are refitted from one (spectral) start instead of five; the test stays exact "
                    "(the same procedure on both); pass --restarts to choose")
        procedure = dataclasses.replace(procedure, options=options)
    tests = fit_tests([(snaps[p].matrices, snaps[p].directed, period_seed(settings.seed, p)) for p in wanted],
                      procedure, draws=settings.draws, null=settings.null_model)
    out = []
    for result, test in zip(results, tests):
        diagnostics = {**result.diagnostics, "fit_test": {**test.summary(), **({"note": note} if note else {})}}
        p_value = None if not np.isfinite(test.p_value) else float(test.p_value)
        out.append(dataclasses.replace(result, p_value=p_value, draws=test.draws, null_model=test.null_model,
                                       diagnostics=diagnostics))
    return out


def with_q_values(frame: pd.DataFrame) -> pd.DataFrame:
    """A fit-period table with ``q_value``: Benjamini-Hochberg over the periods' fit-test p-values."""
    from tracker.inference.fit_test import benjamini_hochberg

    frame = frame.copy()
    p = pd.to_numeric(frame["p_value"], errors="coerce").to_numpy(dtype=float) if len(frame) else np.zeros(0)
    q = benjamini_hochberg(p)
    at = list(frame.columns).index("p_value") + 1
    frame.insert(at, "q_value", q)
    return frame


def _period_ticks(labels: list[str], progress: Callable[[str], None] | None) -> Callable[[str], None]:
    """One callback per fitted period: the caller's ``progress`` and the configured bar."""
    from tracker.execution import step_progress

    bar = step_progress("fitting periods", len(labels))
    count = [0]

    def tick(period: str) -> None:
        count[0] += 1
        if bar is not None:
            bar(min(count[0], len(labels)), len(labels))
        if progress is not None:
            progress(period)

    return tick


DYNAMIC = "dynamic"
# options of the dynamic model, and the ones it refuses (with what to do instead)
_DYNAMIC_OPTIONS = ("model", "degree_corrected", "restarts", "max_iter", "tol", "births")


def is_dynamic(settings_or_params) -> bool:
    """Whether a fit (its settings, or its stored params) is the dynamic blockmodel.

    Fits stored before the method had its own name were ``method="sbm"`` with
    the ``joint`` option.
    """
    if isinstance(settings_or_params, dict):
        method, options = settings_or_params.get("method"), settings_or_params.get("options") or {}
    else:
        method, options = settings_or_params.method, settings_or_params.options
    return method == DYNAMIC or bool(options.get("joint"))


def check_dynamic(settings) -> None:
    """Refuse, with the fix, every setting the dynamic model would not honour."""
    if not isinstance(settings.smoothing, str) and float(settings.smoothing) > 0:
        raise UsageError("the dynamic model links periods through its Markov chain; drop --smooth "
                         "(or choose a descriptive method to smooth)")
    unknown = sorted(set(settings.options) - set(_DYNAMIC_OPTIONS) - {"joint"})
    if unknown:
        raise UsageError(f"the dynamic model has no option {unknown[0]!r}; its options are --model, "
                         "--degree-corrected and --restarts")
    if settings.options.get("degree_corrected") and settings.options.get("model", "poisson") != "poisson":
        raise UsageError("degree correction is defined for counts only; use --model poisson with --degree-corrected")


def fit_dynamic(snapshots: list, settings) -> list:
    """One dynamic blockmodel over all periods (Matias & Miele 2017; Xu & Hero 2014).

    Every actor present in a period enters the model there, with or without
    ties (no ties is evidence); absent actors emit nothing and their chain
    continues.  Position ``k`` means the same in every period (block
    parameters are shared), so positions keep their fitted numbers and may be
    empty in some periods: a position is born in the first period it holds an
    actor and ends after the last.  ``positions="auto"`` chooses ``K`` by ICL
    over ``k_min .. k_max`` (:func:`tracker.models.dynamic.select_dynamic`).
    Each membership carries its marginal posterior probability; each actor's
    probability of having changed position since its previous presence (from
    the pairwise posterior) is kept in the period's diagnostics
    (``change_probability``) for the moves' confidence.
    """
    import dataclasses

    from tracker.blockmodel.fitting import fit_partition
    from tracker.blockmodel.partition import Partition
    from tracker.models.dynamic import DynamicSBM, select_dynamic

    check_dynamic(settings)
    opts = {key: value for key, value in settings.options.items() if key in _DYNAMIC_OPTIONS}
    data = [(list(snap.actors), list(snap.matrices), snap.directed) for snap in snapshots]
    try:
        if settings.positions == "auto":
            model, table = select_dynamic(data, (settings.k_min, settings.k_max), seed=settings.seed, **opts)
        else:
            k = min(int(settings.positions), len({a for snap in snapshots for a in snap.actors}))
            model, table = DynamicSBM(k, seed=settings.seed, **opts).fit(data), None
    except ValueError as exc:
        raise UsageError(f"the dynamic model cannot be fitted: {exc}") from exc
    k = model.n_positions
    ran = {"method": DYNAMIC, "model": opts.get("model", "poisson"),
           "degree_corrected": bool(opts.get("degree_corrected", False)), "n_positions": k,
           "criterion": settings.criterion, "elbo": float(model.elbo_), "icl": float(model.icl_),
           "transition": np.round(model.transition_, 4).tolist(), "initial": np.round(model.initial_, 4).tolist(),
           "rates": np.asarray(model.rates_, dtype=float).round(8).tolist(),  # drawn from by the confidence map
           # the Dirichlet prior on the transition rows as it ran (strength, and centre: the pooled move rate)
           "transition_prior": float(model.prior_strength_),
           "move_rate": None if np.isnan(model.move_rate_) else round(float(model.move_rate_), 6)}
    if table is not None:
        # The per-K table in the shape every --positions auto table has (tracker.views.auto_table).
        ran["auto"] = [{"k": int(row["n_positions"]), "icl": float(row["icl"]), "elbo": float(row["elbo"]),
                        "chosen": bool(row["chosen"])} for row in table]
        ran["auto_rule"] = "the highest ICL of the dynamic model over all periods together"
    results = []
    for t, snap in enumerate(snapshots):
        change = model.change_probability_[t]
        diagnostics = dict(ran, change_probability={a: float(round(p, 6)) for a, p in zip(snap.actors, change)
                                                    if np.isfinite(p)})
        part = Partition(model.labels_[t], k, None, diagnostics)
        results.append(dataclasses.replace(fit_partition(snap, part, settings),
                                           confidence=model.posteriors_[t].max(axis=1)))
    return results


def frozen_prefix(store, settings, labels: list[str]) -> tuple[list[str], list]:
    """Stored periods of the same fit that come before ``labels``, as partitions to keep.

    Only when every study period before the first requested one is stored;
    otherwise those periods are simply refitted with the rest.
    """
    from tracker.blockmodel.partition import Partition

    known = store.period_labels()
    before = known[: known.index(labels[0])]
    if not before:
        return [], []
    fits = store.fits()
    same = [int(f) for f, p in zip(fits["fit"], fits["params"]) if json.loads(p) == settings.as_dict()]
    if not same:
        labels[:0] = [p for p in before if p not in labels]
        return [], []
    fit_id = same[-1]
    fp = store.fit_periods(fit_id).set_index("period")
    if not all(p in fp.index for p in before):
        labels[:0] = [p for p in before if p not in labels]
        return [], []
    members = store.memberships(fit_id)
    frozen = []
    for period in before:
        part = members[members["period"] == period]
        snap_actors = store.snapshot(period, settings.relations).actors
        if tuple(part["actor"]) != tuple(snap_actors):
            labels[:0] = [p for p in before if p not in labels]
            return [], []
        iso = fp.loc[period, "isolates_position"]
        frozen.append(Partition(part["position"].to_numpy() - 1, int(fp.loc[period, "positions"]),
                                None if iso is None or pd.isna(iso) else int(iso) - 1))
    return before, frozen

def period_selection(store, periods: Sequence[str] | None) -> list[str]:
    known = store.period_labels()
    if not known:
        raise UsageError("this study has no periods yet; import events first (roletrail import FILE ...)")
    if not periods:
        return known
    wanted = [str(p) for p in periods]
    missing = [p for p in wanted if p not in known]
    if missing:
        shown = ", ".join(known[:8]) + (" ..." if len(known) > 8 else "")
        raise UsageError(f"no period {missing[0]!r} in this study; the periods are {shown}")
    return [p for p in known if p in wanted]
