r"""Structural equivalence on periods too large for an ``n x n`` matrix.

Two steps, each with memory proportional to the ties:

1. **Exact classes.**  Actors whose whole profiles (every row and, for directed
   relations, every column; see :mod:`.equivalence`) are identical are
   structurally equivalent in the strict sense of Lorrain & White (1971): their
   distance is 0 and, the profiles being equal entry by entry, their distances
   to every third actor are equal too, even with the pair's own entries left
   out (Burt 1976; Wasserman & Faust 1994, sec. 9.3).  They are found by
   hashing: two fixed random projections of each profile give a key, equal keys
   are grouped, and every member is then compared entry by entry with its
   group's first member (a member that differs, after a hash collision, stays a
   class of its own).  :func:`profile_classes`.

2. **An embedding of the distinct profiles.**  The ``m`` distinct profiles are
   projected on their first ``k`` right singular vectors by a randomized
   truncated SVD (Halko, Martinsson & Tropp 2011; scikit-learn's
   ``randomized_svd``), and the positions are the weighted k-means clusters of
   the projected profiles, each distinct profile weighted by its number of
   actors.  K-means minimises the within-position sum of squared distances,
   the criterion that Ward's hierarchical merges (Ward 1963), the exact
   method's default, approach greedily; k-means is started from Ward's tree on
   a seeded sample and from two k-means++ seeds, and the lowest sum is kept.
   :func:`embedded_positions`.

*The error, stated.*  Let :math:`P` project on the ``k`` singular vectors and
:math:`r_i = (I - P) p_i` be the part of actor ``i``'s profile that the
embedding leaves out.  The embedded distance :math:`\hat d_{ij} = \lVert P (p_i -
p_j) \rVert` never exceeds the full-profile distance, and

.. math::

    0 \le d_{ij}^2 - \hat d_{ij}^2 = \lVert r_i - r_j \rVert^2
    \le (\lVert r_i \rVert + \lVert r_j \rVert)^2 .

The full-profile distance differs from Burt's, which leaves out the pair's own
entries, by at most :math:`\sum_r c_r (x_{ijr}^2 + x_{jir}^2)` (zero for actors
not tied to each other, the vast majority in sparse data).  The diagnostics
report ``energy`` (:math:`\sum_{\ell \le k} \sigma_\ell^2 / \lVert X
\rVert_F^2`, the share of the profiles' squared length kept) and the largest and
mean :math:`\lVert r_i \rVert`.  Agreement with the exact method where both
run is measured in ``tests/blockmodel/test_embedding.py`` (adjusted Rand index
on seeded planted data) and ``tests/benchmarks/README.md``.

For ``measure="correlation"`` the profiles are first standardised (each row
less its mean, divided by its standard deviation, over all ``L`` entries), so
that :math:`\lVert z_i - z_j \rVert^2 = 2L(1 - r_{ij})`; the standardisation is
applied implicitly (a sparse matrix less a rank-one term), never densified.

References
----------
.. [1] Lorrain, F. & White, H. C. (1971). Structural equivalence of individuals
   in social networks. J. Math. Sociology 1, 49-80.
.. [2] Burt, R. S. (1976). Positions in networks. Social Forces 55, 93-122.
.. [3] Wasserman, S. & Faust, K. (1994). Social Network Analysis, sec. 9.3.
.. [4] Halko, N., Martinsson, P.-G. & Tropp, J. A. (2011). Finding structure
   with randomness: probabilistic algorithms for constructing approximate
   matrix decompositions. SIAM Review 53, 217-288.
.. [5] Ward, J. H. (1963). Hierarchical grouping to optimize an objective
   function. J. Am. Stat. Assoc. 58, 236-244.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
import scipy.sparse as sp
from scipy.cluster.hierarchy import fcluster, linkage
from scipy.linalg import solve_triangular
from scipy.sparse.linalg import LinearOperator

__all__ = ["EXACT_LIMIT", "profile_matrix", "profile_classes", "embed_profiles", "embedded_positions",
           "within_sum_of_squares", "smoothed_embedded_positions"]

# Largest number of tied actors for which the exact method runs: its condensed
# distance matrix, the linkage's copy and one row block take about
# 8 n^2 bytes (0.5 GB at 8,000 actors; 20 GB at 50,000).
EXACT_LIMIT = 8000

# Components of the embedding and the Ward sample that starts k-means.
N_COMPONENTS = 32
WARD_SAMPLE = 2000


def profile_matrix(mats: Sequence, dirs: Sequence[bool]) -> sp.csr_array:
    """The ``n x L`` profiles ``[X_1 | X_1^T | X_2 | ...]`` (columns only for directed relations)."""
    parts = []
    for x, is_dir in zip(mats, dirs):
        parts.append(sp.csr_array(x))
        if is_dir:
            parts.append(sp.csr_array(x.T))
    out = sp.csr_array(sp.hstack(parts, format="csr"))
    out.sum_duplicates()
    out.eliminate_zeros()
    out.sort_indices()
    return out


def profile_classes(profiles: sp.csr_array) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact classes of identical profiles.

    Parameters
    ----------
    profiles : scipy.sparse array, shape (n, L)
        One row per actor (see :func:`profile_matrix`).

    Returns
    -------
    classes : numpy.ndarray of int, shape (n,)
        Class of each actor, ``0..m-1`` by first appearance.
    representatives : numpy.ndarray of int, shape (m,)
        The first actor of each class.
    counts : numpy.ndarray of int, shape (m,)
        Actors per class.

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> p = sp.csr_array(np.array([[1, 0, 2], [0, 1, 0], [1, 0, 2]], dtype=float))
    >>> [a.tolist() for a in profile_classes(p)]
    [[0, 1, 0], [0, 1], [2, 1]]
    """
    profiles = sp.csr_array(profiles, dtype=np.float64)
    n, width = profiles.shape
    if n == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty
    # Fixed projections (not the fit's seed: the classes are a property of the data).
    weights = np.random.default_rng(20111976).standard_normal((width, 2))
    keys = np.column_stack([profiles @ weights, np.diff(profiles.indptr)])
    _, first, group = np.unique(keys, axis=0, return_index=True, return_inverse=True)
    group = group.reshape(-1)
    rep = first[group]
    # Verify entry by entry: a row equal to its group's first row differs from it nowhere.
    diff = sp.csr_array(profiles - profiles[rep])
    diff.eliminate_zeros()
    same = np.diff(diff.indptr) == 0
    rep = np.where(same, rep, np.arange(n))
    _, first, classes = np.unique(rep, return_index=True, return_inverse=True)
    from tracker.blockmodel.equivalence import _first_appearance

    classes = _first_appearance(classes.reshape(-1))
    m = int(classes.max()) + 1
    representatives = np.full(m, n, dtype=np.int64)
    np.minimum.at(representatives, classes, np.arange(n))
    counts = np.bincount(classes, minlength=m)
    return classes, representatives, counts


