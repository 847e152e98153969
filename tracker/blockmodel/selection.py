"""Choosing the number of positions: the elbow rule on the density correlation.

For each candidate number of positions ``K`` the partition's density
correlation :math:`\\rho_K` (:func:`tracker.blockmodel.goodness.density_correlation`,
the correlation between the data and the block densities) measures how much
of the data the blocks summarise.  Adding a position can only help a little
once the real positions are found, so the rule takes

.. math::

    K^* = \\min\\{K : \\rho_{K+1} - \\rho_K < g\\},

the smallest ``K`` after which one more position raises the correlation by
less than the gain ``g`` (default 0.05), and the largest ``K`` tried when
every step gains at least ``g``.  An undefined correlation (a network
without variation) counts as 0.

This is the scree or elbow heuristic used to pick the number of positions from
a fit curve (common practice; Wasserman & Faust 1994, sec. 10.4 discuss
comparing blockmodels of different sizes by their fit).  The threshold is a
choice, not a test: report the per-``K`` diagnostics beside the chosen ``K``.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

__all__ = ["MIN_GAIN", "choose_k", "AUTO_RULE"]

MIN_GAIN = 0.05

AUTO_RULE = (
    "smallest number of positions after which one more position raises the "
    "density correlation by less than {gain}"
)


def choose_k(ks: Sequence[int], correlations: Sequence[float], *, min_gain: float = MIN_GAIN) -> int:
    """The elbow of a density-correlation curve.

    Parameters
    ----------
    ks : sequence of int
        Candidate numbers of positions, increasing.
    correlations : sequence of float
        Density correlation of the partition found for each ``K`` (``nan``
        counts as 0).
    min_gain : float
        ``g``: the smallest gain worth one more position.

    Returns
    -------
    int
        The chosen ``K``.

    Examples
    --------
    >>> choose_k([2, 3, 4, 5], [0.40, 0.80, 0.82, 0.83])
    3
    >>> choose_k([2, 3], [0.3, 0.6])
    3
    """
    ks = [int(k) for k in ks]
    if not ks:
        raise ValueError("no candidate number of positions")
    if any(b <= a for a, b in zip(ks, ks[1:])):
        raise ValueError("candidate numbers of positions must increase")
    rho = np.nan_to_num(np.asarray(correlations, dtype=np.float64), nan=0.0)
    if rho.shape != (len(ks),):
        raise ValueError("give one correlation per candidate")
    for pos in range(len(ks) - 1):
        if rho[pos + 1] - rho[pos] < min_gain:
            return ks[pos]
    return ks[-1]
