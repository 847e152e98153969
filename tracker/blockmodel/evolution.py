r"""Change penalties inside a descriptive method's own objective (evolutionary clustering).

Evolutionary clustering (Chakrabarti, Kumar & Tomkins [1]_) fits period *t*
by the method's own snapshot quality plus a history cost that grows with the
disagreement between the new partition and the previous one.  For
dissimilarity-based clustering Chi et al. [2]_ call the membership form of
that cost "preserving cluster membership" (PCM).  Here it enters the pairwise
dissimilarity the method clusters:

.. math::

    \delta'_{ij} = \delta_{ij} + \lambda \, m_{ij}, \qquad
    m_{ij} = [\,z^{prev}_i \ne z^{prev}_j\,] \quad (0 \text{ when either is unknown}),

so a pair placed together that was apart before pays :math:`\lambda`.  With
Ward's linkage :math:`\delta` is the squared Euclidean distance, and the Ward
objective (within-position sum of squares, :math:`\sum_k n_k^{-1} \sum_{i<j \in
k} \delta_{ij}`) then grows by about :math:`\lambda` for each actor that sits
in a position whose other members came from elsewhere: :math:`\lambda` is the
price of one change in the objective's own unit.

The unit of :math:`\lambda` differs between objectives, so it is set relative
to the period's per-actor objective scale (:func:`per_actor_scale`): the value
the method's own, unsmoothed partition reaches, divided by the number of
actors.  ``change_penalty = c`` then means "one change costs *c* times what an
average actor contributes to the objective", whatever the method.  ``c = 0``
leaves the dissimilarities, hence the partition, exactly as without smoothing.

References
----------
.. [1] Chakrabarti, D., Kumar, R. & Tomkins, A. (2006). Evolutionary clustering. KDD.
.. [2] Chi, Y., Song, X., Zhou, D., Hino, K. & Tseng, B. L. (2007). Evolutionary
   spectral clustering by incorporating temporal smoothness. KDD.
"""

from __future__ import annotations

import numpy as np

__all__ = ["prior_disagreement", "penalised", "per_actor_scale", "check_prior"]


def check_prior(prior_labels, n: int) -> np.ndarray | None:
    """Previous positions as an int array of length ``n`` (-1 unknown), or None when none is known."""
    if prior_labels is None:
        return None
    prior = np.asarray(prior_labels)
    if prior.shape != (n,):
        raise ValueError(f"prior_labels must hold one label per actor ({n}); got shape {prior.shape}")
    prior = prior.astype(np.int64)
    return prior if (prior >= 0).any() else None


def prior_disagreement(prior: np.ndarray) -> np.ndarray:
    r"""Dense ``n x n`` signs: +1 same previous position, -1 different, 0 when either is unknown.

    >>> prior_disagreement(np.array([0, 0, 1, -1])).astype(int).tolist()
    [[1, 1, -1, 0], [1, 1, -1, 0], [-1, -1, 1, 0], [0, 0, 0, 0]]
    """
    known = prior >= 0
    same = prior[:, None] == prior[None, :]
    both = known[:, None] & known[None, :]
    return np.where(both, np.where(same, 1.0, -1.0), 0.0)


def penalised(dissimilarity: np.ndarray, prior: np.ndarray, penalty: float) -> np.ndarray:
    r""":math:`\delta + \lambda [z^{prev}_i \ne z^{prev}_j]` (both known), diagonal kept at 0."""
    if penalty < 0:
        raise ValueError("change_penalty must be 0 or more")
    apart = prior_disagreement(prior) < 0
    out = dissimilarity + penalty * apart
    np.fill_diagonal(out, 0.0)
    return out


def per_actor_scale(dissimilarity: np.ndarray, labels: np.ndarray) -> float:
    r"""The objective per actor, :math:`\frac1n \sum_k \frac{1}{n_k} \sum_{i<j \in k} \delta_{ij}`.

    With squared Euclidean distances this is Ward's within-position sum of
    squares divided by ``n`` (the mean squared distance of an actor to its
    position's centroid; Ward 1963).  When every position is a single actor the
    scale falls back to the mean dissimilarity, so that a penalty still has a size.

    >>> d = np.array([[0., 2, 8], [2, 0, 8], [8, 8, 0]])
    >>> per_actor_scale(d, np.array([0, 0, 1]))  # (2 / 2) / 3
    0.3333333333333333
    """
    labels = np.asarray(labels, dtype=np.int64)
    n = labels.size
    if n < 2:
        return 0.0
    z = np.zeros((n, int(labels.max()) + 1))
    z[np.arange(n), labels] = 1.0
    size = z.sum(axis=0)
    within = (z * (dissimilarity @ z)).sum(axis=0) / 2.0
    value = float((within[size > 0] / size[size > 0]).sum() / n)
    if value <= 0:
        value = float(dissimilarity.sum() / (n * (n - 1)))
    return value
