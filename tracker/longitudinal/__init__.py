"""Longitudinal maths: positions followed across periods, and the actors who move.

Pure functions on arrays and data frames (no database, no printing, no files)::

    align.py        persistent tracks from per-period positions (Hungarian method on
                    membership overlap and role similarity; births, ends, splits, merges)
    smoothing.py    evolutionary blockmodel: per-period fits that pay for change
    movement.py     trajectories, moves, transition tables, mobility per step
    confidence.py   how often a move survives resampling the period's events
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
from tracker.longitudinal.confidence import move_confidence, resample_matrices
from tracker.longitudinal.movement import mobility, moves, stayers, trajectories, transitions
from tracker.longitudinal.smoothing import (
    default_change_penalty,
    smoothed_fits,
    smoothed_partitions,
    smoothed_refitter,
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
    "move_confidence",
    "resample_matrices",
    "mobility",
    "moves",
    "stayers",
    "trajectories",
    "transitions",
    "default_change_penalty",
    "smoothed_fits",
    "smoothed_partitions",
    "smoothed_refitter",
]
