"""The one representation of a partition of actors into positions."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Partition"]


@dataclass(frozen=True, eq=False)
class Partition:
    """Actors assigned to positions.

    Attributes
    ----------
    labels : numpy.ndarray of int, shape (n,)
        Position of each actor, numbered ``0 .. n_positions - 1``.
    n_positions : int
        Number of positions (including the isolates' position, if any).
    isolates : int or None
        The label of the position that holds the actors present in the period
        but without any tie, or ``None`` when there is no such position.  That
        position is never mixed with others.
    """

    labels: np.ndarray
    n_positions: int
    isolates: int | None = None
    diagnostics: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        labels = np.asarray(self.labels, dtype=np.int64)
        object.__setattr__(self, "labels", labels)
        if labels.size and (labels.min() < 0 or labels.max() >= self.n_positions):
            raise ValueError("labels must lie in 0 .. n_positions - 1")

    @property
    def n(self) -> int:
        return int(self.labels.size)

    def sizes(self) -> np.ndarray:
        """Number of actors in each position."""
        return np.bincount(self.labels, minlength=self.n_positions)

    def indicator(self):
        """The ``n x B`` sparse 0/1 membership matrix ``Z`` (Z[i, k] = 1 if actor i is in k)."""
        import scipy.sparse as sp

        return sp.csr_array(
            (np.ones(self.n), (np.arange(self.n), self.labels)), shape=(self.n, self.n_positions)
        )

    @classmethod
    def from_labels(cls, labels, isolates: int | None = None, **diagnostics) -> "Partition":
        """Build a partition from arbitrary labels, renumbered ``0..B-1`` by first appearance.

        ``isolates`` is the (original) label of the isolates' position, if any.
        """
        labels = np.asarray(labels)
        uniq, first, inverse = np.unique(labels, return_index=True, return_inverse=True)
        order = np.argsort(first, kind="stable")
        rank = np.empty_like(order)
        rank[order] = np.arange(order.size)
        new = rank[inverse]
        iso = None
        if isolates is not None and np.any(labels == isolates):
            iso = int(rank[np.searchsorted(uniq, isolates)])
        return cls(new, int(uniq.size), iso, dict(diagnostics))
