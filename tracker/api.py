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

import json
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
from tracker.snapshot import Snapshot
from tracker.store.database import open_engine, resolve_url, sqlite_path, upgrade
from tracker.store.repository import ImportReport, Store

__all__ = ["Study"]

Progress = Callable[[int, int], None]


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
    """

    def __init__(self, db: str | os.PathLike | None = None, *, create: bool = True) -> None:
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

    def alias(self, alias: str, actor: str) -> dict:
        """Make ``alias`` another name of ``actor`` (merging them if both exist)."""
        return self.store.add_alias(alias, actor)

    def recut(self, period: str, *, origin: int = 0) -> dict:
        """Re-cut all dated events into other periods, without re-importing."""
        return self.store.recut(parse_scheme(period, origin))

    # ------------------------------------------------------------------ read
    def periods(self) -> list[str]:
        """Period labels in time order."""
        return self.store.period_labels()

    def snapshot(self, period: str, relations: Sequence[str] | None = None) -> Snapshot:
        """One period's ties as sparse matrices (see :class:`tracker.snapshot.Snapshot`)."""
        return self.store.snapshot(str(period), relations)

    def summary(self) -> pd.DataFrame:
        """One row per period and relation: actors, ties, density, reciprocity, isolates, mean_value, sparse."""
        rows = []
        for snap in self.store.snapshots():
            for measures in network_measures(snap):
                rows.append({"period": snap.period, **measures})
        columns = ["period", "relation", "actors", "ties", "density", "reciprocity", "isolates", "mean_value", "sparse"]
        return pd.DataFrame(rows, columns=columns)

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
    def fit(
        self,
        *,
        method: str = "structural",
        positions: int | str = 4,
        criterion: str = "zero-block",
        alpha: float | None = None,
        cut: float | None = None,
        seed: int = 0,
        periods: Sequence[str] | None = None,
        relations: Sequence[str] | None = None,
        draws: int = 99,
        k_min: int = 2,
        k_max: int = 8,
        options: dict | None = None,
        smoothing: float | str = "auto",
        progress: Callable[[str], None] | None = None,
    ) -> dict:
        """Find positions in each period (all by default) and store the fit.

        Returns ``{"fit": id, "periods": DataFrame}`` with one row per fitted
        period (positions, inconsistencies, density correlation, p-value).
        A fit with the same settings as an earlier one extends it (new
        periods) or refreshes it; other settings make a new fit.  Either way
        the fit becomes current.

        ``smoothing`` (default ``"auto"``) fits the periods together, paying a
        penalty for each change of position between consecutive periods
        (evolutionary clustering; see :attr:`FitSettings.smoothing` for the
        default and why); ``0`` fits each period alone.  When only later
        periods are fitted, the stored earlier periods of the same fit are
        kept as they are and the new ones continue from them.
        """
        from tracker import __version__
        from tracker.blockmodel.fitting import FitSettings, fit_snapshot, smoothing_applies

        settings = FitSettings(
            method=method, positions=positions, criterion=criterion, alpha=alpha, cut=cut, seed=seed,
            relations=tuple(relations) if relations else None, draws=draws, k_min=k_min, k_max=k_max,
            options=dict(options or {}), smoothing=smoothing,
        )
        labels = self._period_selection(periods)
        results = []
        if settings.options.get("joint"):
            results = self._fit_joint(list(self.store.snapshots(labels, settings.relations)), settings)
            if progress is not None:
                for period in labels:
                    progress(period)
        elif smoothing_applies(settings) and len(self.periods()) > 1:
            from tracker.longitudinal.smoothing import smoothed_fits

            frozen_periods, frozen = self._frozen_prefix(settings, labels)
            snaps = list(self.store.snapshots(frozen_periods + labels, settings.relations))
            results = smoothed_fits(snaps, settings, frozen=frozen, progress=progress)
        else:
            for snap in self.store.snapshots(labels, settings.relations):
                results.append(fit_snapshot(snap, settings))
                if progress is not None:
                    progress(snap.period)
        fit_id = self.store.save_fit(settings, results, __version__)
        return {"fit": fit_id, "periods": self.store.fit_periods(fit_id).drop(columns=["diagnostics"])}

    def _fit_joint(self, snapshots: list, settings) -> list:
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

    def _frozen_prefix(self, settings, labels: list[str]) -> tuple[list[str], list]:
        """Stored periods of the same fit that come before ``labels``, as partitions to keep.

        Only when every study period before the first requested one is stored;
        otherwise those periods are simply refitted with the rest.
        """
        from tracker.blockmodel.partition import Partition

        known = self.periods()
        before = known[: known.index(labels[0])]
        if not before:
            return [], []
        fits = self.store.fits()
        same = [int(f) for f, p in zip(fits["fit"], fits["params"]) if json.loads(p) == settings.as_dict()]
        if not same:
            labels[:0] = [p for p in before if p not in labels]
            return [], []
        fit_id = same[-1]
        fp = self.store.fit_periods(fit_id).set_index("period")
        if not all(p in fp.index for p in before):
            labels[:0] = [p for p in before if p not in labels]
            return [], []
        members = self.store.memberships(fit_id)
        frozen = []
        for period in before:
            part = members[members["period"] == period]
            snap_actors = self.store.snapshot(period, settings.relations).actors
            if tuple(part["actor"]) != tuple(snap_actors):
                labels[:0] = [p for p in before if p not in labels]
                return [], []
            iso = fp.loc[period, "isolates_position"]
            frozen.append(Partition(part["position"].to_numpy() - 1, int(fp.loc[period, "positions"]),
                                    None if iso is None or pd.isna(iso) else int(iso) - 1))
        return before, frozen

    def _period_selection(self, periods: Sequence[str] | None) -> list[str]:
        known = self.periods()
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

    def fits(self) -> pd.DataFrame:
        """Every stored fit with its settings; ``current`` marks the one other verbs use."""
        return self.store.fits()

    def use_fit(self, fit_id: int) -> None:
        """Make an earlier fit the current one."""
        self.store.use_fit(int(fit_id))

    def fit_info(self, fit: int | None = None) -> dict:
        """Settings of the current (or a chosen) fit."""
        return self.store.current_fit(fit)

    def memberships(self, fit: int | None = None) -> pd.DataFrame:
        """period, actor, position (1-based), isolate, track (once aligned), confidence."""
        fit_id = self.store.current_fit(fit)["id"]
        members = self.store.memberships(fit_id)
        positions = self.store.track_positions(fit_id)
        if not positions.empty:
            members = members.merge(positions, on=["period", "position"], how="left")
            members["track"] = members["track"].astype("Int64")
            members = members[["period", "actor", "position", "track", "isolate", "confidence"]]
        return members

    def blocks(self, fit: int | None = None) -> pd.DataFrame:
        """The block table: period, relation, from_position, to_position, ties, possible, density, ..., image."""
        return self.store.blocks(self.store.current_fit(fit)["id"])

    def fit_periods(self, fit: int | None = None) -> pd.DataFrame:
        """Per-period fit results: positions, inconsistencies, density correlation, p-value, diagnostics."""
        return self.store.fit_periods(self.store.current_fit(fit)["id"])

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
                self._period_selection([period])
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
        return {"period": period, "fit": info["id"], "criterion": info["criterion"], "positions": positions,
                "relations": out, "fit_row": row}

    # ------------------------------------------------------------------ structures
    def structures(self, *, fit: int | None = None, draws: int = 199, seed: int | None = None,
                   raw_check: bool = True) -> pd.DataFrame:
        """The closest ideal image per period and relation, with its fit and significance.

        For each period and relation of the fit, the image under the fit's
        criterion (without the isolates' position, which is empty by
        construction and would flatter every ideal with empty rows) is compared
        with every ideal image over all orderings of its positions
        (:func:`tracker.structures.ideal.classify_image`); the best one is kept
        with ``mismatches``, ``fit`` = 1 - mismatches / B^2 and a p-value
        against ``draws`` random images of the same density.  Beside it, the
        discrete and continuous core-periphery correlations of Borgatti &
        Everett (1999) on the raw ties (``cp_correlation``,
        ``coreness_correlation``) check the image-level answer.  Positions are
        named by their track when the fit is aligned (see :meth:`align`).

        Returns columns ``period, relation, ideal, variant, mismatches, fit,
        p_value, roles, changed, cp_correlation, coreness_correlation``.
        """
        from tracker.structures.change import structures_over_time
        from tracker.structures.coreperiphery import continuous_coreness, discrete_core_periphery
        from tracker.structures.ideal import classify_image, closest_ideal

        info = self.store.current_fit(fit)
        seed = info["seed"] if seed is None else seed
        blocks = self.store.blocks(info["id"])
        fp = self.store.fit_periods(info["id"]).set_index("period")
        names = self._position_names(info["id"])
        rows, labels, extra = [], {}, {}
        periods = [p for p in self.periods() if p in fp.index]
        for period in periods:
            iso = fp.loc[period, "isolates_position"]
            part = blocks[blocks["period"] == period]
            if iso is not None and not pd.isna(iso):
                part = part[(part["from_position"] != iso) & (part["to_position"] != iso)]
            kept = sorted(set(part["from_position"]))
            labels[period] = {k: names.get(period, {}).get(pos, f"P{pos}") for k, pos in enumerate(kept)}
            snap = self.snapshot(period) if raw_check else None
            for rel, sub in part.groupby("relation", sort=True):
                if len(kept) < 2:
                    continue
                img = sub.pivot(index="from_position", columns="to_position", values="image").loc[kept, kept].to_numpy()
                best = (classify_image(img, draws=draws, seed=seed) if draws else closest_ideal(img, seed=seed))[0]
                rows.append((period, rel, best))
                if snap is not None:
                    extra[(period, rel)] = _core_periphery_check(snap.matrix(rel), seed,
                                                                  discrete_core_periphery, continuous_coreness)
        table = structures_over_time(rows, labels=labels, periods=periods)
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
        names = _track_names(self.store.tracks(fit_id))
        out: dict = {}
        for period, position, track in positions.itertuples(index=False):
            out.setdefault(period, {})[int(position)] = names.get(int(track), f"T{track}")
        return out

    # ------------------------------------------------------------------ tracks and moves
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
    ) -> dict:
        """Link every period's positions to persistent tracks, find moves and their confidence.

        Periods aligned before keep their tracks exactly (new periods are
        aligned after them) unless ``rebuild``; track names are kept by track
        id.  Each move's ``confidence`` is the share of ``draws`` bootstrap
        replicates (each period's events resampled with replacement and both
        periods refitted with the fit's own settings) in which the move is
        reproduced (:func:`tracker.longitudinal.confidence.move_confidence`);
        ``draws=0`` skips it.  Moves into or out of the no-tie track (0) are
        left out unless ``include_isolates``: in sparse data an actor with no
        event in one year has not changed role.

        Returns ``{"fit", "tracks", "moves", "periods", "new_periods"}``.
        """
        from tracker.longitudinal.align import align as align_positions
        from tracker.longitudinal.movement import moves as find_moves

        info = self.store.current_fit(fit)
        fit_id = info["id"]
        seed = info["seed"] if seed is None else seed
        params = {"weight_overlap": weight_overlap, "link_threshold": link_threshold,
                  "split_threshold": split_threshold, "max_gap": max_gap, "draws": draws, "seed": seed,
                  "include_isolates": include_isolates}
        periods = self._aligned_inputs(fit_id)
        if not periods:
            raise UsageError(f"fit {fit_id} has no fitted periods; run roletrail fit first")
        joint = bool(info["params"].get("options", {}).get("joint"))
        previous = None if rebuild or joint else self._stored_alignment(fit_id, [p.period for p in periods])
        done = 0 if previous is None else len(previous.periods)
        if joint:
            alignment = _identity_alignment(periods)
        else:
            alignment = align_positions(periods, previous=previous, weight_overlap=weight_overlap,
                                        link_threshold=link_threshold, split_threshold=split_threshold, max_gap=max_gap)
        if rebuild and not joint:
            alignment = _carry_track_ids(alignment, periods, self.store.track_positions(fit_id), self.store.memberships(fit_id))
        members = _memberships_with_tracks(periods, alignment)
        order = [p.period for p in periods]
        moves = find_moves(members, order, ignore_tracks=() if include_isolates else (0,))
        moves = moves[["actor", "from_period", "to_period", "from_track", "to_track"]].copy()
        moves["confidence"] = np.nan
        if joint and len(moves):
            # Posterior of leaving track a and being in track b: the product of the two
            # marginal posteriors (the chain's pairwise posterior is not stored).
            conf = self.store.memberships(fit_id).set_index(["period", "actor"])["confidence"]
            moves["confidence"] = [conf.get((f, a), np.nan) * conf.get((t, a), np.nan)
                                   for a, f, t in zip(moves["actor"], moves["from_period"], moves["to_period"])]
        elif draws and len(moves):
            moves["confidence"] = self._move_confidence(info, periods, alignment, moves, draws, seed)
        self.store.save_alignment(fit_id, params, alignment, moves)
        return {"fit": fit_id, "tracks": self.tracks(fit_id), "moves": self.store.moves(fit_id),
                "periods": len(order), "new_periods": len(order) - done}

    def _aligned_inputs(self, fit_id: int) -> list:
        from tracker.longitudinal.align import PeriodPositions

        members = self.store.memberships(fit_id)
        blocks = self.store.blocks(fit_id)
        fp = self.store.fit_periods(fit_id).set_index("period")
        out = []
        for period in [p for p in self.periods() if p in fp.index]:
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

    def _stored_alignment(self, fit_id: int, periods: list[str]):
        """The stored alignment of the longest prefix of ``periods`` that is still aligned, or None."""
        from tracker.longitudinal.align import Alignment, Link, TrackInfo

        positions = self.store.track_positions(fit_id)
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
        for row in self.store.tracks(fit_id).itertuples(index=False):
            seen = [p for p in prefix if row.track in assignment[p]]
            if not seen:
                continue
            ended = row.ended if row.ended in inside else None
            tracks[int(row.track)] = TrackInfo(
                int(row.track), seen[0], seen[-1], None if pd.isna(row.parent) else int(row.parent),
                None if ended is None or pd.isna(row.merged_into) else int(row.merged_into), ended, bool(row.isolates),
            )
        links = []
        for l in self.store.track_links(fit_id).itertuples(index=False):
            if (l.to_period is not None and l.to_period not in inside) or (l.from_period is not None and l.from_period not in inside):
                continue
            links.append(Link(l.from_period, l.to_period, _int(l.from_track), _int(l.to_track),
                              None if _int(l.from_position) is None else _int(l.from_position) - 1,
                              None if _int(l.to_position) is None else _int(l.to_position) - 1,
                              _float(l.similarity), _float(l.overlap), _float(l.role_similarity), l.kind))
        links.sort(key=lambda l: rank.get(l.to_period or l.from_period, 0))
        return Alignment(tuple(prefix), dict(sorted(tracks.items())), assignment, links)

    def _move_confidence(self, info: dict, periods: list, alignment, moves: pd.DataFrame, draws: int, seed: int):
        """Bootstrap confidence of each move, refitting with the fit's own procedure.

        A smoothed fit is refitted under the smoothed model with the other
        periods held as fitted (:func:`tracker.longitudinal.smoothing.smoothed_refitter`);
        a per-period fit by its method alone.
        """
        from tracker.blockmodel.fitting import FitSettings, smoothing_applies
        from tracker.blockmodel.partition import Partition
        from tracker.blockmodel.positions import find_positions
        from tracker.longitudinal.confidence import move_confidence
        from tracker.longitudinal.smoothing import smoothed_refitter

        params = info["params"]
        settings = FitSettings(**{**params, "relations": tuple(params["relations"]) if params.get("relations") else None})
        by_period = {p.period: p for p in periods}
        smoothed = smoothing_applies(settings) and len(periods) > 1
        needed = [p.period for p in periods] if smoothed else sorted(set(moves["from_period"]) | set(moves["to_period"]))
        snaps = {s.period: s for s in self.store.snapshots(needed, settings.relations)}
        directed = next(iter(snaps.values())).directed
        if smoothed:
            n_ordinary = max(p.n_positions - (p.isolates is not None) for p in periods)
            refit = smoothed_refitter(
                [snaps[p.period].matrices for p in periods], directed, [p.actors for p in periods],
                [p.period for p in periods],
                [Partition(p.labels, p.n_positions, p.isolates) for p in periods], n_ordinary,
                change_penalty=None if settings.smoothing == "auto" else float(settings.smoothing),
            )
        else:
            def refit(period, matrices):
                # The fit's own settings; the number of positions as fitted (not re-chosen by "auto").
                pp = by_period[period]
                k = pp.n_positions - (1 if pp.isolates is not None else 0)
                return find_positions(matrices, directed, max(k, 1), method=settings.method, seed=settings.seed,
                                      criterion=settings.criterion, alpha=settings.alpha, cut=settings.cut,
                                      **settings.options).labels

        return move_confidence(
            moves, refit,
            matrices={p: snaps[p].matrices for p in needed}, directed=directed,
            actors={p: snaps[p].actors for p in needed}, labels={p: by_period[p].labels for p in needed},
            assignment={p: alignment.assignment[p] for p in needed}, draws=draws, seed=seed,
        )

    def tracks(self, fit: int | None = None) -> pd.DataFrame:
        """Tracks of the current (or a chosen) fit: id, name, first and last period, parent, merges, size."""
        fit_id = self.store.current_fit(fit)["id"]
        tracks = self.store.tracks(fit_id)
        if tracks.empty:
            return tracks.assign(periods=[], mean_size=[])
        members = self.memberships(fit_id)
        sizes = members.groupby(["track", "period"]).size().groupby("track").agg(["count", "mean"])
        tracks["periods"] = tracks["track"].map(sizes["count"]).fillna(0).astype(int)
        tracks["mean_size"] = tracks["track"].map(sizes["mean"]).round(1)
        tracks["name"] = [n if isinstance(n, str) else ("no ties" if iso else f"T{t}")
                          for t, n, iso in zip(tracks["track"], tracks["name"], tracks["isolates"])]
        return tracks

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
        names = _track_names(self.store.tracks(fit_id))
        moves["from_name"] = moves["from_track"].map(names)
        moves["to_name"] = moves["to_track"].map(names)
        return moves

    def transitions(self, fit: int | None = None, *, include_isolates: bool = True) -> pd.DataFrame:
        """Transition counts and row shares between tracks, per step and pooled ("all")."""
        from tracker.longitudinal.movement import transitions

        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        members = self.memberships(fit_id)
        return transitions(members, self._fitted_periods(fit_id), ignore_tracks=() if include_isolates else (0,))

    def trajectories(self, fit: int | None = None) -> pd.DataFrame:
        """Each actor's track in each period (wide: one column per period), with entry and exit periods."""
        from tracker.longitudinal.movement import trajectories

        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        return trajectories(self.memberships(fit_id), self._fitted_periods(fit_id)).reset_index()

    def mobility(self, fit: int | None = None) -> pd.DataFrame:
        """Per step: actors present in both periods, movers, mobility rate, entries, exits."""
        from tracker.longitudinal.movement import mobility

        fit_id = self.store.current_fit(fit)["id"]
        self._require_alignment(fit_id)
        return mobility(self.memberships(fit_id), self._fitted_periods(fit_id), ignore_tracks=(0,))

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
        periods = self._fitted_periods(fit_id)
        tables: dict = {"summary": self.summary()}
        tables["summary"] = tables["summary"][tables["summary"]["period"].isin(periods)]
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
            tracks = self.tracks(fit_id)
            names = _track_names(tracks)
            tracks["kind"] = ["split" if not pd.isna(p) else "birth" for p in tracks["parent"]]
            tracks["parent"] = [names.get(int(p), f"T{int(p)}") if not pd.isna(p) else "" for p in tracks["parent"]]
            tables["tracks"] = tracks
            tables["moves"] = self.moves(fit_id)
            tables["transitions"] = self.transitions(fit_id)
        tables["blocks"] = blocks
        fp = self.store.fit_periods(fit_id)
        diag = []
        for row in fp.itertuples(index=False):
            auto = row.diagnostics.get("auto") if isinstance(row.diagnostics, dict) else None
            if auto:
                diag += [{"period": row.period, **entry} for entry in auto]
            else:
                diag.append({"period": row.period, "k": row.positions - (0 if pd.isna(row.isolates_position) else 1),
                             "inconsistencies": row.inconsistencies,
                             "density_correlation": row.density_correlation, "chosen": True})
        tables["diagnostics"] = pd.DataFrame(diag)
        tables["permutation"] = fp[["period", "density_correlation", "p_value"]].rename(
            columns={"density_correlation": "observed"})
        structures = self.structures(fit=fit_id, draws=structure_draws)
        tables["structures"] = structures.drop(columns=["parts"], errors="ignore")
        tables["structure_sentences"] = self.structure_sentences(structures)
        params = info["params"]
        relations = self.store.relations()
        meta = {
            "study": self.path.name if self.path else "study",
            "method": params["method"], "positions": params["positions"], "criterion": params["criterion"],
            "alpha": params.get("alpha"), "cut": params.get("cut"), "seed": params["seed"],
            "permutation draws": params.get("draws"), "smoothing": params.get("smoothing"),
            "options": ", ".join(f"{k}={v}" for k, v in (params.get("options") or {}).items()) or None,
            "fit": fit_id, "fitted with version": info["version"], "version": __version__,
            "created": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
            "relations": [f"{r.name} ({'directed' if r.directed else 'undirected'})" for r in relations],
            "counts": self.store.counts(),
        }
        alignment = self.store.alignment_params(fit_id)
        if alignment:
            meta["alignment"] = ", ".join(f"{k}={v}" for k, v in alignment.items())
        return tables, periods, meta

    def report(self, path: str | os.PathLike, *, fit: int | None = None, anonymise: bool = False,
               structure_draws: int = 199) -> Path:
        """Write the self-contained offline HTML report; returns its path."""
        from tracker.report.html import build_report

        tables, periods, meta = self.report_tables(fit, structure_draws=structure_draws)
        html = build_report(tables, periods, meta, anonymise=anonymise)
        path = Path(path)
        path.write_text(html, encoding="utf-8")
        return path

    def chart(self, name: str, path: str | os.PathLike, *, fit: int | None = None, **options) -> Path:
        """Write one chart as PNG, SVG or Vega-Lite JSON (by the file's suffix)."""
        from tracker.report.charts import CHARTS, make_chart, save_chart

        if name not in CHARTS:
            raise UsageError(f"unknown chart {name!r}; use one of: {', '.join(CHARTS)}")
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


