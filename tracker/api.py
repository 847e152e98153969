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

import os
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from tracker.errors import UsageError
from tracker.ingest.events import EventMapping, validate_events
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
        date_format: str | None = None,
        delimiter: str | None = None,
        replace: bool = False,
        progress: Progress | None = None,
    ) -> ImportReport:
        """Import a file of dyadic events (CSV or Parquet) as one batch.

        One row per event: source, target, a date (cut into periods by
        ``period``: ``year``, ``quarter``, ``month`` or ``Ny``) or a period
        label (``period_column``), a relation (column or fixed name) and an
        optional weight.  The import is one transaction: on any error nothing
        is written.  Self-ties are dropped and counted.  Importing the same
        content twice is refused unless ``replace`` (which swaps the earlier
        batch, or the latest batch of the same file name, atomically).
        """
        mapping = EventMapping(
            source=source, target=target, date=date, period_column=period_column,
            period=period, period_origin=period_origin, relation=relation,
            relation_name=relation_name, weight=weight, undirected=undirected,
            date_format=date_format, delimiter=delimiter,
        )
        scheme = PeriodScheme("column") if period_column else parse_scheme(period, period_origin)
        table = open_table(path, delimiter=delimiter)
        table.require(mapping.columns())
        digest = file_hash(table.path)

        def chunks():
            for _, frame in table.chunks():
                yield validate_events(frame, mapping, scheme, table.name)
                if progress is not None:
                    progress(table.bytes_read, table.size)

        return self.store.import_events(
            file_name=table.name, content_hash=digest, mapping=mapping.as_dict(), scheme=scheme,
            directed=not undirected, chunks=chunks(), replace=replace,
        )

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
        roster = validate_roster(frame, actor=actor, first=first, last=last, scheme=self.store.period_scheme(), file=table.name)
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

    def batches(self) -> pd.DataFrame:
        """Imported files: batch id, kind, file, rows read and loaded, self-ties dropped, time, hash."""
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
        smoothing: float = 0.0,
        progress: Callable[[str], None] | None = None,
    ) -> dict:
        """Find positions in each period (all by default) and store the fit.

        Returns ``{"fit": id, "periods": DataFrame}`` with one row per fitted
        period (positions, inconsistencies, density correlation, p-value).
        A fit with the same settings as an earlier one extends it (new
        periods) or refreshes it; other settings make a new fit.  Either way
        the fit becomes current.
        """
        from tracker import __version__
        from tracker.blockmodel.fitting import FitSettings, fit_snapshot

        settings = FitSettings(
            method=method, positions=positions, criterion=criterion, alpha=alpha, cut=cut, seed=seed,
            relations=tuple(relations) if relations else None, draws=draws, k_min=k_min, k_max=k_max,
            options=dict(options or {}), smoothing=smoothing,
        )
        labels = self._period_selection(periods)
        results = []
        if settings.smoothing > 0:
            from tracker.longitudinal.smoothing import smoothed_fits

            results = smoothed_fits(self.store.snapshots(labels, settings.relations), settings, progress=progress)
        else:
            for snap in self.store.snapshots(labels, settings.relations):
                results.append(fit_snapshot(snap, settings))
                if progress is not None:
                    progress(snap.period)
        fit_id = self.store.save_fit(settings, results, __version__)
        return {"fit": fit_id, "periods": self.store.fit_periods(fit_id).drop(columns=["diagnostics"])}

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
        """period, actor, position (1-based), isolate for the current (or a chosen) fit."""
        return self.store.memberships(self.store.current_fit(fit)["id"])

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
        from tracker.structures.ideal import classify_image

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
                best = classify_image(img, draws=draws, seed=seed)[0]
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
        return {}


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
