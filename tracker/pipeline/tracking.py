"""Tracking a fit: its periods' positions linked into tracks, moves and their confidence.

:func:`align_fit` reads a stored fit, aligns its periods (continuing a stored
alignment unless asked to rebuild), finds moves and their confidence, and
returns what the API stores.  The maths lives in :mod:`tracker.longitudinal`.
"""

from __future__ import annotations


import numpy as np
import pandas as pd

__all__ = ["align_fit", "dynamic_move_confidence", "reported_changes", "REPORT_THRESHOLD",
           "ALIGN_SETTINGS", "alignment_settings", "aligned_inputs", "stored_alignment", "move_confidence_of", "identity_alignment",
           "carry_track_ids", "track_names"]


def align_fit(store, info: dict, params: dict, *, rebuild: bool = False):
    """Alignment and moves of a stored fit: ``(alignment, moves, period order, periods already aligned)``.

    ``params`` are the alignment settings (``weight_overlap``,
    ``link_threshold``, ``split_threshold``, ``max_gap``, ``draws``, ``seed``,
    ``include_isolates``).
    """
    from tracker.errors import UsageError
    from tracker.longitudinal.align import align as align_positions
    from tracker.longitudinal.movement import moves as find_moves

    fit_id = info["id"]
    periods = aligned_inputs(store, fit_id)
    if not periods:
        raise UsageError(f"fit {fit_id} has no fitted periods; run roletrail fit first")
    from tracker.pipeline.fitting import is_dynamic

    joint = is_dynamic(info["params"])
    previous = None if rebuild or joint else stored_alignment(store, fit_id, [p.period for p in periods])
    done = 0 if previous is None else len(previous.periods)
    if joint:
        alignment = identity_alignment(periods)
    else:
        alignment = align_positions(periods, previous=previous, weight_overlap=params["weight_overlap"],
                                    link_threshold=params["link_threshold"],
                                    split_threshold=params["split_threshold"], max_gap=params["max_gap"])
    if rebuild and not joint:
        alignment = carry_track_ids(alignment, periods, store.track_positions(fit_id), store.memberships(fit_id))
    members = memberships_with_tracks(periods, alignment)
    order = [p.period for p in periods]
    moves = find_moves(members, order, ignore_tracks=() if params["include_isolates"] else (0,))
    moves = moves[["actor", "from_period", "to_period", "from_track", "to_track"]].copy()
    moves["confidence"] = np.nan
    if joint and len(moves):
        if params["draws"]:
            moves["confidence"] = move_confidence_of(store, info, periods, alignment, moves, params["draws"],
                                                     params["seed"], params)
        else:
            moves["confidence"] = dynamic_move_confidence(store.fit_periods(fit_id), moves)
    elif params["draws"] and len(moves):
        moves["confidence"] = move_confidence_of(store, info, periods, alignment, moves, params["draws"], params["seed"],
                                                 params)
    if joint:
        moves = reported_changes(moves, params)
    return alignment, moves, order, done


#: A dynamic fit reports a change only where its probability is at least this.
REPORT_THRESHOLD = 0.5

#: The settings of ``align`` kept in the stored alignment parameters; the other
#: stored keys are outcomes (:func:`reported_changes`).
ALIGN_SETTINGS = ("weight_overlap", "link_threshold", "split_threshold", "max_gap", "draws", "seed",
                  "include_isolates")


def alignment_settings(params: dict | None) -> dict:
    """The ``align`` settings among stored alignment parameters (outcomes such as the left-out changes dropped)."""
    return {k: v for k, v in (params or {}).items() if k in ALIGN_SETTINGS}


def reported_changes(moves: pd.DataFrame, params: dict) -> pd.DataFrame:
    """The moves a dynamic fit reports: those whose probability of a change is >= 0.5.

    Every change of the most probable position is a candidate; one whose
    confidence is below :data:`REPORT_THRESHOLD` is more likely noise than a
    move, so it is not reported (on sparse data this is what keeps move
    precision high).  The candidates left out are not hidden: their number
    and the list (``actor, from_period, to_period, from_track, to_track,
    confidence``) go into ``params`` (stored with the alignment, shown by
    ``roletrail alignment``-style readers as ``uncertain_changes``), and
    ``params["confidence"]`` says what the confidence is: calibrated on
    simulated studies (``draws > 0``) or the raw posterior, uncalibrated
    (``draws = 0``).  Moves without a confidence (NaN: legacy fits) are kept.
    """
    conf = moves["confidence"].to_numpy(dtype=np.float64)
    drop = np.isfinite(conf) & (conf < REPORT_THRESHOLD)
    studies = params.get("calibration_studies", max(int(params["draws"]), 2))
    params["confidence"] = (
        f"calibrated: posterior change probability mapped to the share of real moves on {studies} studies "
        "drawn from the fitted model and refitted (isotonic regression)" if params["draws"]
        else "raw posterior change probability of the dynamic model (mean-field, plug-in parameters), uncalibrated: "
             "no simulation was run (draws 0); it is over-confident on sparse data")
    params["report_threshold"] = REPORT_THRESHOLD
    dropped = moves[drop]
    params["uncertain_changes_count"] = int(drop.sum())
    params["uncertain_changes"] = [
        {"actor": str(r.actor), "from_period": str(r.from_period), "to_period": str(r.to_period),
         "from_track": int(r.from_track), "to_track": int(r.to_track), "confidence": round(float(r.confidence), 4)}
        for r in dropped.itertuples(index=False)]
    return moves[~drop].reset_index(drop=True)


