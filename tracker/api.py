"""The Python API: a :class:`Study` has the same verbs as the ``roletrail`` command.

>>> from tracker.api import Study                       # doctest: +SKIP
>>> study = Study("alliances.db")                       # doctest: +SKIP
>>> study.import_events("events.csv", source="from_org", target="to_org",
...                     date="event_date", relation="kind")  # doctest: +SKIP
>>> study.summary()                                     # doctest: +SKIP

Everything the command line does goes through here; the CLI only parses
options and prints.
"""

from __future__ import annotations

import functools
import os
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from tracker.errors import InputError, UsageError
from tracker.ingest.events import EventMapping
from tracker.ingest.periods import PeriodScheme, parse_scheme
from tracker.ingest.reader import file_hash, open_table
from tracker.ingest.roster import validate_roster
from tracker.measures import network_measures
from tracker.pipeline.fitting import period_selection, with_q_values
from tracker.pipeline.tracking import track_names
from tracker.snapshot import Snapshot
from tracker.store.database import open_engine, resolve_url, sqlite_path, upgrade
from tracker.store.repository import ImportReport, Store

__all__ = ["Study"]

Progress = Callable[[int, int], None]


def _computing(verb):
    """Run ``verb`` under the study's execution settings (workers, scheduler), else the caller's."""

    @functools.wraps(verb)
    def wrapper(self, *args, **kwargs):
        from tracker.execution import overriding

        with overriding(workers=self.workers, scheduler=self.scheduler):
            return verb(self, *args, **kwargs)

    return wrapper


