"""Longitudinal maths: positions followed across periods, and the actors who move.

Pure functions on arrays and data frames (no database, no printing, no files)::

    align.py        persistent tracks from per-period positions (Hungarian method on
                    membership overlap and role similarity; births, ends, splits, merges)
    smoothing.py    evolutionary fitting: each method's own objective plus a cost per change
    movement.py     trajectories, moves, transition tables, mobility per step
    confidence.py   calibrated move confidence (parametric bootstrap from the fitted model)
"""

from tracker.longitudinal.align import (
    ISOLATES_TRACK,
    Alignment,
    Link,
    PeriodPositions,
    TrackInfo,
    align,
    max_weight_matching,
    memberships,
)
from tracker.longitudinal.confidence import MoveCalibrator, move_features, reliability, simulate_period
from tracker.longitudinal.movement import mobility, moves, stayers, trajectories, transitions
from tracker.longitudinal.smoothing import (
    DEFAULT_PENALTY,
    evolutionary_partitions,
    smoothed_fits,
    smoothing_penalty,
)

__all__ = [
    "ISOLATES_TRACK",
    "Alignment",
    "Link",
    "PeriodPositions",
    "TrackInfo",
    "align",
    "max_weight_matching",
    "memberships",
    "MoveCalibrator",
    "move_features",
    "reliability",
    "simulate_period",
    "mobility",
    "moves",
    "stayers",
    "trajectories",
    "transitions",
    "DEFAULT_PENALTY",
    "evolutionary_partitions",
    "smoothed_fits",
    "smoothing_penalty",
]
