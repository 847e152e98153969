"""Keeping fits, alignments and track names through a change of the data under them.

Re-cutting the periods or merging two actors changes the ties every stored
fit describes.  Nothing is dropped silently: :func:`fit_state` records what
the study holds (each fit's settings, alignment settings, memberships with
tracks, track names), :func:`loss_message` says exactly what a change would
drop, and :func:`refit_from` fits every recorded fit again on the new data
with its stored settings, aligns it again with its stored alignment
settings and carries the track names over by overlap
(:func:`tracker.longitudinal.carry.carry_names`).

Used by :meth:`tracker.api.Study.recut` and :meth:`tracker.api.Study.alias`;
it sits at the level of the API (it calls ``Study`` verbs).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from tracker.errors import RoletrailError

__all__ = ["FitRecord", "fit_state", "loss_message", "refit_from"]


@dataclass
class FitRecord:
    """One stored fit as it was before the change."""

    fit: int
    params: dict
    current: bool
    periods: list
    alignment: dict | None
    members: pd.DataFrame  # period, actor, position, track (track NA when not aligned)
    names: dict = field(default_factory=dict)  # track -> user's name
    moves: int = 0


def fit_state(study) -> list[FitRecord]:
    """Every stored fit with what a change of data could drop."""
    store = study.store
    out = []
    fits = store.fits()
    for fit_id, params, current in zip(fits["fit"], fits["params"], fits["current"]):
        import json

        fit_id = int(fit_id)
        members = study.memberships(fit_id)
        if "track" not in members:
            members = members.assign(track=pd.NA)
        tracks = store.tracks(fit_id)
        names = {int(t): n for t, n in zip(tracks["track"], tracks["name"]) if isinstance(n, str) and n}
        alignment = store.alignment_params(fit_id)
        out.append(FitRecord(fit_id, json.loads(params) if isinstance(params, str) else params, bool(current),
                             list(dict.fromkeys(members["period"])), alignment,
                             members[["period", "actor", "position", "track"]], names,
                             len(store.moves(fit_id)) if alignment else 0))
    return out


def loss_message(records: list[FitRecord], change: str, *, actor: str | None = None) -> str | None:
    """What ``change`` would drop, in one line with the two ways on; None when nothing would be lost.

    With ``actor``, only fits that place that actor count (an alias merge).
    """
    if actor is not None:
        records = [r for r in records if (r.members["actor"] == actor).any()]
    if not records:
        return None
    ids = ", ".join(str(r.fit) for r in records)
    aligned = [r for r in records if r.alignment]
    named = [(r.fit, n) for r in records for n in r.names.values()]
    parts = [f"{len(records)} fit(s) ({ids})"]
    if aligned:
        parts.append(f"{len(aligned)} alignment(s) with {sum(r.moves for r in aligned)} moves")
    if named:
        shown = ", ".join(f"{n!r} (fit {f})" for f, n in named[:5]) + (" ..." if len(named) > 5 else "")
        parts.append(f"{len(named)} named track(s): {shown}")
    if actor is not None:
        rows = sum(int((r.members["actor"] == actor).sum()) for r in records)
        what = f"{change} removes {rows} placements of {actor!r} and leaves " + "; ".join(parts) + " out of date"
    else:
        what = f"{change} drops " + "; ".join(parts)
    return (f"{what}. Add --refit to fit them again with their stored settings (track names carried over by "
            "overlap), or --force to go ahead without them")


def refit_from(study, records: list[FitRecord], *, actor_map: dict | None = None,
               old_periods: pd.DataFrame | None = None, same_fits: bool = False) -> list[dict]:
    """Fit each recorded fit again on the current data; align and carry names where it was aligned.

    ``actor_map`` renames old actor labels (a merged alias -> the actor kept);
    ``old_periods`` gives the old periods' ``label, start, end`` (after a
    re-cut); ``same_fits`` fits only the periods each fit had (the periods did
    not change).  Returns one dict per fit: ``old``, ``new`` (or None),
    ``names`` carried, ``lost`` names, ``error`` (why it could not be refitted).
    """
    from tracker.longitudinal.carry import carry_names
    from tracker.pipeline.fitting import is_dynamic

    new_periods = study.store.periods()
    old_periods = new_periods if old_periods is None else old_periods
    report, current = [], None
    for record in sorted(records, key=lambda r: r.current):  # the current fit last, so it stays current
        p = record.params
        auto = p["positions"] == "auto"
        options = dict(p.get("options") or {})
        entry = {"old": record.fit, "new": None, "names": {}, "lost": list(record.names.values()), "error": None}
        try:
            periods = [x for x in record.periods if x in set(new_periods["label"])] if same_fits else None
            result = study.fit(
                method=p["method"], positions=p["positions"], criterion=p["criterion"], alpha=p.get("alpha"),
                cut=p.get("cut"), seed=p["seed"], periods=periods or None, relations=p.get("relations"),
                draws=p.get("draws", 99), k_min=p.get("k_min") if auto else None,
                k_max=p.get("k_max") if auto else None, options=options,
                smoothing=None if p["method"] == "regular" or is_dynamic(p) else p.get("smoothing", "auto"),
            )
            entry["new"] = result["fit"]
            if record.alignment:
                a = record.alignment
                study.align(fit=result["fit"], weight_overlap=a.get("weight_overlap", 0.5),
                            link_threshold=a.get("link_threshold", 0.2), split_threshold=a.get("split_threshold", 0.3),
                            max_gap=a.get("max_gap", 0), draws=a.get("draws", 0), seed=a.get("seed"),
                            rebuild=True, include_isolates=a.get("include_isolates", False))
                old = record.members.copy()
                if actor_map:
                    old["actor"] = old["actor"].replace(actor_map)
                new = study.memberships(result["fit"])
                carried, lost = carry_names(old, new, record.names, old_periods, new_periods)
                study.store.set_track_names(result["fit"], carried)
                entry["names"], entry["lost"] = carried, lost
        except RoletrailError as exc:
            entry["error"] = str(exc)
        if record.current and entry["new"] is not None:
            current = entry["new"]
        report.append(entry)
    if current is not None:
        study.use_fit(current)
    return sorted(report, key=lambda e: e["old"])
