"""Fitting a study: the fit procedure of every period, from snapshots to stored-ready results.

The API (:meth:`tracker.api.Study.fit`) builds one
:class:`tracker.blockmodel.fitting.FitSettings`, and :func:`run_fit` chooses
how the periods are fitted: one joint dynamic model, smoothed across periods,
or each period alone.  Functions here read from the store and call pure
maths; they never write (the API stores the result).
"""

from __future__ import annotations

import json
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from tracker.errors import UsageError

__all__ = ["run_fit", "fit_snapshots", "fit_joint", "frozen_prefix", "period_selection"]


def run_fit(store, settings, labels: list[str], progress: Callable[[str], None] | None = None) -> list:
    """Per-period results (:class:`tracker.blockmodel.fitting.PeriodFit`) of ``settings`` on periods ``labels``."""
    if settings.options.get("joint"):
        return fit_snapshots(list(store.snapshots(labels, settings.relations)), settings, progress=progress)
    frozen_periods, frozen = [], []
    if _smoothed(settings) and len(store.period_labels()) > 1:
        frozen_periods, frozen = frozen_prefix(store, settings, labels)
    snaps = list(store.snapshots(frozen_periods + labels, settings.relations))
    return fit_snapshots(snaps, settings, frozen=frozen, progress=progress)


def fit_snapshots(snapshots: list, settings, *, frozen: Sequence = (),
                  progress: Callable[[str], None] | None = None) -> list:
    """The fit procedure of ``settings`` on snapshots (no store): joint, evolutionary, or each period alone.

    Used by :func:`run_fit` and by the calibration check, which refits
    simulated studies with exactly the procedure of the stored fit.
    ``frozen`` partitions keep the first snapshots as stored (evolutionary fits only).
    """
    from tracker.blockmodel.fitting import fit_snapshot
    from tracker.longitudinal.smoothing import smoothed_fits, smoothing_penalty

    if settings.options.get("joint"):
        results = fit_joint(list(snapshots), settings)
        if progress is not None:
            for snap in snapshots:
                progress(snap.period)
        return results
    if _smoothed(settings) and len(snapshots) > 1:
        return smoothed_fits(snapshots, settings, frozen=frozen, progress=progress)
    c = smoothing_penalty(settings.method, settings.smoothing)
    results = []
    for snap in snapshots:
        result = fit_snapshot(snap, settings)
        result.diagnostics["smoothing"] = {"method": settings.method, "penalty": c,
                                           "note": "each period fitted alone"}
        results.append(result)
        if progress is not None:
            progress(snap.period)
    return results


def _smoothed(settings) -> bool:
    from tracker.longitudinal.smoothing import smoothing_penalty

    return not settings.options.get("joint") and smoothing_penalty(settings.method, settings.smoothing) > 0


def fit_joint(snapshots: list, settings) -> list:
    """One dynamic SBM over all periods (Matias & Miele 2017; Xu & Hero 2014).

    Position k means the same in every period (block parameters are shared),
    so position numbers are kept as fitted rather than re-ordered by size, and
    each actor's membership carries its posterior probability.  Only actors
    with ties in a period enter the model there; the period's tieless actors
    take the isolates' position as with every method.
    """
    import dataclasses

    from tracker.blockmodel.fitting import fit_partition
    from tracker.blockmodel.partition import Partition
    from tracker.blockmodel.sbm_dynamic import DynamicSBM

    if settings.method != "sbm":
        raise UsageError("a joint fit over all periods is a dynamic SBM: use --method sbm with --joint")
    if settings.positions == "auto":
        raise UsageError("--joint needs a fixed number of positions (--positions K)")
    if not isinstance(settings.smoothing, str) and settings.smoothing > 0:
        raise UsageError("--joint already links periods through its Markov chain; drop --smooth")
    k = int(settings.positions)
    opts = {key: value for key, value in settings.options.items()
            if key in ("model", "degree_corrected", "restarts", "max_iter", "tol")}
    data, tied_index = [], []
    for snap in snapshots:
        idx = np.flatnonzero(snap.tied())
        tied_index.append(idx)
        data.append(([snap.actors[i] for i in idx], [m[idx][:, idx] for m in snap.matrices], snap.directed))
    model = DynamicSBM(k, seed=settings.seed, **opts).fit(data)
    results = []
    for t, snap in enumerate(snapshots):
        idx = tied_index[t]
        has_isolates = idx.size < snap.n
        labels = np.full(snap.n, k, dtype=np.int64)
        confidence = np.full(snap.n, np.nan)
        if idx.size:
            labels[idx] = model.labels_[t]
            confidence[idx] = model.posteriors_[t].max(axis=1)
        diagnostics = {"method": "sbm", "joint": True, "criterion": settings.criterion,
                       "elbo": float(model.elbo_), "transition": np.round(model.transition_, 4).tolist()}
        part = Partition(labels, k + (1 if has_isolates else 0), k if has_isolates else None, diagnostics)
        results.append(dataclasses.replace(fit_partition(snap, part, settings), confidence=confidence))
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
