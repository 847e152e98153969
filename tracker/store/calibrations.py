"""Calibration checks of a fit's move confidence (the ``calibrations`` table)."""

from __future__ import annotations

import json

from sqlalchemy import insert, select

from tracker.store._sql import StoreBase, _now
from tracker.store.models import Calibration

__all__ = ["CalibrationStore"]


class CalibrationStore(StoreBase):
    def save_calibration(self, fit_id: int, result: dict) -> int:
        """Store one calibration check of a fit; returns its id."""
        with self._write() as conn:
            row = conn.execute(insert(Calibration).values(
                fit_id=int(fit_id), studies=int(result["studies"]), ece=result.get("ece"),
                result=json.dumps(result, sort_keys=True), checked_at=_now(),
            ))
            return int(row.inserted_primary_key[0])

    def latest_calibration(self, fit_id: int) -> dict | None:
        """The last calibration check of a fit (its result with ``id`` and ``checked_at``), or None."""
        with self.engine.connect() as conn:
            row = conn.execute(select(Calibration.id, Calibration.result, Calibration.checked_at)
                               .where(Calibration.fit_id == int(fit_id))
                               .order_by(Calibration.id.desc()).limit(1)).first()
        if row is None:
            return None
        return {**json.loads(row.result), "id": int(row.id), "checked_at": str(row.checked_at)}