def _standardised(profiles: sp.csr_array) -> tuple[LinearOperator, np.ndarray]:
    """``Z = D^{-1} (X - mu 1^T)`` as an operator, and its squared row norms.

    Each varying row has mean 0 and variance 1 over its ``L`` entries, hence
    squared norm ``L``; a constant row (no variance) is left at zero.
    """
    n, width = profiles.shape
    mean = np.asarray(profiles.sum(axis=1)).ravel() / width
    sq = np.asarray(profiles.multiply(profiles).sum(axis=1)).ravel() / width
    std = np.sqrt(np.maximum(sq - mean * mean, 0.0))
    inv = np.divide(1.0, std, out=np.zeros(n), where=std > 1e-12 * np.maximum(1.0, np.sqrt(sq)))
    scaled = sp.csr_array(sp.diags_array(inv) @ profiles)
    shift = inv * mean

    def matmat(v):
        v = np.asarray(v)
        return scaled @ v - (np.outer(shift, v.sum(axis=0)) if v.ndim == 2 else shift * v.sum())

    def rmatmat(u):
        u = np.asarray(u)
        return scaled.T @ u - (np.outer(np.ones(width), shift @ u) if u.ndim == 2 else np.full(width, shift @ u))

    op = LinearOperator((n, width), matvec=matmat, rmatvec=rmatmat, matmat=matmat, rmatmat=rmatmat,
                        dtype=np.float64)
    return op, np.where(inv > 0, float(width), 0.0)