def dynamic_move_confidence(fit_periods: pd.DataFrame, moves: pd.DataFrame) -> np.ndarray:
    """Confidence of each move of a dynamic fit: the posterior probability that the actor changed position.

    From the pairwise posterior of the actor's two consecutive presences,
    :math:`1 - \\sum_k q(z_s = k, z_t = k)` (kept by
    :func:`tracker.pipeline.fitting.fit_dynamic` as ``change_probability`` in
    the diagnostics of period ``t``), not the product of the two marginals,
    which ignores that the two positions are dependent.  Reported moves are
    the changes of the most probable position (marginal MAP) between
    consecutive presences; each carries the probability that a change really
    happened there, so among moves reported at confidence ``c`` a share ``c``
    is expected to be real.  Legacy joint fits without stored pairwise
    posteriors get NaN.
    """
    import json

    change = {}
    for period, diag in zip(fit_periods["period"], fit_periods["diagnostics"]):
        values = diag if isinstance(diag, dict) else json.loads(diag or "{}")
        change[period] = values.get("change_probability") or {}
    return np.array([change.get(t, {}).get(a, np.nan) for a, t in zip(moves["actor"], moves["to_period"])],
                    dtype=float)


def aligned_inputs(store, fit_id: int) -> list:
    from tracker.longitudinal.align import PeriodPositions

    members = store.memberships(fit_id)
    blocks = store.blocks(fit_id)
    fp = store.fit_periods(fit_id).set_index("period")
    out = []
    for period in [p for p in store.period_labels() if p in fp.index]:
        part = members[members["period"] == period]
        n_pos = int(fp.loc[period, "positions"])
        iso = fp.loc[period, "isolates_position"]
        iso = None if iso is None or pd.isna(iso) else int(iso) - 1
        b = blocks[blocks["period"] == period]
        rels = sorted(b["relation"].unique())
        density = np.zeros((len(rels), n_pos, n_pos))
        for r, rel in enumerate(rels):
            sub = b[b["relation"] == rel]
            density[r, sub["from_position"].to_numpy() - 1, sub["to_position"].to_numpy() - 1] = sub["density"].to_numpy()
        out.append(PeriodPositions(period, tuple(part["actor"]), part["position"].to_numpy() - 1, n_pos, iso, density))
    return out

def stored_alignment(store, fit_id: int, periods: list[str]):
    """The stored alignment of the longest prefix of ``periods`` that is still aligned, or None."""
    from tracker.longitudinal.align import Alignment, Link, TrackInfo

    positions = store.track_positions(fit_id)
    if positions.empty:
        return None
    aligned = set(positions["period"])
    prefix = []
    for p in periods:
        if p not in aligned:
            break
        prefix.append(p)
    if not prefix:
        return None
    inside = set(prefix)
    positions = positions[positions["period"].isin(inside)]
    assignment = {p: positions.loc[positions["period"] == p].sort_values("position")["track"].to_numpy(dtype=np.int64)
                  for p in prefix}
    rank = {p: i for i, p in enumerate(prefix)}
    tracks = {}
    for row in store.tracks(fit_id).itertuples(index=False):
        seen = [p for p in prefix if row.track in assignment[p]]
        if not seen:
            continue
        ended = row.ended if row.ended in inside else None
        tracks[int(row.track)] = TrackInfo(
            int(row.track), seen[0], seen[-1], None if pd.isna(row.parent) else int(row.parent),
            None if ended is None or pd.isna(row.merged_into) else int(row.merged_into), ended, bool(row.isolates),
        )
    links = []
    for l in store.track_links(fit_id).itertuples(index=False):
        if (l.to_period is not None and l.to_period not in inside) or (l.from_period is not None and l.from_period not in inside):
            continue
        links.append(Link(l.from_period, l.to_period, _int(l.from_track), _int(l.to_track),
                          None if _int(l.from_position) is None else _int(l.from_position) - 1,
                          None if _int(l.to_position) is None else _int(l.to_position) - 1,
                          _float(l.similarity), _float(l.overlap), _float(l.role_similarity), l.kind))
    links.sort(key=lambda l: rank.get(l.to_period or l.from_period, 0))
    return Alignment(tuple(prefix), dict(sorted(tracks.items())), assignment, links)

