"""Fits, fitted periods, memberships and blocks: the only SQL of fits.
"""

from __future__ import annotations

import json
from typing import Sequence

import numpy as np
import pandas as pd
from sqlalchemy import delete, func, insert, select, update

from tracker.errors import StoreError, UsageError
from tracker.store.models import (
    Actor, Block, Fit, FitPeriod, Membership, Period, RelationRow,
)

from tracker.store._sql import _code_points, _driver_rows, _now, StoreBase

__all__ = ["FitStore"]


class FitStore(StoreBase):
    """Saving and reading fits."""

    # ------------------------------------------------------------------ fits
    def save_fit(self, settings, period_fits: Sequence, software_version: str) -> int:
        """Store per-period fits under their settings, in one transaction.

        Settings equal to an existing fit's extend or refresh that fit (its other
        periods stay); new settings make a new fit.  The fit becomes current.
        """
        now = _now()
        key = settings.key()
        with self._write() as conn:
            fit_id = conn.execute(select(Fit.id).where(Fit.settings_key == key).order_by(Fit.id.desc())).scalars().first()
            if fit_id is None:
                fit_id = conn.execute(
                    insert(Fit).values(
                        settings_key=key, method=settings.method, criterion=settings.criterion, seed=settings.seed,
                        params=json.dumps(settings.as_dict(), sort_keys=True, default=str),
                        software_version=software_version, created_at=now, updated_at=now, current=False,
                    )
                ).inserted_primary_key[0]
            else:
                conn.execute(update(Fit).where(Fit.id == fit_id).values(updated_at=now, software_version=software_version))
            periods = dict(conn.execute(select(Period.label, Period.id)).all())
            relations = dict(conn.execute(select(RelationRow.name, RelationRow.id)).all())
            aliases = self._aliases(conn)
            self._check_fitted_data(conn, periods, period_fits)
            self._invalidate_alignment(conn, fit_id, [periods[pf.period] for pf in period_fits])
            for pf in period_fits:
                pid = periods[pf.period]
                for model in (Membership, Block, FitPeriod):
                    conn.execute(delete(model).where(model.fit_id == fit_id, model.period_id == pid))
                part = pf.partition
                iso = None if part.isolates is None else part.isolates + 1
                conn.execute(insert(FitPeriod).values(
                    fit_id=fit_id, period_id=pid, n_positions=part.n_positions, isolates_position=iso,
                    inconsistencies=pf.inconsistencies,
                    density_correlation=pf.density_correlation if np.isfinite(pf.density_correlation) else None,
                    perfect_fit=pf.perfect_fit, p_value=pf.p_value, draws=pf.draws,
                    null_model=getattr(pf, "null_model", None),
                    diagnostics=json.dumps(pf.diagnostics, default=str), fitted_at=now,
                ))
                labels = part.labels
                conf = pf.confidence if pf.confidence is not None else [None] * len(labels)
                conn.execute(insert(Membership), [
                    {"fit_id": fit_id, "period_id": pid, "actor_id": aliases[a], "position": int(l) + 1,
                     "isolate": iso is not None and int(l) + 1 == iso,
                     "confidence": None if c is None or not np.isfinite(c) else float(c)}
                    for a, l, c in zip(pf.actors, labels, conf)
                ])
                st = pf.stats
                density, mean = st.density, st.mean_value
                rows = []
                for r, rel in enumerate(pf.relations):
                    for k in range(st.n_positions):
                        for l in range(st.n_positions):
                            row = {
                                "fit_id": fit_id, "period_id": pid, "relation_id": relations[rel],
                                "from_position": k + 1, "to_position": l + 1,
                                "ties": int(st.ties[r, k, l]), "possible": int(st.possible[r, k, l]),
                                "density": float(density[r, k, l]), "mean_value": float(mean[r, k, l]),
                                "max_value": float(st.maximum[r, k, l]),
                                "image": int(pf.image[r, k, l]),
                            }
                            for crit, img in pf.images.items():
                                row["image_" + crit.replace("-", "_")] = int(img[r, k, l])
                            rows.append(row)
                if rows:
                    conn.execute(insert(Block), rows)
            conn.execute(update(Fit).values(current=False))
            conn.execute(update(Fit).where(Fit.id == fit_id).values(current=True))
        return int(fit_id)

    def _check_fitted_data(self, conn, periods: dict, period_fits: Sequence) -> None:
        """Refuse to store fits of data that changed after the fit read it.

        An import, alias or re-cut may commit while a fit computes (the fit
        reads its snapshots, then works without holding the study).  Inside
        the saving transaction each period must still have the actors the fit
        placed and, per relation, the tie count and value total it fitted.
        """
        for pf in period_fits:
            try:
                snap = self._snapshot(conn, pf.period, list(pf.relations)) if pf.period in periods else None
            except UsageError:
                snap = None
            same = snap is not None and tuple(snap.actors) == tuple(pf.actors)
            for r, (rel, mat) in enumerate(zip(snap.relations, snap.matrices) if same else ()):
                half = 1 if rel.directed else 2  # an undirected pair fills two cells
                st = pf.stats
                if mat.nnz != half * int(st.network_ties[r]) or not np.isclose(
                    float(mat.sum()), half * float(st.network_total[r]), rtol=1e-9, atol=0.0
                ):
                    same = False
                    break
            if not same:
                raise StoreError(
                    f"the data of period {pf.period} changed while the fit ran (an import, alias or re-cut at the "
                    "same time); nothing was saved. Run roletrail fit again"
                )


    def fits(self) -> pd.DataFrame:
        """Every fit: id, method, criterion, seed, periods fitted, current, times, version, params."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Fit.id, Fit.method, Fit.criterion, Fit.seed, func.count(FitPeriod.period_id), Fit.current,
                       Fit.created_at, Fit.updated_at, Fit.software_version, Fit.params)
                .outerjoin(FitPeriod, FitPeriod.fit_id == Fit.id).group_by(Fit.id).order_by(Fit.id)
            ).all()
        return pd.DataFrame(rows, columns=["fit", "method", "criterion", "seed", "periods", "current", "created_at",
                                           "updated_at", "version", "params"])

    def current_fit(self, fit_id: int | None = None) -> dict:
        """The chosen fit (or the current one) as a dict with its settings; an error if none."""
        with self.engine.connect() as conn:
            stmt = select(Fit).where(Fit.id == fit_id) if fit_id is not None else select(Fit).where(Fit.current.is_(True))
            fit = conn.execute(stmt).first()
            if fit is None and fit_id is None:
                fit = conn.execute(select(Fit).order_by(Fit.updated_at.desc(), Fit.id.desc())).first()
        if fit is None:
            if fit_id is not None:
                raise UsageError(f"no fit {fit_id} in this study; roletrail fits lists them")
            raise UsageError("this study has no fit yet; run roletrail fit first")
        return {"id": fit.id, "method": fit.method, "criterion": fit.criterion, "seed": fit.seed,
                "params": json.loads(fit.params), "version": fit.software_version,
                "created_at": fit.created_at, "updated_at": fit.updated_at}

    def use_fit(self, fit_id: int) -> None:
        """Make a fit the current one."""
        with self._write() as conn:
            if conn.execute(select(Fit.id).where(Fit.id == fit_id)).first() is None:
                raise UsageError(f"no fit {fit_id} in this study; roletrail fits lists them")
            conn.execute(update(Fit).values(current=False))
            conn.execute(update(Fit).where(Fit.id == fit_id).values(current=True))

    def fit_periods(self, fit_id: int) -> pd.DataFrame:
        """Per-period results of a fit, in time order."""
        with self.engine.connect() as conn:
            rows = conn.execute(
                select(Period.label, FitPeriod.n_positions, FitPeriod.isolates_position, FitPeriod.inconsistencies,
                       FitPeriod.density_correlation, FitPeriod.perfect_fit, FitPeriod.p_value, FitPeriod.draws,
                       FitPeriod.null_model, FitPeriod.diagnostics)
                .join(Period, Period.id == FitPeriod.period_id).where(FitPeriod.fit_id == fit_id)
                .order_by(Period.sort_key)
            ).all()
        frame = pd.DataFrame(rows, columns=["period", "positions", "isolates_position", "inconsistencies",
                                            "density_correlation", "perfect_fit", "p_value", "draws", "null_model",
                                            "diagnostics"])
        frame["diagnostics"] = [json.loads(d) if d else {} for d in frame["diagnostics"]]
        return frame

    def memberships(self, fit_id: int) -> pd.DataFrame:
        """period, actor, position (1-based), isolate, confidence; periods in time order, actors by label."""
        with self.engine.connect() as conn:
            # Plain driver tuples: Row objects cost about 3x the time for the
            # hundreds of thousands of memberships of a large fit.
            rows = _driver_rows(conn,
                select(Period.label, Actor.label, Membership.position, Membership.isolate, Membership.confidence)
                .join(Period, Period.id == Membership.period_id).join(Actor, Actor.id == Membership.actor_id)
                .where(Membership.fit_id == fit_id).order_by(Period.sort_key, _code_points(Actor.label))
            )
        frame = pd.DataFrame(rows, columns=["period", "actor", "position", "isolate", "confidence"])
        frame["isolate"] = frame["isolate"].astype(bool)
        frame["confidence"] = frame["confidence"].astype(float)
        return frame

    def blocks(self, fit_id: int) -> pd.DataFrame:
        """The block table of a fit (every period, relation and ordered pair of positions)."""
        image_cols = [Block.image_zero_block, Block.image_one_block, Block.image_density, Block.image_max_value,
                      Block.image_mean_value, Block.image_above_background]
        with self.engine.connect() as conn:
            rows = _driver_rows(conn,
                select(Period.label, RelationRow.name, Block.from_position, Block.to_position, Block.ties,
                       Block.possible, Block.density, Block.mean_value, Block.max_value, Block.image, *image_cols)
                .join(Period, Period.id == Block.period_id).join(RelationRow, RelationRow.id == Block.relation_id)
                .where(Block.fit_id == fit_id)
                .order_by(Period.sort_key, _code_points(RelationRow.name), Block.from_position, Block.to_position)
            )
        return pd.DataFrame(rows, columns=["period", "relation", "from_position", "to_position", "ties", "possible",
                                           "density", "mean_value", "max_value", "image", "image_zero_block",
                                           "image_one_block", "image_density", "image_max_value", "image_mean_value",
                                           "image_above_background"])


