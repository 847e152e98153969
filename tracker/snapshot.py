"""One period's ties as sparse matrices: the object every maths module works on.

A :class:`Snapshot` holds the actors present in a period (in a fixed order) and,
for each relation, an ``n x n`` :class:`scipy.sparse.csr_array` of tie values
(number of events, or sum of weights).  The diagonal is always empty (self-ties
are dropped on import).  An undirected relation is stored symmetric: the value of
the unordered pair {i, j} sits at both ``[i, j]`` and ``[j, i]``.

Nothing here reads SQL: the store builds snapshots from its tables with
:func:`build_snapshot`, and maths code receives them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import networkx as nx
import numpy as np
import scipy.sparse as sp

__all__ = ["Relation", "Snapshot", "build_snapshot"]


@dataclass(frozen=True)
class Relation:
    """A type of tie: its name and whether it has a direction."""

    name: str
    directed: bool = True


@dataclass(frozen=True, eq=False)
class Snapshot:
    """The ties of one period.

    Attributes
    ----------
    period : str
        The period's label (``"2019"``, ``"2019Q3"``, ``"2019-2020"`` ...).
    actors : tuple of str
        Actors present in the period, in matrix order.
    relations : tuple of Relation
        The relations, in the order of ``matrices``.
    matrices : tuple of scipy.sparse.csr_array
        One ``n x n`` float matrix per relation; zero diagonal; symmetric when the
        relation is undirected.
    """

    period: str
    actors: tuple[str, ...]
    relations: tuple[Relation, ...]
    matrices: tuple[sp.csr_array, ...]

    @property
    def n(self) -> int:
        """Number of actors present."""
        return len(self.actors)

    @property
    def directed(self) -> tuple[bool, ...]:
        """Directedness of each relation, in matrix order."""
        return tuple(r.directed for r in self.relations)

    def matrix(self, relation: str) -> sp.csr_array:
        """The tie-value matrix of one relation."""
        for rel, mat in zip(self.relations, self.matrices):
            if rel.name == relation:
                return mat
        raise KeyError(relation)

    def select(self, relations: Sequence[str]) -> "Snapshot":
        """The same period restricted to some relations (in the order given)."""
        idx = [[r.name for r in self.relations].index(name) for name in relations]
        return Snapshot(
            self.period,
            self.actors,
            tuple(self.relations[i] for i in idx),
            tuple(self.matrices[i] for i in idx),
        )

    def tied(self) -> np.ndarray:
        """Boolean mask of actors with at least one tie (sent or received) in any relation."""
        mask = np.zeros(self.n, dtype=bool)
        for mat in self.matrices:
            coo = mat.tocoo()
            mask[coo.row] = True
            mask[coo.col] = True
        return mask

    def to_networkx(self, relation: str | None = None) -> nx.Graph:
        """The snapshot of one relation as a networkx graph.

        Nodes are actor labels (all present actors, isolates included); edges
        carry the tie value as ``weight``.  A directed relation gives a
        :class:`networkx.DiGraph`, an undirected one a :class:`networkx.Graph`.
        """
        if relation is None:
            if len(self.relations) != 1:
                raise ValueError("name a relation: this snapshot holds several")
            relation = self.relations[0].name
        rel = next(r for r in self.relations if r.name == relation)
        graph = nx.DiGraph() if rel.directed else nx.Graph()
        graph.add_nodes_from(self.actors)
        coo = self.matrix(relation).tocoo()
        keep = np.ones(coo.nnz, dtype=bool) if rel.directed else coo.row < coo.col
        actors = np.asarray(self.actors, dtype=object)
        graph.add_weighted_edges_from(
            zip(actors[coo.row[keep]], actors[coo.col[keep]], coo.data[keep].tolist())
        )
        return graph


def build_snapshot(
    period: str,
    actors: Sequence[str],
    relations: Sequence[Relation],
    ties: Sequence[tuple[np.ndarray, np.ndarray, np.ndarray]],
) -> Snapshot:
    """Assemble a snapshot from index arrays.

    Parameters
    ----------
    period : str
    actors : sequence of str
        Present actors, in matrix order.
    relations : sequence of Relation
    ties : sequence of (rows, cols, values)
        One triple of equal-length arrays per relation; ``rows``/``cols`` index
        ``actors``.  For an undirected relation each unordered pair appears once
        (either orientation); it is mirrored here.  Self-ties are ignored.
    """
    n = len(actors)
    mats = []
    for rel, (rows, cols, vals) in zip(relations, ties):
        rows = np.asarray(rows, dtype=np.int64)
        cols = np.asarray(cols, dtype=np.int64)
        vals = np.asarray(vals, dtype=np.float64)
        off = rows != cols
        rows, cols, vals = rows[off], cols[off], vals[off]
        if not rel.directed:
            lo, hi = np.minimum(rows, cols), np.maximum(rows, cols)
            rows, cols, vals = np.concatenate([lo, hi]), np.concatenate([hi, lo]), np.concatenate([vals, vals])
        mat = sp.csr_array((vals, (rows, cols)), shape=(n, n), dtype=np.float64)
        mat.sum_duplicates()
        mat.eliminate_zeros()
        mats.append(mat)
    return Snapshot(period, tuple(actors), tuple(relations), tuple(mats))
