"""Whole-network measures of a snapshot (per relation).

For a relation with n present actors and m ties (distinct ordered pairs for a
directed relation, unordered pairs for an undirected one):

* density = m / (n (n - 1)) directed, m / (n (n - 1) / 2) undirected
  (Wasserman & Faust 1994, sec. 4.2);
* reciprocity (directed only) = share of ties i->j whose reverse j->i is also a
  tie, the definition of :func:`networkx.reciprocity`;
* isolates = present actors with no tie in this relation;
* mean_value = mean tie value over ties (events per tie, or mean weight).
"""

from __future__ import annotations

import numpy as np

from tracker.snapshot import Snapshot

__all__ = ["network_measures", "SPARSE_DENSITY"]

#: Below this density the zero-block criterion is the sensible default: most
#: blocks are empty, and an empty block is the structural signal (FIELD.md sec. 2).
SPARSE_DENSITY = 0.10


def network_measures(snapshot: Snapshot) -> list[dict]:
    """One dict per relation with actors, ties, density, reciprocity, isolates, mean_value, sparse.

    Examples
    --------
    >>> import numpy as np
    >>> from tracker.snapshot import Relation, build_snapshot
    >>> snap = build_snapshot("2019", ["a", "b", "c"], [Relation("aid")],
    ...                       [(np.array([0, 1, 0]), np.array([1, 0, 2]), np.ones(3))])
    >>> m = network_measures(snap)[0]
    >>> m["ties"], round(m["density"], 3), round(m["reciprocity"], 3)
    (3, 0.5, 0.667)
    """
    n = snapshot.n
    out = []
    for rel, mat in zip(snapshot.relations, snapshot.matrices):
        nnz = mat.nnz
        if rel.directed:
            ties = nnz
            possible = n * (n - 1)
            mutual = mat.multiply(mat.T).nnz  # cells with both i->j and j->i
            reciprocity = mutual / ties if ties else float("nan")
        else:
            ties = nnz // 2
            possible = n * (n - 1) // 2
            reciprocity = float("nan")
        degree = (mat != 0).sum(axis=0) + (mat != 0).sum(axis=1)
        isolates = int(np.count_nonzero(np.asarray(degree).ravel() == 0))
        density = ties / possible if possible else 0.0
        total = mat.sum() / (1 if rel.directed else 2)
        out.append(
            {
                "relation": rel.name,
                "actors": n,
                "ties": int(ties),
                "density": float(density),
                "reciprocity": float(reciprocity),
                "isolates": isolates,
                "mean_value": float(total / ties) if ties else float("nan"),
                "sparse": bool(density < SPARSE_DENSITY),
            }
        )
    return out