def _orthonormal(y: np.ndarray) -> np.ndarray:
    """An orthonormal basis of the columns of a tall ``y``: Cholesky QR, applied twice.

    ``Y = Q R`` with ``R`` the Cholesky factor of the small Gram matrix
    :math:`Y^T Y`; a second pass restores orthogonality to working precision
    (CholeskyQR2; Fukaya, Nakatsukasa, Yanagisawa & Yamamoto 2014).  It costs
    two matrix products instead of a Householder QR of the tall matrix,
    several times faster on large ``n``.  Falls back to Householder QR when the
    Gram matrix is numerically singular (columns nearly dependent).
    """
    for _ in range(2):
        gram = y.T @ y
        try:
            chol = np.linalg.cholesky(gram + 1e-14 * np.trace(gram) * np.eye(gram.shape[0]))
        except np.linalg.LinAlgError:
            return np.linalg.qr(y)[0]
        y = solve_triangular(chol, y.T, lower=True).T  # y R^{-1}, R = chol^T
    return y


def _randomized_range(op, k: int, rng: np.random.Generator, n_iter: int = 4) -> np.ndarray:
    """Orthonormal basis of the range of ``op``: Halko et al. (2011), Alg. 4.4 (subspace iteration)."""
    omega = rng.standard_normal((op.shape[1], k))
    q = _orthonormal(np.asarray(op @ omega))
    for _ in range(n_iter):
        w = _orthonormal(np.asarray(op.T @ q))
        q = _orthonormal(np.asarray(op @ w))
    return q


def embed_profiles(profiles, k: int, seed: int, *, standardise: bool = False):
    r"""Project the profiles on their first ``k`` right singular vectors.

    Randomized SVD (Halko, Martinsson & Tropp 2011: Alg. 4.4 with four
    subspace iterations and ten extra columns, then Alg. 5.1), with the start
    drawn from ``numpy.random.default_rng(seed)``.  Returns the ``n x k``
    coordinates :math:`X V_k = U_k \Sigma_k`, the share of squared length kept
    (``energy``) and each row's residual norm
    :math:`\lVert (I - V_k V_k^T) p_i 
Vert` (by Pythagoras, from the row norms).
    """
    profiles = sp.csr_array(profiles, dtype=np.float64)
    if standardise:
        op, norms2 = _standardised(profiles)
    else:
        op = profiles
        norms2 = np.asarray(profiles.multiply(profiles).sum(axis=1)).ravel()
    n, width = op.shape
    k = max(1, min(k, n, width))
    q = _randomized_range(op, min(k + 10, n, width), np.random.default_rng(seed))
    b = np.asarray(op.T @ q).T  # (k + p) x width
    # Left singular vectors and values of B from its small Gram matrix B B^T = U S^2 U^T.
    evals, u_b = np.linalg.eigh(b @ b.T)
    order = np.argsort(evals)[::-1][:k]
    sigma = np.sqrt(np.maximum(evals[order], 0.0))
    coords = (q @ u_b[:, order]) * sigma
    kept2 = (coords * coords).sum(axis=1)
    residual = np.sqrt(np.maximum(norms2 - kept2, 0.0))
    total = float(norms2.sum())
    energy = float(min(kept2.sum() / total, 1.0)) if total > 0 else 1.0
    return coords, energy, residual


def embedded_positions(coords: np.ndarray, counts: np.ndarray, n_positions: int, seed: int) -> np.ndarray:
    """Weighted k-means positions of embedded profiles (Ward's criterion).

    Starts: Ward's tree (scipy) on at most ``WARD_SAMPLE`` profiles drawn with
    ``numpy.random.default_rng(seed)`` with probability proportional to their
    counts, cut into ``n_positions`` clusters (their weighted means), and two
    k-means++ seeds; the run with the lowest weighted within-position sum of
    squares is kept.  Returns one label per row of ``coords``.
    """
    from sklearn.cluster import KMeans

    m = coords.shape[0]
    k = min(int(n_positions), m)
    if k >= m:
        return np.arange(m)
    weights = counts.astype(np.float64)
    rng = np.random.default_rng(seed)
    size = min(WARD_SAMPLE, m)
    sample = np.sort(rng.choice(m, size=size, replace=False, p=weights / weights.sum()))
    tree = linkage(coords[sample], method="ward")
    cut = fcluster(tree, t=k, criterion="maxclust") - 1
    runs = []
    n_found = int(cut.max()) + 1
    if n_found == k:
        w = weights[sample]
        init = np.vstack([np.average(coords[sample][cut == c], axis=0, weights=w[cut == c]) for c in range(k)])
        runs.append(KMeans(k, init=init, n_init=1, random_state=seed).fit(coords, sample_weight=weights))
    runs.append(KMeans(k, init="k-means++", n_init=2, random_state=seed).fit(coords, sample_weight=weights))
    best = min(runs, key=lambda r: r.inertia_)
    return np.asarray(best.labels_, dtype=np.int64)


