"""A study on disk made from planted dynamic blockmodel data (tests/helpers/planted.py), with its truth."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from tests.helpers.planted import planted_dynamic

__all__ = ["WEAK_SPARSE", "planted_events", "planted_study", "score_moves"]

#: Sparse planted data with weak block contrast: 4 positions, about 2% density
#: (0.25 x 0.05 + 0.75 x 0.01), 15 planted single moves.
WEAK_SPARSE = dict(n_actors=160, n_positions=4, n_periods=6, density_in=0.05, density_out=0.01, movers=15,
                   core=False)


def planted_events(path: Path, **kwargs) -> pd.DataFrame:
    """Write the planted ties as an event CSV (source, target, date, one row per event); return the true moves."""
    snaps, _, true_moves = planted_dynamic(**kwargs)
    rows = []
    for period, actors, mats, _ in snaps:
        coo = mats[0].tocoo()
        keep = coo.row < coo.col
        for i, j, v in zip(coo.row[keep], coo.col[keep], coo.data[keep]):
            rows.extend([(actors[i], actors[j], f"{period}-06-01")] * int(v))
    pd.DataFrame(rows, columns=["source", "target", "date"]).to_csv(path, index=False)
    return true_moves


def planted_study(folder: Path, name: str = "planted.db", **kwargs):
    """(Study, true moves) for planted data imported as an undirected relation by year."""
    from tracker.api import Study

    folder = Path(folder)
    true_moves = planted_events(folder / f"{name}.csv", **kwargs)
    study = Study(folder / name)
    study.import_events(folder / f"{name}.csv", source="source", target="target", date="date", undirected=True)
    return study, true_moves


def score_moves(found: pd.DataFrame, true_moves: pd.DataFrame) -> np.ndarray:
    """Whether each found move is a planted one (same actor, same destination period)."""
    want = set(zip(true_moves["actor"], true_moves["to_period"].astype(str)))
    return np.array([(a, str(p)) in want for a, p in zip(found["actor"], found["to_period"])], dtype=bool)