def _core_periphery_check(matrix, seed, discrete, continuous) -> tuple[float, float]:
    """Borgatti-Everett discrete and continuous correlations, NaN where undefined (too few actors)."""
    from tracker.errors import UsageError as _Usage

    try:
        _, r_discrete = discrete(matrix, seed=seed)
    except _Usage:
        r_discrete = float("nan")
    try:
        _, r_continuous = continuous(matrix)
    except _Usage:
        r_continuous = float("nan")
    return float(r_discrete), float(r_continuous)


def _int(value):
    return None if value is None or pd.isna(value) else int(value)


def _float(value):
    return float("nan") if value is None or pd.isna(value) else float(value)


def _track_names(tracks: pd.DataFrame) -> dict[int, str]:
    """track id -> display name (the user's name, "no ties" for track 0, else T<id>)."""
    return {
        int(t): (n if isinstance(n, str) and n else ("no ties" if iso else f"T{t}"))
        for t, n, iso in zip(tracks["track"], tracks["name"], tracks["isolates"])
    }


def _identity_alignment(periods):
    """Tracks of a joint fit: position k is track k + 1 in every period; isolates track 0."""
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


def _memberships_with_tracks(periods, alignment) -> pd.DataFrame:
    from tracker.longitudinal.align import memberships

    return memberships(periods, alignment)


def _carry_track_ids(alignment, periods, old_positions: pd.DataFrame, old_members: pd.DataFrame):
    """After a rebuild, give new tracks the ids (and so the names) of the old tracks they match best.

    Matching: maximum-weight one-to-one matching (Hungarian method) on the
    number of (period, actor) memberships two tracks share.
    """
    import dataclasses

    from tracker.longitudinal.align import Alignment, max_weight_matching

    if old_positions.empty:
        return alignment
    old = old_members.merge(old_positions, on=["period", "position"])
    new = _memberships_with_tracks(periods, alignment)
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