class Study:
    """A study: one database of events, periods, fits and tracks.

    Parameters
    ----------
    db : str or path, optional
        SQLite file path or SQLAlchemy URL; default ``$ROLETRAIL_DB`` or
        ``roletrail.db`` in the current folder.
    create : bool
        Create the study if it does not exist (otherwise a missing SQLite file
        is an error).  Opening a study made by an older roletrail upgrades its
        schema in place, keeping its data.
    workers : int, optional
        Most local processes for fits, refits and tests (default: every core;
        1 = this process only); a batch of tasks too small to gain from a pool
        runs in this process (:func:`tracker.execution.pool_pays`).  *How* to
        compute never changes *what* is computed: the same seed gives the same
        stored results for any number.
    scheduler : str, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``; default
        ``$ROLETRAIL_SCHEDULER``): the same tasks run on its workers instead.
    """

    def __init__(self, db: str | os.PathLike | None = None, *, create: bool = True,
                 workers: int | None = None, scheduler: str | None = None) -> None:
        self.workers = workers
        self.scheduler = scheduler
        self.url = resolve_url(db)
        self.engine = open_engine(self.url, must_exist=not create)
        if not create and sqlite_path(self.url) is None:
            from sqlalchemy import inspect

            if "alembic_version" not in inspect(self.engine).get_table_names():
                raise UsageError(f"no study in {self.engine.url.render_as_string(hide_password=True)}; "
                                 "import data first (roletrail import FILE ...)")
        upgrade(self.engine)
        self.store = Store(self.engine)

    @property
    def path(self) -> Path | None:
        """The SQLite file of the study (None for other back ends)."""
        return sqlite_path(self.url)

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> "Study":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ import
    def import_events(
        self,
        path: str | os.PathLike,
        *,
        source: str,
        target: str,
        date: str | None = None,
        period_column: str | None = None,
        period: str = "year",
        period_origin: int = 0,
        relation: str | None = None,
        relation_name: str | None = None,
        weight: str | None = None,
        undirected: bool = False,
        date_format: str | Sequence[str] | None = None,
        delimiter: str | None = None,
        replace: bool = False,
        progress: Progress | None = None,
        errors_file: str | os.PathLike | None = None,
        drop_duplicates: bool = False,
        memory_limit: str = "1GB",
    ) -> ImportReport:
        """Import a file of dyadic events (CSV, Parquet or Excel .xlsx) as one batch.

        One row per event: source, target, a date (cut into periods by
        ``period``: ``year``, ``quarter``, ``month`` or ``Ny``) or a period
        label (``period_column``), a relation (column or fixed name) and an
        optional weight.  ``date_format`` may list several formats, tried in
        turn (``iso`` stands for ISO dates and bare years).  Names are
        normalised (NFC, trimmed, inner whitespace collapsed).

        The import is one transaction: on any error nothing is written, and
        the error names the file, the editor line (header = line 1), the
        column, the value and the fix.  With ``errors_file`` every bad row is
        written there (line, column, value, problem, fix) and the other rows
        are imported.  Self-ties are dropped and counted; rows repeating an
        earlier row or an event already in the study are counted
        (``duplicates_in_file``, ``duplicates_in_study``) and left out with
        ``drop_duplicates``.  Importing the same content twice is refused
        unless ``replace`` (which swaps the earlier batch, or the latest batch
        of the same file name, atomically).

        ``path`` may also be a folder or a glob pattern of CSV or Parquet
        files: they are aggregated to one row per pair, relation and period
        with DuckDB in bounded memory (``memory_limit``) before the store sees
        them (see :func:`tracker.ingest.folder.aggregate_files`).
        """
        from tracker.ingest.columns import ArrowFallback, place_error
        from tracker.ingest.load import event_blocks, write_rejected

        if date_format is not None and not isinstance(date_format, str):
            date_format = tuple(date_format) or None
        mapping = EventMapping(
            source=source, target=target, date=date, period_column=period_column,
            period=period, period_origin=period_origin, relation=relation,
            relation_name=relation_name, weight=weight, undirected=undirected,
            date_format=date_format, delimiter=delimiter,
        )
        scheme = PeriodScheme("column") if period_column else parse_scheme(period, period_origin)
        from tracker.ingest.folder import is_many

        if is_many(path):
            return self._import_many(path, mapping, scheme, replace=replace, progress=progress,
                                     drop_duplicates=drop_duplicates, memory_limit=memory_limit,
                                     errors_file=errors_file)
        table = open_table(path, delimiter=delimiter)
        table.require(mapping.columns())
        digest = file_hash(table.path)
        rejected: list = []
        collect = rejected if errors_file is not None else None

        def load(arrow: bool) -> ImportReport:
            rejected.clear()
            blocks = event_blocks(table, mapping, scheme, arrow=arrow, collect=collect, progress=progress)
            return self.store.import_events(
                file_name=table.name, content_hash=digest, mapping=mapping.as_dict(), scheme=scheme,
                directed=not undirected, blocks=blocks, replace=replace, drop_duplicates=drop_duplicates,
            )

        try:
            try:
                report = load(arrow=True)
            except ArrowFallback:
                report = load(arrow=False)
        except InputError as exc:
            raise place_error(table, exc) from None
        finally:
            if errors_file is not None:
                write_rejected(errors_file, table, rejected)
        report["errors_file"] = None if errors_file is None else str(errors_file)
        return report

    def _import_many(self, path, mapping: EventMapping, scheme: PeriodScheme, *, replace: bool, progress,
                     drop_duplicates: bool, memory_limit: str, errors_file) -> ImportReport:
        """A folder or glob of files, aggregated per pair, relation and period with DuckDB (see :meth:`import_events`)."""
        from tracker.ingest.folder import aggregate_files, files_hash, list_files

        if errors_file is not None or drop_duplicates:
            raise UsageError("--errors report and --duplicates drop work on one file; a folder is imported whole "
                             "(import its files one by one to use them)")
        files = list_files(path)
        blocks = aggregate_files(files, mapping, scheme, delimiter=mapping.delimiter, memory_limit=memory_limit)
        report = self.store.import_events(
            file_name=str(path), content_hash=files_hash(files), mapping={**mapping.as_dict(), "files": len(files), "aggregated": True},
            scheme=scheme, directed=not mapping.undirected, blocks=blocks, replace=replace,
        )
        report["files"] = len(files)
        report["errors_file"] = None
        return report

    def import_actors(
        self,
        path: str | os.PathLike,
        *,
        actor: str = "actor",
        first: str | None = None,
        last: str | None = None,
        delimiter: str | None = None,
        replace: bool = False,
    ) -> ImportReport:
        """Import a roster: one row per actor, optional first/last period present, other columns as attributes."""
        table = open_table(path, delimiter=delimiter)
        table.require({"--actor": actor, "--first": first, "--last": last})
        frames = [frame for _, frame in table.chunks()]
        if not frames:
            raise UsageError(f"{table.name}: has a header but no data rows; nothing was imported")
        frame = pd.concat(frames)
        from tracker.ingest.columns import place_error

        try:
            roster = validate_roster(frame, actor=actor, first=first, last=last, scheme=self.store.period_scheme(), file=table.name)
        except InputError as exc:
            raise place_error(table, exc) from None
        mapping = {"actor": actor, "first": first, "last": last, "delimiter": delimiter}
        return self.store.import_roster(
            file_name=table.name, content_hash=file_hash(table.path), mapping=mapping, roster=roster, replace=replace
        )

    def alias(self, alias: str, actor: str, *, refit: bool = False, force: bool = False) -> dict:
        """Make ``alias`` another name of ``actor`` (merging them if both exist).

        A merge changes the ties of every period the merged actor was in, so
        fits that place it would silently go out of date: unless ``refit``
        (fit them again with their stored settings, re-align, carry track
        names over; see :mod:`tracker.keeping`) or ``force``, such a merge is
        refused with a UsageError that lists what would be lost.  The result
        gains ``refits`` (one entry per fit refitted).
        """
        from tracker.keeping import fit_state, loss_message, refit_from

        known = self.store.actors()
        label_of = {}
        for label, others in zip(known["actor"], known["aliases"]):
            label_of[label] = label
            label_of.update({o: label for o in str(others or "").split("; ") if o})
        merged, kept = label_of.get(alias.strip()), label_of.get(actor.strip())
        records = []
        if merged is not None and kept is not None and merged != kept:
            records = [r for r in fit_state(self) if (r.members["actor"] == merged).any()]
            message = loss_message(records, f"merging {merged!r} into {kept!r}", actor=merged)
            if message and not (refit or force):
                raise UsageError(message)
        result = self.store.add_alias(alias, actor)
        result["refits"] = []
        if refit and result["merged"] and records:
            result["refits"] = refit_from(self, records, actor_map={merged: kept}, same_fits=True)
        return result

    def recut(self, period: str, *, origin: int = 0, refit: bool = False, force: bool = False) -> dict:
        """Re-cut all dated events into other periods, without re-importing.

        Stored fits belong to the old periods.  When there are any, the re-cut
        is refused with a UsageError listing what would be lost, unless
        ``refit`` (every fit is fitted again on the new periods with its
        stored settings, aligned again when it was, and its track names carried
        over by overlap in time; see :mod:`tracker.keeping`) or ``force``
        (drop them).  The result gains ``refits``.
        """
        from tracker.keeping import fit_state, loss_message, refit_from

        scheme = parse_scheme(period, origin)
        records = fit_state(self)
        message = loss_message(records, "re-cutting the periods")
        if message and not (refit or force):
            raise UsageError(message)
        old_periods = self.store.periods()
        result = self.store.recut(scheme)
        result["refits"] = refit_from(self, records, old_periods=old_periods) if refit and records else []
        return result

    # ------------------------------------------------------------------ read
    def periods(self) -> list[str]:
        """Period labels in time order."""
        return self.store.period_labels()

    def snapshot(self, period: str, relations: Sequence[str] | None = None) -> Snapshot:
        """One period's ties as sparse matrices (see :class:`tracker.snapshot.Snapshot`)."""
        return self.store.snapshot(str(period), relations)

    def summary(self) -> pd.DataFrame:
        """One row per period and relation: actors, ties, density, reciprocity, isolates, mean_value, sparse."""
        return _summary_table(self.store.snapshots())

    def actors(self) -> pd.DataFrame:
        """Actors with roster range, attributes and aliases."""
        return self.store.actors().drop(columns=["id"])

    def similar_actors(self, *, max_edits: int = 1, min_length: int = 5) -> pd.DataFrame:
        """Likely duplicate actors (case, punctuation, small misspellings; see :func:`tracker.names.similar_names`).

        Columns ``name, other, reason, edits, events_name, events_other,
        command``: ``command`` is the suggested ``roletrail alias`` call that
        makes the actor with fewer events another name of the one with more.
        """
        import shlex

        from tracker.names import similar_names

        actors = self.store.actors()
        pairs = similar_names(actors["actor"], max_edits=max_edits, min_length=min_length)
        counts = self.store.actor_event_counts()
        ids = dict(zip(actors["actor"], actors["id"]))
        pairs["events_name"] = [int(counts.get(ids[x], 0)) for x in pairs["name"]]
        pairs["events_other"] = [int(counts.get(ids[x], 0)) for x in pairs["other"]]
        keep_other = pairs["events_other"] > pairs["events_name"]
        pairs["command"] = [
            f"roletrail alias {shlex.quote(a if flip else b)} {shlex.quote(b if flip else a)}"
            for a, b, flip in zip(pairs["name"], pairs["other"], keep_other)
        ]
        return pairs

    def check(self, *, repair: bool = False, all_fits: bool = False) -> list:
        """Verify the study: integrity, orphans, ties against raw events, fits against memberships and blocks.

        Returns the problems found (each with its fix); ``repair`` first rebuilds
        every tie from the raw events (ties are derived data, nothing is lost).
        """
        from tracker.store.check import check_study, repair_ties

        if repair:
            repair_ties(self.engine)
        return check_study(self.engine, max_fit_periods=None if all_fits else 50)

    def batches(self) -> pd.DataFrame:
        """Imported files: batch id, kind, file, rows read and loaded, self-ties dropped, duplicates, bad rows skipped, time, hash."""
        return self.store.batches()

    # ------------------------------------------------------------------ fit
    @_computing
    def fit(
        self,
        *,
        method: str = "dynamic",
        positions: int | str = 4,
        criterion: str = "zero-block",
        alpha: float | None = None,
        cut: float | None = None,
        seed: int = 0,
        periods: Sequence[str] | None = None,
        relations: Sequence[str] | None = None,
        draws: int = 39,
        k_min: int | None = None,
        k_max: int | None = None,
        options: dict | None = None,
        smoothing: float | str | None = None,
        progress: Callable[[str], None] | None = None,
        null_model: str = "ties",
    ) -> dict:
        """Find positions in each period (all by default) and store the fit.

        Returns ``{"fit": id, "periods": DataFrame}`` with one row per fitted
        period (positions, inconsistencies, density correlation, fit-test
        p-value against ``draws`` refits on ``null_model`` draws, its
        Benjamini-Hochberg ``q_value`` across the fit's periods; see
        :mod:`tracker.inference.fit_test`), ``warnings``, the per-K table ``auto``
        and ``notes``: one per period where the method approximated (e.g.
        structural positions above the exact limit; see
        :mod:`tracker.blockmodel.embedding`).
        A fit with the same settings as an earlier one extends it (new
        periods) or refreshes it; other settings make a new fit.  Either way
        the fit becomes current.

        The default ``method="dynamic"`` fits one dynamic blockmodel over
        the periods (Markov positions; see README "The default pipeline" and
        :func:`tracker.pipeline.fitting.fit_dynamic`); its moves' confidence is
        the posterior probability of a change.  The old ``options={"joint":
        True}`` still works, with a ``FutureWarning``, as ``method="dynamic"``.

        For the descriptive methods,
        ``smoothing`` (default ``"auto"``) fits the periods together, paying a
        penalty for each change of position between consecutive periods
        (evolutionary clustering; see :attr:`FitSettings.smoothing` for the
        default and why); ``0`` (or ``"off"``) fits each period alone.  The
        dynamic model has no penalty: any ``smoothing`` but ``"auto"`` is
        refused with it.  When only later
        periods are fitted, the stored earlier periods of the same fit are
        kept as they are and the new ones continue from them.
        """
        from tracker import __version__
        from tracker.blockmodel.fitting import FitSettings
        from tracker.blockmodel.options import check_request, smoothing_value
        from tracker.pipeline.fitting import deprecated_joint, run_fit

        k_range_given = k_min is not None or k_max is not None
        smoothing = smoothing_value(smoothing)
        smoothing_given = smoothing not in (None, "auto")
        smoothing = "auto" if smoothing is None else smoothing

        method, options, warning = deprecated_joint(method, dict(options or {}))
        if warning:
            import warnings as python_warnings

            python_warnings.warn(warning, FutureWarning, stacklevel=2)
        if method == "dynamic" and smoothing == "auto":
            smoothing = 0.0  # the chain links the periods; record that no smoothing penalty ran
        settings = FitSettings(
            method=method, positions=positions, criterion=criterion, alpha=alpha, cut=cut, seed=seed,
            relations=tuple(relations) if relations else None, draws=draws,
            k_min=2 if k_min is None else k_min, k_max=8 if k_max is None else k_max,
            options=dict(options or {}), smoothing=smoothing, null_model=null_model,
        )
        labels = period_selection(self.store, periods)
        tied = [int(s.tied().sum()) for s in self.store.snapshots(labels, settings.relations)]
        warnings = check_request(settings, tied=tied, smoothing_given=smoothing_given, k_range_given=k_range_given)
        results = run_fit(self.store, settings, labels, progress)
        fit_id = self.store.save_fit(settings, results, __version__)
        from tracker.views import auto_table

        # Approximations a method made (large periods), one line per period.
        notes = [f"{r.period}: {r.diagnostics['approximation']['note']}" for r in results
                 if isinstance(r.diagnostics.get("approximation"), dict)]
        notes += sorted({r.diagnostics["fit_test"]["note"] for r in results if r.diagnostics.get("fit_test", {}).get("note")})

        stored = self.store.fit_periods(fit_id)
        auto = auto_table(stored[stored["period"].isin(labels)])
        if settings.positions == "auto" and auto.empty:
            warnings.append("the number of positions was chosen once for all periods together (smoothed fit); "
                            "its per-K table is not kept: fit with --smooth off to see each period's table")
        return {"fit": fit_id, "periods": with_q_values(stored).drop(columns=["diagnostics"]), "warnings": warnings,
                "auto": auto, "notes": notes}

    def fits(self) -> pd.DataFrame:
        """Every stored fit with its settings; ``current`` marks the one other verbs use."""
        return self.store.fits()

    def use_fit(self, fit_id: int) -> None:
        """Make an earlier fit the current one."""
        self.store.use_fit(int(fit_id))

    def fit_info(self, fit: int | None = None) -> dict:
        """Settings of the current (or a chosen) fit."""
        return self.store.current_fit(fit)

    def memberships(self, fit: int | None = None, *, names: bool = False) -> pd.DataFrame:
        """period, actor, position (1-based), isolate, track (once aligned), confidence.

        ``names`` adds ``track_name`` beside ``track``.
        """
        fit_id = self.store.current_fit(fit)["id"]
        members = self.store.memberships(fit_id)
        positions = self.store.track_positions(fit_id)
        if not positions.empty:
            members = members.merge(positions, on=["period", "position"], how="left")
            members["track"] = members["track"].astype("Int64")
            members = members[["period", "actor", "position", "track", "isolate", "confidence"]]
            if names:
                from tracker.views import name_tracks

                members = name_tracks(members, track_names(self.store.tracks(fit_id)), columns=("track",))
        return members

    def blocks(self, fit: int | None = None) -> pd.DataFrame:
        """The block table: period, relation, from_position, to_position, ties, possible, density, ..., image."""
        return self.store.blocks(self.store.current_fit(fit)["id"])

    def fit_periods(self, fit: int | None = None) -> pd.DataFrame:
        """Per-period fit results: positions, inconsistencies, density correlation, fit-test p-value,
        its Benjamini-Hochberg q-value across periods (``q_value``), draws, null model, diagnostics."""
        return with_q_values(self.store.fit_periods(self.store.current_fit(fit)["id"]))

    def show(self, period: str, *, fit: int | None = None, relation: str | None = None) -> dict:
        """One period's density tables and images (per relation), positions labelled with their sizes.

        Returns ``{"period", "fit", "criterion", "positions": DataFrame(position, size, isolates, label),
        "relations": {name: {"density": DataFrame, "image": DataFrame}}, "fit_row": dict}``.
        """
        info = self.store.current_fit(fit)
        period = str(period)
        blocks = self.store.blocks(info["id"])
        part = blocks[blocks["period"] == period]
        if part.empty:
            if period not in self.periods():
                period_selection(self.store, [period])
            raise UsageError(f"fit {info['id']} has no result for period {period}; run roletrail fit --periods {period}")
        members = self.store.memberships(info["id"])
        members = members[members["period"] == period]
        sizes = members.groupby("position").size()
        iso = members.loc[members["isolate"], "position"].unique()
        positions = pd.DataFrame({"position": sizes.index, "size": sizes.to_numpy()})
        positions["isolates"] = positions["position"].isin(iso)
        positions["label"] = [
            f"P{p} (n={n}{', no ties' if i else ''})" for p, n, i in zip(positions["position"], positions["size"], positions["isolates"])
        ]
        names = dict(zip(positions["position"], positions["label"]))
        out = {}
        relations = sorted(part["relation"].unique()) if relation is None else [relation]
        for rel in relations:
            sub = part[part["relation"] == rel]
            if sub.empty:
                raise UsageError(f"no relation {rel!r} in this fit; it has {', '.join(sorted(part['relation'].unique()))}")
            dens = sub.pivot(index="from_position", columns="to_position", values="density").rename(index=names, columns=names)
            img = sub.pivot(index="from_position", columns="to_position", values="image").rename(index=names, columns=names)
            out[rel] = {"density": dens, "image": img}
        row = self.store.fit_periods(info["id"])
        row = row[row["period"] == period].iloc[0].to_dict()
        shown = part if relation is None else part[part["relation"] == relation]
        return {"period": period, "fit": info["id"], "criterion": info["criterion"], "positions": positions,
                "relations": out, "fit_row": row,
                "members": {int(p): list(g["actor"]) for p, g in members.groupby("position")},
                "names": self._position_names(info["id"]).get(period, {}),
                "blocks": shown[["relation", "from_position", "to_position", "ties", "possible", "density", "image"]]}

    # ------------------------------------------------------------------ structures
    @_computing
    def structures(self, *, fit: int | None = None, draws: int = 199, seed: int | None = None,
                   raw_check: bool = True, basis: str = "ties",
                   snapshots: Sequence[Snapshot] | None = None,
                   fit_periods: pd.DataFrame | None = None) -> pd.DataFrame:
        """The closest ideal image per period and relation, with its fit and significance.

        For each period and relation of the fit, the blocks (without the
        isolates' position, which is empty by construction and would flatter
        every ideal with empty rows) are compared with every ideal image over
        all orderings of its positions
        (:func:`tracker.structures.ideal.classify_image`).  With ``basis="ties"``
        (default) the comparison counts inconsistencies on the ties
        themselves, normalised per block (the block densities; robust to
        stray ties, see :mod:`tracker.structures.ideal`); ``basis="image"``
        compares the 0/1 image under the fit's criterion instead.  The best
        ideal is kept with ``mismatches``, ``fit`` = 1 - mismatches / B^2 and a
        p-value against ``draws`` random rearrangements of its blocks; a
        structure is ``significant`` when that p-value and the period's
        fit test both pass after Benjamini-Hochberg correction
        (``q_value``, ``fit_q_value``), else ``structure`` says "no clear
        structure" (:func:`tracker.structures.change.structures_over_time`).  Beside it, the
        discrete and continuous core-periphery correlations of Borgatti &
        Everett (1999) on the raw ties (``cp_correlation``,
        ``coreness_correlation``) check the image-level answer.  Positions are
        named by their track when the fit is aligned (see :meth:`align`).
        ``snapshots`` may hold the fitted periods' snapshots when already read,
        ``fit_periods`` the fit's per-period table (:meth:`Store.fit_periods`).

        Returns columns ``period, relation, ideal, variant, mismatches, fit,
        p_value, roles, changed, q_value, fit_q_value, significant, structure,
        cp_correlation, coreness_correlation``.
        """
        if basis not in ("ties", "image"):
            raise UsageError(f"basis must be 'ties' or 'image', not {basis!r}")
        from tracker.execution import map_tasks
        from tracker.pipeline.structures import structure_tests, structure_workers
        from tracker.structures.change import structures_over_time

        info = self.store.current_fit(fit)
        seed = info["seed"] if seed is None else seed
        blocks = self.store.blocks(info["id"])
        fp = (self.store.fit_periods(info["id"]) if fit_periods is None else fit_periods).set_index("period")
        names = self._position_names(info["id"])
        rows, labels, extra, tasks = [], {}, {}, []
        periods = [p for p in self.periods() if p in fp.index]
        # One read of every period's ties (label order read once), not one query set per period.
        if raw_check and snapshots is None:
            snapshots = self.store.snapshots(periods)
        snaps = {snap.period: snap for snap in snapshots} if raw_check else {}
        for period in periods:
            iso = fp.loc[period, "isolates_position"]
            part = blocks[blocks["period"] == period]
            if iso is not None and not pd.isna(iso):
                part = part[(part["from_position"] != iso) & (part["to_position"] != iso)]
            kept = sorted(set(part["from_position"]))
            labels[period] = {k: names.get(period, {}).get(pos, f"P{pos}") for k, pos in enumerate(kept)}
            if len(kept) < 2:
                continue
            snap = snaps[period] if raw_check else None
            values = "density" if basis == "ties" else "image"
            images = [(rel, sub.pivot(index="from_position", columns="to_position", values=values).loc[kept, kept].to_numpy(),
                       None if snap is None else snap.matrix(rel))
                      for rel, sub in part.groupby("relation", sort=True)]
            tasks.append((period, images, draws, seed))
        # One task per period: the ideal images' significance draws and the core-periphery restarts.
        for found in map_tasks(structure_tests, tasks, label="testing structures", workers=structure_workers(tasks)):
            for period, rel, best, checks in found:
                rows.append((period, rel, best))
                if checks is not None:
                    extra[(period, rel)] = checks
        fit_q = with_q_values(fp.reset_index()).set_index("period")["q_value"].to_dict()
        table = structures_over_time(rows, labels=labels, periods=periods, fit_q_values=fit_q)
        table["cp_correlation"] = [extra.get((p, r), (np.nan, np.nan))[0] for p, r in zip(table["period"], table["relation"])]
        table["coreness_correlation"] = [extra.get((p, r), (np.nan, np.nan))[1] for p, r in zip(table["period"], table["relation"])]
        return table

    def structure_sentences(self, table: pd.DataFrame | None = None, **kwargs) -> list[str]:
        """Plain sentences about the changes of structure over time."""
        from tracker.structures.change import describe_changes

        return describe_changes(self.structures(**kwargs) if table is None else table)

    def _position_names(self, fit_id: int) -> dict:
        """period -> {position (1-based): display name}; track names once the fit is aligned."""
        positions = self.store.track_positions(fit_id)
        if positions.empty:
            return {}
        names = track_names(self.store.tracks(fit_id))
        out: dict = {}
        for period, position, track in positions.itertuples(index=False):
            out.setdefault(period, {})[int(position)] = names.get(int(track), f"T{track}")
        return out

    # ------------------------------------------------------------------ tracks and moves
    @_computing
    def align(
        self,
        *,
        fit: int | None = None,
        weight_overlap: float = 0.5,
        link_threshold: float = 0.2,
        split_threshold: float = 0.3,
        max_gap: int = 0,
        draws: int = 20,
        seed: int | None = None,
        rebuild: bool = False,
        include_isolates: bool = False,
        names_from: int | None = None,
    ) -> dict:
        """Link every period's positions to persistent tracks, find moves and their confidence.

        ``names_from`` (another aligned fit) gives this fit's tracks the names
        of that fit's tracks they overlap most (same actors in the same
        periods; :func:`tracker.longitudinal.carry.carry_names`); names this
        fit already has are kept.

        Periods aligned before keep their tracks exactly (new periods are
        aligned after them) unless ``rebuild``; track names are kept by track
        id.  Each move's ``confidence`` is the probability that it is real,
        learned on ``draws`` studies simulated from the fit and refitted with
        its own procedure (:func:`tracker.pipeline.calibration.calibrated_confidence`);
        ``draws=0`` skips it.  For a dynamic fit the confidence is the model's
        posterior change probability, recalibrated by an isotonic map learned
        on at least ``draws`` studies drawn from the fitted model (as many as
        500 simulated candidate changes need;
        :func:`tracker.pipeline.calibration.studies_needed`; raw, uncalibrated,
        with ``draws=0``), and
        only changes with probability >= 0.5 are reported; the others are
        listed by :meth:`uncertain_changes`.  Moves into or out of the no-tie track (0) are
        left out unless ``include_isolates``: in sparse data an actor with no
        event in one year has not changed role.

        Returns ``{"fit", "tracks", "moves", "periods", "new_periods"}``.
        """
        from tracker.pipeline.tracking import align_fit

        info = self.store.current_fit(fit)
        fit_id = info["id"]
        seed = info["seed"] if seed is None else seed
        params = {"weight_overlap": weight_overlap, "link_threshold": link_threshold,
                  "split_threshold": split_threshold, "max_gap": max_gap, "draws": draws, "seed": seed,
                  "include_isolates": include_isolates}
        if names_from is not None:
            source = self.store.current_fit(int(names_from))["id"]
            self._require_alignment(source)
        alignment, moves, order, done = align_fit(self.store, info, params, rebuild=rebuild)
        self.store.save_alignment(fit_id, params, alignment, moves)
        carried = {}
        if names_from is not None:
            carried = self._carry_names_from(source, fit_id)
        return {"fit": fit_id, "tracks": self.tracks(fit_id), "moves": self.store.moves(fit_id),
                "periods": len(order), "new_periods": len(order) - done, "names_carried": carried,
                "uncertain_changes": int(params.get("uncertain_changes_count", 0))}

    def _carry_names_from(self, source: int, fit_id: int) -> dict:
        """Names of ``source``'s tracks given to ``fit_id``'s best-overlapping tracks (its own names kept)."""
        from tracker.longitudinal.carry import carry_names

        tracks = self.store.tracks(source)
        names = {int(t): n for t, n in zip(tracks["track"], tracks["name"]) if isinstance(n, str) and n}
        mine = self.store.tracks(fit_id)
        own = {int(t): n for t, n in zip(mine["track"], mine["name"]) if isinstance(n, str) and n}
        periods = self.store.periods()
        carried, _ = carry_names(self.memberships(source), self.memberships(fit_id),
                                 {t: n for t, n in names.items() if n not in own.values()}, periods, periods)
        carried = {t: n for t, n in carried.items() if t not in own}
        self.store.set_track_names(fit_id, {**own, **carried})
        return carried

    def calibration(self, *, fit: int | None = None, studies: int = 20, seed: int | None = None) -> dict:
        """Check move confidence on studies simulated from the fit; store and return the result.

        Studies are drawn from the fitted model, refitted with the fit's own
        procedure and aligned with the stored alignment's settings; their
        moves, whose truth is known, are scored by a confidence map learned on
        the other half of the studies (:func:`tracker.pipeline.calibration.calibration_check`).
        Returns ``{"fit", "studies", "moves", "ece", "share_real_at_08", "bins", ...}``:
        ``bins`` are 5 equal-width confidence bins with the number of moves,
        their mean confidence and the share that is real.
        """
        from tracker.pipeline.calibration import calibration_check
        from tracker.pipeline.tracking import aligned_inputs, stored_alignment

        if studies < 2:
            raise UsageError("--studies must be at least 2 (half of them check the other half)")
        info = self.store.current_fit(fit)
        fit_id = info["id"]
        self._require_alignment(fit_id)
        periods = aligned_inputs(self.store, fit_id)
        alignment = stored_alignment(self.store, fit_id, [p.period for p in periods])
        params = self.store.alignment_params(fit_id) or {}
        moves = self.store.moves(fit_id)
        left_out = self.uncertain_changes(fit_id)
        if len(left_out):  # a dynamic fit's unreported candidates are planted with their probability too
            moves = pd.concat([moves, left_out], ignore_index=True)
        result = calibration_check(self.store, info, periods, alignment, moves, studies=studies,
                                   seed=info["seed"] if seed is None else seed, align_params=params)
        result["fit"] = fit_id
        self.store.save_calibration(fit_id, result)
        return result

    def latest_calibration(self, fit: int | None = None) -> dict | None:
        """The last stored calibration check of the current (or a chosen) fit, or None."""
        return self.store.latest_calibration(self.store.current_fit(fit)["id"])

    def tracks(self, fit: int | None = None) -> pd.DataFrame:
        """Tracks of the current (or a chosen) fit: id, name, first and last period, parent, merges, size."""
        fit_id = self.store.current_fit(fit)["id"]
        tracks = self.store.tracks(fit_id)
        if tracks.empty:
            return tracks.assign(periods=[], mean_size=[])
        return _track_table(tracks, self.memberships(fit_id))

    def name_track(self, track: int, name: str, *, fit: int | None = None) -> None:
        """Name a track ("coordinating core"); the name is kept through re-alignment and updates."""
        name = str(name).strip()
        if not name:
            raise UsageError("give a non-empty name")
        self.store.name_track(self.store.current_fit(fit)["id"], int(track), name)

    def moves(self, fit: int | None = None) -> pd.DataFrame:
        """actor, from_period, to_period, from_track, to_track, confidence (current or chosen fit)."""
        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        moves = self.store.moves(fit_id)
        names = track_names(self.store.tracks(fit_id))
        moves["from_name"] = moves["from_track"].map(names)
        moves["to_name"] = moves["to_track"].map(names)
        return moves

    def uncertain_changes(self, fit: int | None = None) -> pd.DataFrame:
        """Candidate changes a dynamic fit did not report (probability of a change below 0.5).

        Columns as :meth:`moves` (``actor, from_period, to_period, from_track,
        to_track, confidence``); empty for other methods
        (:func:`tracker.pipeline.tracking.reported_changes`).
        """
        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        rows = (self.store.alignment_params(fit_id) or {}).get("uncertain_changes") or []
        return pd.DataFrame(rows, columns=["actor", "from_period", "to_period", "from_track", "to_track",
                                           "confidence"])

    def transitions(self, fit: int | None = None, *, include_isolates: bool = True) -> pd.DataFrame:
        """Transition counts and row shares between tracks, per step and pooled ("all")."""
        from tracker.longitudinal.movement import transitions

        from tracker.views import name_tracks

        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        members = self.memberships(fit_id)
        table = transitions(members, self._fitted_periods(fit_id), ignore_tracks=() if include_isolates else (0,))
        return name_tracks(table, track_names(self.store.tracks(fit_id)))

    def trajectories(self, fit: int | None = None, *, names: bool = True) -> pd.DataFrame:
        """Each actor's track in each period (wide: one column per period), with entry and exit periods.

        Cells hold the track's name (``names``, the default) or its number.
        """
        from tracker.longitudinal.movement import trajectories
        from tracker.views import named_trajectories

        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        periods = self._fitted_periods(fit_id)
        wide = trajectories(self.memberships(fit_id), periods)
        if names:
            wide = named_trajectories(wide, track_names(self.store.tracks(fit_id)), periods)
        return wide.reset_index()

    def mobility(self, fit: int | None = None) -> pd.DataFrame:
        """Per step: actors present in both periods, movers, mobility rate, entries, exits."""
        from tracker.longitudinal.movement import mobility

        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        return mobility(self.memberships(fit_id), self._fitted_periods(fit_id), ignore_tracks=(0,))

    def compare(self, fit_a: int, fit_b: int) -> dict:
        """Agreement of two stored fits, period by period (see :func:`tracker.longitudinal.compare.compare_fits`).

        Returns ``{"fit_a", "fit_b", "periods", "actors", "moves"}``; ``moves``
        is None unless both fits are aligned.
        """
        from tracker.longitudinal.compare import compare_fits

        ids = [self.store.current_fit(int(f))["id"] for f in (fit_a, fit_b)]
        members = [self.store.memberships(f) for f in ids]
        aligned = all(not self.store.track_positions(f).empty for f in ids)
        moves = [self.store.moves(f) for f in ids] if aligned else [None, None]
        out = compare_fits(members[0], members[1], moves[0], moves[1])
        if out["periods"].empty:
            raise UsageError(f"fits {ids[0]} and {ids[1]} have no fitted period in common; fit the same periods first")
        return {"fit_a": ids[0], "fit_b": ids[1], **out}

    def export_graphml(self, folder: str | os.PathLike, *, fit: int | None = None) -> list[Path]:
        """Write each period's snapshot as GraphML (an open standard) with position and track as node attributes.

        One file per period, ``<folder>/<period>.graphml``; one graph per file
        holds every relation as edges with a ``relation`` attribute.
        """
        import networkx as nx

        fit_id = self.store.current_fit(fit)["id"]
        members = self.memberships(fit_id)
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        written = []
        for snap in self.store.snapshots(self._fitted_periods(fit_id)):
            graph = nx.MultiDiGraph(period=snap.period)
            part = members[members["period"] == snap.period].set_index("actor")
            for actor in snap.actors:
                attrs = {"position": int(part.loc[actor, "position"]), "isolate": bool(part.loc[actor, "isolate"])}
                if "track" in part and not pd.isna(part.loc[actor, "track"]):
                    attrs["track"] = int(part.loc[actor, "track"])
                graph.add_node(actor, **attrs)
            for rel, mat in zip(snap.relations, snap.matrices):
                coo = mat.tocoo()
                keep = np.ones(coo.nnz, bool) if rel.directed else coo.row < coo.col
                for i, j, v in zip(coo.row[keep], coo.col[keep], coo.data[keep]):
                    graph.add_edge(snap.actors[i], snap.actors[j], relation=rel.name, weight=float(v),
                                   directed=rel.directed)
            safe = "".join(c if c.isalnum() or c in "-_." else "_" for c in snap.period)
            path = folder / f"{safe}.graphml"
            nx.write_graphml(graph, path)
            written.append(path)
        return written

    # ------------------------------------------------------------------ report
    @_computing
    def report_tables(self, fit: int | None = None, *, structure_draws: int = 199) -> tuple[dict, list[str], dict]:
        """Every table the charts and the report use, the period order, and the method's metadata.

        Tables: ``summary``, ``memberships``, ``blocks`` (with ``from_track``,
        ``to_track`` once aligned), ``moves``, ``transitions``, ``tracks``,
        ``structures``, ``structure_sentences``, ``diagnostics`` (fit against
        the number of positions), ``permutation``.  A notebook user can pass
        them to any chart of :mod:`tracker.report.charts`.
        """
        from datetime import datetime, timezone

        from tracker import __version__

        info = self.store.current_fit(fit)
        fit_id = info["id"]
        self._require_alignment(fit_id)
        # Read once (a dynamic fit keeps every actor's change probabilities there): periods, tables, structures.
        fp = self.store.fit_periods(fit_id)
        periods = fp["period"].tolist()
        snapshots = list(self.store.snapshots(periods))  # read once: summary and structures
        tables: dict = {"summary": _summary_table(snapshots)}
        members = self.memberships(fit_id)
        tables["memberships"] = members
        blocks = self.store.blocks(fit_id)
        positions = self.store.track_positions(fit_id)
        aligned = not positions.empty
        if aligned:
            pos = positions.rename(columns={"position": "from_position", "track": "from_track"})
            blocks = blocks.merge(pos, on=["period", "from_position"], how="left")
            pos = positions.rename(columns={"position": "to_position", "track": "to_track"})
            blocks = blocks.merge(pos, on=["period", "to_position"], how="left")
            tracks = _track_table(self.store.tracks(fit_id), members)  # as self.tracks, without a second read
            names = track_names(tracks)
            tracks["kind"] = ["split" if not pd.isna(p) else "birth" for p in tracks["parent"]]
            tracks["parent"] = [names.get(int(p), f"T{int(p)}") if not pd.isna(p) else "" for p in tracks["parent"]]
            tables["tracks"] = tracks
            tables["moves"] = self.moves(fit_id)
            from tracker.longitudinal.movement import transitions

            tables["transitions"] = transitions(members, periods)  # as self.transitions, without a second read
        tables["blocks"] = blocks
        diag, fitted_relations = [], self.store.relations()
        for row in fp.itertuples(index=False):
            auto = row.diagnostics.get("auto") if isinstance(row.diagnostics, dict) else None
            if auto:
                diag += [{"period": row.period, **entry} for entry in auto]
            else:
                diag.append({"period": row.period, "k": row.positions - (0 if pd.isna(row.isolates_position) else 1),
                             "inconsistencies": row.inconsistencies,
                             "density_correlation": _tied_correlation(blocks, row, fitted_relations),
                             "chosen": True})
        tables["diagnostics"] = pd.DataFrame(diag)
        # "observed" is the statistic the p-value tests: the density correlation over the
        # actors with a tie (tracker.inference.fit_test), not the table's all-actor value
        tables["permutation"] = with_q_values(fp)[["period", "p_value", "q_value"]]
        tables["permutation"].insert(1, "observed", [
            (d.get("fit_test") or {}).get("observed") if isinstance(d, dict) else None for d in fp["diagnostics"]])
        tables["permutation"]["observed"] = pd.to_numeric(tables["permutation"]["observed"], errors="coerce")
        structures = self.structures(fit=fit_id, draws=structure_draws, snapshots=snapshots, fit_periods=fp)
        tables["structures"] = structures.drop(columns=["parts"], errors="ignore")
        tables["structure_sentences"] = self.structure_sentences(structures)
        params = info["params"]
        relations = self.store.relations()
        from tracker.views import smoothing_label

        meta = {
            "study": self.path.name if self.path else "study",
            "method": params["method"], "positions": params["positions"], "criterion": params["criterion"],
            "alpha": params.get("alpha"), "cut": params.get("cut"), "seed": params["seed"],
            "fit-test draws": params.get("draws"), "fit-test null model": params.get("null_model"),
            "smoothing": smoothing_label(params),
            "options": ", ".join(f"{k}={v}" for k, v in (params.get("options") or {}).items()) or None,
            "fit": fit_id, "fitted with version": info["version"], "version": __version__,
            "created": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
            "relations": [f"{r.name} ({'directed' if r.directed else 'undirected'})" for r in relations],
            "counts": self.store.counts(),
        }
        check = self.store.latest_calibration(fit_id)
        if check:
            tables["calibration"] = pd.DataFrame(check["bins"])
            meta["calibration"] = check
        alignment = self.store.alignment_params(fit_id)
        if alignment:
            from tracker.pipeline.tracking import alignment_settings

            meta["alignment"] = ", ".join(f"{k}={v}" for k, v in alignment_settings(alignment).items())
            if "confidence" in alignment:
                meta["alignment"] += (f"; move confidence: {alignment['confidence']}; "
                                      f"{alignment.get('uncertain_changes_count', 0)} candidate changes with "
                                      "probability below 0.5 not reported")
        return tables, periods, meta

    def report(self, path: str | os.PathLike, *, fit: int | None = None, anonymise: bool = False,
               structure_draws: int = 199, key: str | os.PathLike | None = None) -> Path:
        """Write the self-contained offline HTML report; returns its path.

        ``anonymise`` replaces actor labels by codes and the study's file name
        in the title by "Anonymised study" (a file name often names the
        partnership); ``key`` then writes the code -> label table as CSV to a
        separate file for the analyst (keep it apart from the report).
        """
        from tracker.report.html import build_report

        if key is not None and not anonymise:
            raise UsageError("--key writes the codes of an anonymised report; add --anonymise")
        tables, periods, meta = self.report_tables(fit, structure_draws=structure_draws)
        if anonymise:
            meta = {**meta, "study": "Anonymised study"}
        html = build_report(tables, periods, meta, anonymise=anonymise)
        path = Path(path)
        path.write_text(html, encoding="utf-8")
        if key is not None:
            from tracker.output import render
            from tracker.report.anonymise import anonymise_tables

            codes = anonymise_tables(tables)[1]  # the same tables and seed give build_report's codes
            frame = pd.DataFrame(sorted((c, label) for label, c in codes.items()), columns=["code", "actor"])
            Path(key).write_text(render(frame, "csv"), encoding="utf-8")
        return path

    def chart(self, name: str, path: str | os.PathLike, *, fit: int | None = None, **options) -> Path:
        """Write one chart as PNG, SVG or Vega-Lite JSON (by the file's suffix)."""
        import inspect

        from tracker.report.charts import CHARTS, make_chart, save_chart

        if name not in CHARTS:
            raise UsageError(f"unknown chart {name!r}; use one of: {', '.join(CHARTS)}")
        accepted = inspect.signature(CHARTS[name]).parameters
        for option in options:
            if option not in accepted:
                takers = sorted(n for n, f in CHARTS.items() if option in inspect.signature(f).parameters)
                from tracker.blockmodel.options import _only

                raise UsageError(f"--{option.replace('_', '-')} does not apply to chart {name}"
                                 + (f"; {_only(takers)}" if takers else ""))
        tables, periods, _ = self.report_tables(fit, structure_draws=0 if name != "structure" else 99)
        chart = make_chart(name, tables, periods, **options)
        path = Path(path)
        save_chart(chart, path)
        return path

    def _fitted_periods(self, fit_id: int) -> list[str]:
        return self.store.fit_periods(fit_id)["period"].tolist()

    def _require_alignment(self, fit_id: int) -> None:
        if self.store.track_positions(fit_id).empty:
            raise UsageError(f"fit {fit_id} is not aligned yet; run roletrail align first")