def within_sum_of_squares(coords: np.ndarray, counts: np.ndarray, labels: np.ndarray) -> float:
    """Weighted within-position sum of squares :math:`\\sum_i w_i \\lVert x_i - \\bar x_{z_i} \\rVert^2` (Ward 1963)."""
    weights = counts.astype(np.float64)
    k = int(labels.max()) + 1 if labels.size else 0
    mass = np.bincount(labels, weights=weights, minlength=k)
    sums = np.zeros((k, coords.shape[1]))
    np.add.at(sums, labels, coords * weights[:, None])
    centres = sums / np.where(mass > 0, mass, 1.0)[:, None]
    return float((weights * ((coords - centres[labels]) ** 2).sum(axis=1)).sum())


def smoothed_embedded_positions(coords: np.ndarray, classes: np.ndarray, counts: np.ndarray, prior: np.ndarray,
                                change_penalty: float, n_positions: int, seed: int) -> tuple[np.ndarray, float]:
    r"""Evolutionary positions in the embedding: k-means with a cost per change of position.

    The exact smoothed method (:mod:`tracker.blockmodel.evolution`) clusters
    :math:`\delta'_{ij} = d_{ij}^2 + \lambda [z^{prev}_i \ne z^{prev}_j]`.
    In the embedding the same penalty is a Euclidean distance: appending to
    each actor the indicator of its previous position scaled by
    :math:`\sqrt{\lambda / 2}` adds exactly :math:`\lambda` to the squared
    distance of a pair whose previous positions differ and nothing to a pair
    that shared one, so weighted k-means (Ward's criterion) on the augmented
    coordinates minimises the embedded within-position sum of squares plus the
    pair penalty, the objective of the exact method on embedded distances
    (evolutionary k-means, Chakrabarti, Kumar & Tomkins 2006).  One difference,
    stated: an actor without a previous position gets a zero indicator, so its
    pairs with known actors pay :math:`\lambda / 2` (the exact method: 0),
    the same whatever their previous position, which leaves it free to join
    any position.

    :math:`\lambda = c \cdot W_0 / n`, with :math:`W_0` the weighted
    within-position sum of squares of the unsmoothed embedded positions (the
    per-actor objective of :func:`tracker.blockmodel.evolution.per_actor_scale`,
    measured in the embedding).

    Parameters
    ----------
    coords : numpy.ndarray, shape (m, k)
        Embedded distinct profiles (:func:`embed_profiles`).
    classes : numpy.ndarray of int, shape (n,)
        Each actor's distinct profile (:func:`profile_classes`).
    counts : numpy.ndarray of int, shape (m,)
    prior : numpy.ndarray of int, shape (n,)
        Previous positions, -1 unknown.
    change_penalty : float
        ``c`` (0 or more).

    Returns
    -------
    (labels, lambda)
        One label per actor, and the absolute penalty :math:`\lambda`.
    """
    if change_penalty < 0:
        raise ValueError("change_penalty must be 0 or more")
    n = classes.size
    alone = embedded_positions(coords, counts, n_positions, seed)
    scale = within_sum_of_squares(coords, counts, alone) / max(n, 1)
    if scale <= 0:  # every position tight: size the penalty by the spread of all profiles
        scale = within_sum_of_squares(coords, counts, np.zeros(coords.shape[0], dtype=np.int64)) / max(n, 1)
    lam = float(change_penalty) * scale
    prior = np.asarray(prior, dtype=np.int64)
    known = prior >= 0
    width = int(prior.max()) + 1 if known.any() else 0
    # distinct (profile, previous position) pairs, each weighted by its actors
    keys = classes.astype(np.int64) * (width + 1) + (prior + 1)
    _, first, inverse = np.unique(keys, return_index=True, return_inverse=True)
    inverse = inverse.reshape(-1)
    weights = np.bincount(inverse)
    indicator = np.zeros((first.size, width))
    rows = np.flatnonzero(known[first])
    indicator[rows, prior[first[rows]]] = np.sqrt(lam / 2.0)
    augmented = np.hstack([coords[classes[first]], indicator])
    labels = embedded_positions(augmented, weights, n_positions, seed)
    return labels[inverse], lam