def move_confidence_of(store, info: dict, periods: list, alignment, moves: pd.DataFrame, draws: int, seed: int,
                       params: dict | None = None):
    """Probability that each move is real, learned on ``draws`` studies simulated from the fit.

    Parametric bootstrap from the fitted model, refitted with the fit's own
    procedure, then a calibration map (:mod:`tracker.pipeline.calibration`,
    :mod:`tracker.longitudinal.confidence`).
    """
    from tracker.pipeline.calibration import calibrated_confidence

    return calibrated_confidence(store, info, periods, alignment, moves, max(int(draws), 2), seed,
                                 align_params=params, record=params)


def _int(value):
    return None if value is None or pd.isna(value) else int(value)


def _float(value):
    return float("nan") if value is None or pd.isna(value) else float(value)


def track_names(tracks: pd.DataFrame) -> dict[int, str]:
    """track id -> display name (the user's name, "no ties" for track 0, else T<id>)."""
    return {
        int(t): (n if isinstance(n, str) and n else ("no ties" if iso else f"T{t}"))
        for t, n, iso in zip(tracks["track"], tracks["name"], tracks["isolates"])
    }


def identity_alignment(periods):
    """Tracks of a dynamic fit: position k is track k + 1 in every period; isolates track 0.

    A position empty in a period has no track there, so a track is born in the
    first period its position holds an actor and ends after the last.
    """
    from tracker.longitudinal.align import Alignment, Link, TrackInfo

    assignment, seen = {}, {}
    for pp in periods:
        sizes = np.bincount(pp.labels, minlength=pp.n_positions)
        track = np.where(sizes > 0, np.arange(pp.n_positions) + 1, -1)
        if pp.isolates is not None:
            track[pp.isolates] = 0 if sizes[pp.isolates] else -1
        assignment[pp.period] = track.astype(np.int64)
        for t in track[track >= 0]:
            seen.setdefault(int(t), []).append(pp.period)
    tracks = {t: TrackInfo(t, ps[0], ps[-1], isolates=(t == 0)) for t, ps in sorted(seen.items())}
    links = []
    for a, b in zip(periods, periods[1:]):
        common = set(assignment[a.period][assignment[a.period] > 0]) & set(assignment[b.period][assignment[b.period] > 0])
        for t in sorted(common):
            links.append(Link(a.period, b.period, int(t), int(t), int(np.flatnonzero(assignment[a.period] == t)[0]),
                              int(np.flatnonzero(assignment[b.period] == t)[0]), 1.0, float("nan"), float("nan"), "continue"))
    return Alignment(tuple(p.period for p in periods), tracks, assignment, links)


def memberships_with_tracks(periods, alignment) -> pd.DataFrame:
    from tracker.longitudinal.align import memberships

    return memberships(periods, alignment)


def carry_track_ids(alignment, periods, old_positions: pd.DataFrame, old_members: pd.DataFrame):
    """After a rebuild, give new tracks the ids (and so the names) of the old tracks they match best.

    Matching: maximum-weight one-to-one matching (Hungarian method) on the
    number of (period, actor) memberships two tracks share.
    """
    import dataclasses

    from tracker.longitudinal.align import Alignment, max_weight_matching

    if old_positions.empty:
        return alignment
    old = old_members.merge(old_positions, on=["period", "position"])
    new = memberships_with_tracks(periods, alignment)
    both = old.merge(new, on=["period", "actor"], suffixes=("_old", "_new"))
    both = both[(both["track_old"] > 0) & (both["track_new"] > 0)]
    if both.empty:
        return alignment
    table = both.groupby(["track_new", "track_old"]).size().unstack(fill_value=0)
    rows, cols = max_weight_matching(table.to_numpy())
    mapping = {int(table.index[r]): int(table.columns[c]) for r, c in zip(rows, cols) if table.to_numpy()[r, c] > 0}
    used = set(mapping.values())
    spare = (i for i in range(1, 10**9) if i not in used)
    for t in sorted(alignment.tracks):
        if t > 0 and t not in mapping:
            mapping[t] = next(spare)
    mapping[0] = 0
    remap = np.vectorize(lambda t: mapping.get(int(t), int(t)) if t >= 0 else int(t))
    tracks = {mapping[k]: dataclasses.replace(v, id=mapping[k],
                                              parent=None if v.parent is None else mapping[v.parent],
                                              merged_into=None if v.merged_into is None else mapping[v.merged_into])
              for k, v in alignment.tracks.items()}
    links = [dataclasses.replace(l, from_track=None if l.from_track is None else mapping[l.from_track],
                                 to_track=None if l.to_track is None else mapping[l.to_track]) for l in alignment.links]
    assignment = {p: remap(a).astype(np.int64) if a.size else a for p, a in alignment.assignment.items()}
    return Alignment(alignment.periods, dict(sorted(tracks.items())), assignment, links)