def _summary_table(snapshots) -> pd.DataFrame:
    """Network measures of each snapshot, one row per period and relation."""
    rows = []
    for snap in snapshots:
        for measures in network_measures(snap):
            rows.append({"period": snap.period, **measures})
    columns = ["period", "relation", "actors", "ties", "density", "reciprocity", "isolates", "mean_value", "sparse"]
    return pd.DataFrame(rows, columns=columns)


def _track_table(tracks: pd.DataFrame, members: pd.DataFrame) -> pd.DataFrame:
    """Stored tracks with their number of periods, mean size and display name."""
    sizes = members.groupby(["track", "period"]).size().groupby("track").agg(["count", "mean"])
    tracks["periods"] = tracks["track"].map(sizes["count"]).fillna(0).astype(int)
    tracks["mean_size"] = tracks["track"].map(sizes["mean"]).round(1)
    tracks["name"] = [n if isinstance(n, str) else ("no ties" if iso else f"T{t}")
                      for t, n, iso in zip(tracks["track"], tracks["name"], tracks["isolates"])]
    return tracks


def _tied_correlation(blocks: pd.DataFrame, row, relations) -> float:
    """A period's density correlation over the actors with a tie, from its stored block table.

    As the ``auto`` entries of the fit chart and the fit test compute it; the
    fit table's ``density_correlation`` keeps the isolates' position.
    """
    if pd.isna(row.isolates_position):
        return row.density_correlation
    from tracker.blockmodel.goodness import density_correlation_of_tables

    part = blocks[blocks["period"] == row.period]
    directed = {r.name: bool(r.directed) for r in relations}
    names = list(dict.fromkeys(part["relation"]))
    n_pos = int(row.positions)
    shape = (len(names), n_pos, n_pos)
    ties, possible = np.zeros(shape), np.zeros(shape)
    at = (part["relation"].map(names.index).to_numpy(), part["from_position"].to_numpy(int) - 1,
          part["to_position"].to_numpy(int) - 1)
    ties[at], possible[at] = part["ties"].to_numpy(float), part["possible"].to_numpy(float)
    return density_correlation_of_tables(ties, possible, [directed[n] for n in names],
                                         leave_out=int(row.isolates_position) - 1)
