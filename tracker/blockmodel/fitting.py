"""Fitting one period: positions, blocks, images under every criterion, goodness of fit.

:func:`fit_snapshot` is the pure function the API calls once per period; it
bundles :func:`tracker.blockmodel.positions.find_positions`,
:func:`tracker.blockmodel.blocks.block_stats`,
:func:`tracker.blockmodel.image.image` and returns one
:class:`PeriodFit`.  The settings of a fit are one :class:`FitSettings`.
The fit test (refits on null-model draws, :mod:`tracker.inference.fit_test`)
runs over all periods at once in :func:`tracker.pipeline.fitting.run_fit`.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass, field

import numpy as np

from tracker.blockmodel.blocks import BlockStats, block_stats
from tracker.blockmodel.goodness import density_correlation, inconsistencies
from tracker.blockmodel.image import CRITERIA, image, perfect_fit
from tracker.blockmodel.partition import Partition
from tracker.blockmodel.positions import find_positions
from tracker.errors import UsageError
from tracker.snapshot import Snapshot

__all__ = ["FitSettings", "PeriodFit", "fit_snapshot", "fit_partition"]


@dataclass(frozen=True)
class FitSettings:
    """Every setting of a fit (stored with it, so a result can be reproduced).

    Attributes
    ----------
    method : str
        ``"dynamic"`` (the default: one dynamic blockmodel over all periods,
        :func:`tracker.pipeline.fitting.fit_dynamic`) or a method name of
        :data:`tracker.blockmodel.positions.METHODS` (fitted period by period).
    positions : int or "auto"
        Positions of the tied actors (the isolates' position comes on top).
    criterion : str
        Image criterion used for the stored image and inconsistencies.
    alpha, cut : float, optional
        Thresholds of the ``density`` and ``max-value`` criteria.
    seed : int
    relations : tuple of str, optional
        Relations fitted jointly (default all).
    draws : int
        Null-model draws of the fit test, each one refit of the period
        (0 = no test; see :mod:`tracker.inference.fit_test`).
    null_model : str
        ``"ties"`` (default: number of ties and tie values kept per relation)
        or ``"degrees"`` (every actor's degrees kept).
    k_min, k_max : int
        Range of K tried by ``positions="auto"``.
    options : dict
        Method options (``linkage``, ``measure``, ``restarts``, ``exact``,
        ``degree_corrected`` ...).
    smoothing : float or "auto"
        Relative change penalty ``c`` of evolutionary fitting across periods
        (:mod:`tracker.longitudinal.smoothing`): the method's own objective plus
        ``c`` times its per-actor objective scale for each change; 0 fits each
        period alone with exactly the method's own call.  ``"auto"`` (the
        default) is ``c = 0.5`` for the methods that define a penalty
        (structural, CONCOR, optimize) and 0 for the others; a number above 0
        for another method is refused.  Joint SBM fits link periods themselves.
    """

    method: str = "dynamic"
    positions: int | str = 4
    criterion: str = "zero-block"
    alpha: float | None = None
    cut: float | None = None
    seed: int = 0
    relations: tuple[str, ...] | None = None
    draws: int = 39
    k_min: int = 2
    k_max: int = 8
    options: dict = field(default_factory=dict)
    smoothing: float | str = "auto"
    null_model: str = "ties"

    def __post_init__(self) -> None:
        if self.null_model not in ("ties", "degrees"):
            raise UsageError(f"--null takes 'ties' or 'degrees', not {self.null_model!r}")
        if isinstance(self.smoothing, str) and self.smoothing != "auto":
            raise UsageError(f"--smooth takes 'auto', 'off' or a relative penalty (a number), not {self.smoothing!r}")
        if not isinstance(self.smoothing, str) and self.smoothing < 0:
            raise UsageError("--smooth must be 0 or more")
        if self.criterion not in CRITERIA:
            raise UsageError(f"unknown criterion {self.criterion!r}; use one of: {', '.join(CRITERIA)}")
        if isinstance(self.positions, str) and self.positions != "auto":
            raise UsageError(f"--positions takes a whole number or 'auto', not {self.positions!r}")
        if not isinstance(self.positions, str) and int(self.positions) < 1:
            raise UsageError("--positions must be at least 1")
        if self.draws < 0:
            raise UsageError("--draws must be 0 or more")
        if self.alpha is not None and not 0 <= self.alpha <= 1:
            raise UsageError(f"--alpha must lie between 0 and 1, not {self.alpha}")
        if not 1 <= self.k_min <= self.k_max:
            raise UsageError("the range of positions tried needs 1 <= min <= max")
        from tracker.blockmodel.options import check_options

        object.__setattr__(self, "options", check_options(self.method, self.options))

    def as_dict(self) -> dict:
        out = asdict(self)
        out["relations"] = list(self.relations) if self.relations is not None else None
        return out

    def key(self) -> str:
        """A hash of the settings: fits with equal keys are the same fit, extended period by period."""
        return hashlib.sha256(json.dumps(self.as_dict(), sort_keys=True, default=str).encode()).hexdigest()[:32]


@dataclass(frozen=True, eq=False)
class PeriodFit:
    """The result of fitting one period."""

    period: str
    actors: tuple[str, ...]
    relations: tuple[str, ...]
    partition: Partition
    stats: BlockStats
    images: dict  # criterion -> (R, B, B) 0/1 array
    criterion: str
    inconsistencies: float
    density_correlation: float
    perfect_fit: bool
    p_value: float | None
    draws: int
    diagnostics: dict
    confidence: np.ndarray | None = None  # per actor: posterior probability of its position, when known
    null_model: str | None = None  # null model of the fit test, when run

    @property
    def image(self) -> np.ndarray:
        return self.images[self.criterion]


def fit_partition(snapshot: Snapshot, partition: Partition, settings: FitSettings) -> PeriodFit:
    """Blocks, images and goodness of fit of a given partition of one period."""
    matrices, directed = snapshot.matrices, snapshot.directed
    stats = block_stats(matrices, directed, partition)
    images = {c: image(stats, c, alpha=settings.alpha, cut=settings.cut) for c in CRITERIA}
    errors = inconsistencies(stats, images[settings.criterion])
    p_value = None  # the fit test runs over all periods at once (tracker.pipeline.fitting.run_fit)
    diagnostics = {k: v for k, v in partition.diagnostics.items() if k != "fit"}
    return PeriodFit(
        period=snapshot.period,
        actors=snapshot.actors,
        relations=tuple(r.name for r in snapshot.relations),
        partition=partition,
        stats=stats,
        images=images,
        criterion=settings.criterion,
        inconsistencies=float(errors.sum()),
        density_correlation=float(density_correlation(stats)),
        perfect_fit=bool(perfect_fit(stats)),
        p_value=p_value,
        draws=0,
        diagnostics=_plain(diagnostics),
    )


def fit_snapshot(snapshot: Snapshot, settings: FitSettings, **extra) -> PeriodFit:
    """Find positions in one period and describe them.

    ``extra`` goes to the method (``init_labels``/``prior_labels``/
    ``change_penalty`` for smoothing).
    """
    if snapshot.n == 0:
        raise UsageError(f"period {snapshot.period} has no actors present")
    positions = settings.positions
    partition = find_positions(
        snapshot.matrices, snapshot.directed, positions,
        method=settings.method, seed=settings.seed, criterion=settings.criterion,
        alpha=settings.alpha, cut=settings.cut, k_range=(settings.k_min, settings.k_max),
        **settings.options, **extra,
    )
    return fit_partition(snapshot, partition, settings)


def _plain(value):
    """Diagnostics as JSON-ready values."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value
