r"""Ideal images: the textbook structure an image matrix is closest to.

An image of one relation is a ``B x B`` matrix of 0s and 1s (one row and one
column per position).  It is compared with five ideal images [1]_ [2]_, each
defined up to a reordering of the positions.  Written for positions in *rank*
order ``0 .. B-1`` (after the reordering), the ideal cell :math:`t_{kl}` is 1
exactly when

========================  ==========================================================
``cohesive-subgroups``    :math:`k = l` (ties inside positions only)
``core-periphery``        :math:`k \in C` or :math:`l \in C`, for a core set
                          :math:`C` with :math:`1 \le |C| \le B-1` (core-core 1,
                          core-periphery 1 both ways, periphery-periphery 0)
``centralized``           :math:`l = c` (variant ``"to-centre"``: every position
                          sends to the centre :math:`c`, the centre included) or
                          :math:`k = c` (variant ``"from-centre"``)
``hierarchy``             :math:`l = k - 1` (each position sends to the one
                          directly above it; unreciprocated; diagonal 0)
``transitive``            :math:`l < k` (each position sends to every position
                          above it; diagonal 0)
========================  ==========================================================

The fit of an image :math:`x` to an ideal is the number of mismatching cells
under the best ordering :math:`o` (and core set, centre, variant),

.. math::

    m = \min_o \sum_{k,l} |x_{o_k o_l} - t_{kl}|, \qquad
    \mathrm{fit} = 1 - m / B^2 ,

the diagonal included.

**Judged on the ties, not on a 0/1 image.**  The image may also be the
matrix of *block densities* :math:`x_{kl} = t_{kl} / p_{kl} \in [0, 1]`
(:func:`density_image`; by default relative to the densest block), and that is what :meth:`tracker.api.Study.structures`
passes.  Then :math:`|x_{kl} - t_{kl}|` is the block's inconsistencies
counted on the ties themselves, normalised by the block's size: the share of
its cells holding a tie where the ideal has a null block, the share of cells
missing a tie where it has a complete block.  This is the normalised
null-block and complete-block inconsistency of generalized blockmodeling
(Doreian, Batagelj & Ferligoj 2005, ch. 7: block inconsistencies divided
by the block's number of cells so that large blocks do not dominate) [3]_.
Why this rather than a 0/1 image: under the textbook zero-block criterion
a single stray tie turns a block into a 1, so 2% random ties make every image
all 1s (and "core-periphery"); on densities one stray tie in a block of 80
cells costs 1/80.  A noise-aware 0/1 image (the ``above-background``
criterion of :mod:`tracker.blockmodel.image`) would also survive noise, but
it throws away how far a block is from its ideal, and its verdict on a
small block flips with one tie; the normalised count keeps both.

A symmetric star (all ties to and from one position) is
the core-periphery image with a core of one position, so undirected data need no
separate star.  Two ideals coincide only for ``B = 2``: hierarchy and transitive
are then both the single tie ``1 -> 0``.

References
----------
.. [1] Wasserman, S. & Faust, K. (1994). Social Network Analysis, sec. 10.3
   (ideal images: cohesive subgroups, centralized, hierarchy, transitivity,
   core-periphery).
.. [2] White, H. C., Boorman, S. A. & Breiger, R. L. (1976). Social structure from
   multiple networks I. Am. J. Sociology 81, 730-780.
.. [4] Ziberna, A. (2007). Generalized blockmodeling of valued networks. Social
   Networks 29, 105-126 (journal, volume and pages cited from memory; the
   author's 2007 University of Ljubljana doctoral thesis of the same title
   was verified to exist).
.. [3] Doreian, P., Batagelj, V. & Ferligoj, A. (2005). Generalized Blockmodeling.
   Cambridge University Press, ISBN 0521840856 (verified) (block types and their
   inconsistencies, ch. 6-7; chapter numbers cited from memory).
.. [5] Cugmas, M., Ferligoj, A. & Ziberna, A. (2018). Generating global network
   structures by triad types. PLoS ONE, doi:10.1371/journal.pone.0197514
   (verified: the same family of global structures, "cohesive,
   core-periphery, hierarchical, and transitivity" blockmodels).
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import lru_cache
from typing import Sequence

import numpy as np
import scipy.sparse as sp

from tracker.errors import UsageError

__all__ = [
    "IDEALS",
    "IdealFit",
    "closest_ideal",
    "ideal_significance",
    "classify_image",
    "density_image",
]

#: The ideal images, in the fixed order that breaks ties between equal fits.
IDEALS = ("cohesive-subgroups", "core-periphery", "centralized", "hierarchy", "transitive")

_VARIANTS = ("to-centre", "from-centre")
# 9! = 362880 orderings is still seconds; 10! is not.
_MAX_EXACT = 9
# Orderings scored per sparse product in the exact search (bounds memory at B = 9).
_CHUNK = 40320
# Starts of the local search above ``exact_limit``: one informed start, the rest random.
_RESTARTS = 24


@dataclass(frozen=True)
class IdealFit:
    """How well one image fits one ideal image.

    Attributes
    ----------
    ideal : str
        One of :data:`IDEALS`.
    mismatches : float
        Cells where the image and the ideal differ, under the best ordering
        (a whole number for a 0/1 image; for a density image, the sum of the
        blocks' normalised inconsistencies).
    fit : float
        ``1 - mismatches / B**2``.
    order : tuple of int
        The best ordering: ``order[r]`` is the input position placed at rank ``r``,
        so ``image[np.ix_(order, order)]`` is compared with the ideal in rank order.
        Core positions come first for core-periphery, the centre first for
        centralized; the identity for cohesive subgroups.
    roles : dict of int to str
        For each input position, its part: ``"subgroup"``; ``"core"`` or
        ``"periphery"``; ``"centre"`` or ``"satellite"``; ``"rank 1 (top)"``,
        ``"rank 2"`` .. ``"rank B"`` (hierarchy and transitive: rank 1 receives).
    variant : str or None
        ``"to-centre"`` or ``"from-centre"`` for centralized, else None.
    p_value : float or None
        From :func:`ideal_significance`, when computed.
    """

    ideal: str
    mismatches: float
    fit: float
    order: tuple[int, ...]
    roles: dict[int, str]
    variant: str | None = None
    p_value: float | None = None

    def ideal_image(self) -> np.ndarray:
        """The ideal image this fit was measured against, in the input's numbering.

        ``np.abs(image - fit.ideal_image()).sum() == fit.mismatches``.
        """
        n_core = sum(role == "core" for role in self.roles.values())
        rank_space = _template(self.ideal, len(self.order), n_core, self.variant)
        out = np.zeros_like(rank_space)
        order = np.asarray(self.order)
        out[np.ix_(order, order)] = rank_space
        return out


def closest_ideal(
    image,
    *,
    ideals: Sequence[str] = IDEALS,
    exact_limit: int = 8,
    seed: int = 0,
) -> list[IdealFit]:
    r"""Fit an image to each ideal image; best fit first.

    Parameters
    ----------
    image : array_like of 0/1, shape (B, B)
        The image of one relation, ``B >= 2``.
    ideals : sequence of str
        Which of :data:`IDEALS` to fit.
    exact_limit : int
        Up to this many positions (at most 9) the best ordering is found by
        exhaustive search; above it by local search.
    seed : int
        Seeds the local search (unused by exhaustive search).

    Returns
    -------
    list of IdealFit
        One per ideal, sorted by mismatches, ties broken by the order of
        :data:`IDEALS`.

    Notes
    -----
    Search, per ideal (see the module docstring for the ideal images):

    * cohesive subgroups: no ordering matters, :math:`m = |x| + B - 2\,\mathrm{tr}\,x`;
    * centralized: every centre and both variants, :math:`m = |x| + B - 2 s_c`
      with :math:`s_c` the column (or row) sum of the centre;
    * core-periphery: every core set of ``1 .. B-1`` positions (``2**B - 2`` of
      them) up to ``exact_limit``;
    * hierarchy and transitive: every ordering (``B!``) up to ``exact_limit``,
      scored by one sparse product per chunk of orderings: the matches under an
      ordering are the image cells it maps onto the ideal's 1s.

    Above ``exact_limit``, core sets and orderings are found by steepest-descent
    local search (core sets: add or drop one position; orderings: swap two
    positions or move one to another rank) from one informed start (positions
    ranked by ties received minus ties sent; core = positions with at least the
    median number of ties) and 23 random starts drawn with
    ``numpy.random.default_rng(seed)``.  Among equal fits the first found is kept
    (in exhaustive search: the lexicographically first ordering, the core set with
    the smallest bit code, the lowest centre, ``"to-centre"`` before
    ``"from-centre"``).

    Examples
    --------
    >>> import numpy as np
    >>> image = np.array([[0, 1, 0], [1, 1, 1], [0, 1, 0]])
    >>> best = closest_ideal(image)[0]
    >>> best.ideal, best.mismatches, best.roles
    ('core-periphery', 0, {0: 'periphery', 1: 'core', 2: 'periphery'})
    """
    x = _check_image(image)
    names = _check_ideals(ideals)
    _check_exact_limit(exact_limit)
    fits = []
    for name in names:
        mism, orders, extra = _fit_stack(name, x[None], exact_limit, seed)
        fits.append(_make_fit(name, _number(mism[0]), orders[0], int(extra[0])))
    fits.sort(key=lambda f: (round(f.mismatches, 9), IDEALS.index(f.ideal)))
    return fits


def ideal_significance(
    image,
    fit: IdealFit,
    *,
    draws: int = 199,
    seed: int = 0,
    exact_limit: int = 8,
) -> float:
    r"""Monte Carlo p-value of a fit against random images of the same density.

    Each of ``draws`` random images has the image's cell values shuffled
    uniformly at random over the :math:`B^2` cells (for a 0/1 image: its
    number of 1s placed at random; for a density image: its block densities
    rearranged); each is fitted to ``fit.ideal`` by the
    same search as :func:`closest_ideal` (best ordering, core set, centre and
    variant), and

    .. math::

        p = \frac{1 + \#\{\text{draws with } m_{\text{random}} \le m_{\text{observed}}\}}
                 {\text{draws} + 1}.

    Small ``p``: the structure fits better than chance arrangements of as many
    ties.  An image of all 0s or all 1s gets ``p = 1`` (every draw is the image).

    Parameters
    ----------
    image : array_like of 0/1, shape (B, B)
    fit : IdealFit
        A fit of this image, from :func:`closest_ideal`.
    draws : int
        Number of random images (at least 1).
    seed : int
        Seeds the random images and any local search.
    exact_limit : int
        As in :func:`closest_ideal`; use the same value as for the fit.

    Returns
    -------
    float

    References
    ----------
    .. [1] Wasserman & Faust (1994), sec. 10.4 (goodness of fit of images);
       the ``(1 + count) / (draws + 1)`` estimate is common practice for Monte
       Carlo tests.
    """
    x = _check_image(image)
    _check_ideals([fit.ideal])
    _check_exact_limit(exact_limit)
    n_pos = x.shape[0]
    if len(fit.order) != n_pos:
        raise UsageError(
            f"the fit is for {len(fit.order)} positions but the image has {n_pos}; "
            "pass the image the fit was made from"
        )
    if int(draws) < 1:
        raise UsageError(f"draws must be at least 1, got {draws}; use e.g. draws=199")
    draws = int(draws)
    rng = np.random.default_rng(seed)
    cells = np.argsort(rng.random((draws, n_pos * n_pos)), axis=1)
    random_images = x.reshape(-1)[cells].reshape(draws, n_pos, n_pos)
    mism = _fit_stack(fit.ideal, random_images, exact_limit, seed)[0]
    return float((1 + np.count_nonzero(mism <= fit.mismatches + 1e-9)) / (draws + 1))


def classify_image(
    image,
    *,
    draws: int = 199,
    seed: int = 0,
    ideals: Sequence[str] = IDEALS,
    exact_limit: int = 8,
) -> list[IdealFit]:
    """:func:`closest_ideal` with each fit's ``p_value`` from :func:`ideal_significance`.

    Examples
    --------
    >>> import numpy as np
    >>> star = np.array([[1, 1, 1, 1]] + [[1, 0, 0, 0]] * 3)
    >>> best = classify_image(star, draws=99)[0]
    >>> best.ideal, best.p_value < 0.05
    ('core-periphery', True)
    """
    fits = closest_ideal(image, ideals=ideals, exact_limit=exact_limit, seed=seed)
    return [
        replace(f, p_value=ideal_significance(image, f, draws=draws, seed=seed, exact_limit=exact_limit))
        for f in fits
    ]


# --------------------------------------------------------------------------- checks


def _check_image(image) -> np.ndarray:
    x = np.asarray(image)
    if x.ndim != 2 or x.shape[0] != x.shape[1]:
        raise UsageError(
            f"an image must be a square (B, B) array of one relation, got shape {x.shape}; "
            "pass image[r] of an (R, B, B) image for relation r"
        )
    if x.shape[0] < 2:
        raise UsageError("ideal structures need an image of at least 2 positions; fit more positions")
    if not np.all(np.isfinite(x)) or np.any((x < 0) | (x > 1)):
        raise UsageError("an image holds 0s and 1s, or block densities between 0 and 1; "
                         "apply an image criterion to the blocks or pass their densities")
    if np.isin(x, (0, 1)).all():
        return x.astype(np.int8)
    return x.astype(np.float64)


def _number(value) -> float | int:
    value = float(value)
    return int(round(value)) if abs(value - round(value)) < 1e-9 else value


def density_image(ties, possible, *, relative: bool = True) -> np.ndarray:
    """Block densities ``t / p`` of one relation as an image for :func:`closest_ideal`.

    With ``relative`` (default) the densities are divided by the relation's
    largest block density, so the densest block counts as complete: the
    normalised inconsistencies of valued generalized blockmodeling with the
    level ``m`` of a "tie block" set to the densest block (Ziberna 2007;
    the parameter's role cited from memory).  In sparse data, where no block is near complete, the
    absolute densities would make every ideal with 1-blocks fit badly and
    the best ideal would be the one with the fewest 1s; relative to the
    densest block the pattern of dense and empty blocks is what is judged.
    Noise cannot fake a pattern this way: scaling does not change which
    arrangement of the blocks is best, and :func:`ideal_significance`
    compares with the same values rearranged at random.

    Blocks where no tie is possible (the diagonal of a one-actor position)
    count as null (0), like in every 0/1 image.

    >>> density_image([[3, 0], [1, 0]], [[6, 4], [4, 0]], relative=False).tolist()
    [[0.5, 0.0], [0.25, 0.0]]
    >>> density_image([[3, 0], [1, 0]], [[6, 4], [4, 0]]).tolist()
    [[1.0, 0.0], [0.5, 0.0]]
    """
    t = np.asarray(ties, dtype=np.float64)
    p = np.asarray(possible, dtype=np.float64)
    if t.shape != p.shape or t.ndim != 2:
        raise UsageError("ties and possible must be two (B, B) tables of the same relation")
    if np.any(t < 0) or np.any(t > p):
        raise UsageError("each block needs 0 <= ties <= possible")
    dens = np.where(p > 0, t / np.where(p > 0, p, 1), 0.0)
    top = dens.max() if dens.size else 0.0
    return dens / top if relative and top > 0 else dens


def _check_ideals(ideals: Sequence[str]) -> list[str]:
    if isinstance(ideals, str):
        ideals = [ideals]
    names = list(dict.fromkeys(ideals))
    if not names:
        raise UsageError(f"name at least one ideal from {', '.join(IDEALS)}")
    for name in names:
        if name not in IDEALS:
            raise UsageError(f"unknown ideal {name!r}; choose from {', '.join(IDEALS)}")
    return names


def _check_exact_limit(exact_limit: int) -> None:
    if not 0 <= int(exact_limit) <= _MAX_EXACT:
        raise UsageError(
            f"exact_limit must lie in 0..{_MAX_EXACT}, got {exact_limit}; "
            f"exhaustive search over more than {_MAX_EXACT} positions is too slow"
        )


# --------------------------------------------------------------------------- ideals


def _template(ideal: str, n_pos: int, n_core: int = 1, variant: str | None = None) -> np.ndarray:
    """The ideal image in rank order (core = first ``n_core`` ranks, centre = rank 0)."""
    if ideal == "cohesive-subgroups":
        return np.eye(n_pos, dtype=np.int8)
    if ideal == "core-periphery":
        core = np.arange(n_pos) < n_core
        return (core[:, None] | core[None, :]).astype(np.int8)
    if ideal == "centralized":
        out = np.zeros((n_pos, n_pos), dtype=np.int8)
        if variant == "from-centre":
            out[0, :] = 1
        else:
            out[:, 0] = 1
        return out
    if ideal == "hierarchy":
        return np.eye(n_pos, k=-1, dtype=np.int8)
    if ideal == "transitive":
        return np.tril(np.ones((n_pos, n_pos), dtype=np.int8), -1)
    raise ValueError(ideal)


def _make_fit(ideal: str, mismatches: float, order: np.ndarray, extra: int) -> IdealFit:
    order = tuple(int(k) for k in order)
    n_pos = len(order)
    variant = None
    if ideal == "cohesive-subgroups":
        roles = {k: "subgroup" for k in range(n_pos)}
    elif ideal == "core-periphery":
        roles = {k: ("core" if r < extra else "periphery") for r, k in enumerate(order)}
    elif ideal == "centralized":
        variant = _VARIANTS[extra]
        roles = {k: ("centre" if r == 0 else "satellite") for r, k in enumerate(order)}
    else:
        roles = {k: f"rank {r + 1}" + (" (top)" if r == 0 else "") for r, k in enumerate(order)}
    roles = dict(sorted(roles.items()))
    return IdealFit(ideal, mismatches, 1.0 - mismatches / n_pos**2, order, roles, variant)


def _fit_stack(ideal: str, images: np.ndarray, exact_limit: int, seed: int):
    """Best fit of each image in a ``(D, B, B)`` stack to one ideal.

    Returns mismatches ``(D,)``, orders ``(D, B)`` and an extra integer per image:
    the core size (core-periphery) or the variant's index (centralized).
    """
    n_img, n_pos, _ = images.shape
    n_ones = images.reshape(n_img, -1).sum(axis=1)
    n_ones = n_ones.astype(np.int64) if images.dtype.kind in "iub" else n_ones.astype(np.float64)
    identity = np.broadcast_to(np.arange(n_pos), (n_img, n_pos))
    extra = np.zeros(n_img, dtype=np.int64)
    if ideal == "cohesive-subgroups":
        trace = np.trace(images, axis1=1, axis2=2).astype(n_ones.dtype)
        return n_ones + n_pos - 2 * trace, identity.copy(), extra
    if ideal == "centralized":
        return _centralized(images, n_ones)
    if ideal == "core-periphery":
        if n_pos <= exact_limit:
            return _core_exact(images, n_ones)
        return _core_local(images, n_ones, seed)
    rows, cols = np.nonzero(_template(ideal, n_pos))
    if n_pos <= exact_limit:
        agree, orders = _orders_exact(images, rows, cols)
    else:
        agree, orders = _orders_local(images, rows, cols, seed)
    return n_ones + rows.size - 2 * agree, orders, extra


def _centralized(images: np.ndarray, n_ones: np.ndarray):
    n_img, n_pos, _ = images.shape
    # received (column sums) for "to-centre", sent (row sums) for "from-centre"
    sums = np.stack([images.sum(axis=1), images.sum(axis=2)], axis=1).astype(n_ones.dtype)
    mism = n_ones[:, None, None] + n_pos - 2 * sums
    best = mism.reshape(n_img, -1).argmin(axis=1)
    variant, centre = np.divmod(best, n_pos)
    others = np.arange(n_pos)[None, :] != centre[:, None]
    rest = np.broadcast_to(np.arange(n_pos), (n_img, n_pos))[others].reshape(n_img, n_pos - 1)
    orders = np.column_stack([centre, rest])
    return mism.reshape(n_img, -1)[np.arange(n_img), best], orders, variant


def _core_masks_cost(masks: np.ndarray, flat: np.ndarray, n_ones: np.ndarray) -> np.ndarray:
    """Mismatches ``(K, D)`` of core masks ``(K, B)`` against flat images ``(D, B*B)``."""
    n_pos = masks.shape[1]
    ideal = (masks[:, :, None] | masks[:, None, :]).reshape(-1, n_pos * n_pos).astype(np.float64)
    agree = ideal @ flat.T.astype(np.float64)
    cost = n_ones[None, :] + ideal.sum(axis=1)[:, None] - 2 * agree
    return cost.round().astype(np.int64) if n_ones.dtype.kind == "i" else cost


def _core_result(masks: np.ndarray, mism: np.ndarray):
    orders = np.argsort(~masks, axis=1, kind="stable")  # core first, then periphery
    return mism, orders, masks.sum(axis=1)


def _core_exact(images: np.ndarray, n_ones: np.ndarray):
    n_img, n_pos, _ = images.shape
    codes = np.arange(1, 2**n_pos - 1)
    masks = ((codes[:, None] >> np.arange(n_pos)) & 1).astype(bool)
    cost = _core_masks_cost(masks, images.reshape(n_img, -1), n_ones)
    best = cost.argmin(axis=0)
    return _core_result(masks[best], cost[best, np.arange(n_img)])


def _core_local(images: np.ndarray, n_ones: np.ndarray, seed: int):
    n_img, n_pos, _ = images.shape
    rng = np.random.default_rng(seed)
    flips = np.eye(n_pos, dtype=bool)
    best_masks = np.zeros((n_img, n_pos), dtype=bool)
    best_cost = np.zeros(n_img, dtype=n_ones.dtype)
    for d in range(n_img):
        flat, ones = images[d].reshape(1, -1), n_ones[d : d + 1]
        ties = images[d].sum(axis=0) + images[d].sum(axis=1)
        starts = [ties >= np.median(ties)] + [rng.random(n_pos) < 0.5 for _ in range(_RESTARTS - 1)]
        found, found_cost = None, None
        for mask in starts:
            mask = _core_repair(mask, ties)
            cost = _core_masks_cost(mask[None], flat, ones)[0, 0]
            while True:
                cand = mask[None, :] ^ flips
                size = cand.sum(axis=1)
                cand = cand[(size >= 1) & (size <= n_pos - 1)]
                if not len(cand):  # B = 2: the only other core is the other position
                    cand = ~mask[None, :]
                cand_cost = _core_masks_cost(cand, flat, ones)[:, 0]
                k = int(cand_cost.argmin())
                if cand_cost[k] >= cost - 1e-12:
                    break
                mask, cost = cand[k], cand_cost[k]
            if found is None or cost < found_cost:
                found, found_cost = mask, cost
        best_masks[d], best_cost[d] = found, found_cost
    return _core_result(best_masks, best_cost)


def _core_repair(mask: np.ndarray, ties: np.ndarray) -> np.ndarray:
    """Make a start a proper core set (1 .. B-1 positions) by the most/least tied position."""
    mask = mask.copy()
    if not mask.any():
        mask[int(np.argmax(ties))] = True
    elif mask.all():
        mask[int(np.argmin(ties))] = False
    return mask


@lru_cache(maxsize=None)
def _permutations(n_pos: int) -> np.ndarray:
    """All orderings of ``range(n_pos)``, in lexicographic order, shape ``(n_pos!, n_pos)``."""
    perms = np.zeros((1, 0), dtype=np.int8)
    for size in range(1, n_pos + 1):
        blocks = [
            np.column_stack([np.full(len(perms), first, dtype=np.int8), perms + (perms >= first)])
            for first in range(size)
        ]
        perms = np.vstack(blocks).astype(np.int8)
    perms.flags.writeable = False
    return perms


def _orders_exact(images: np.ndarray, rows: np.ndarray, cols: np.ndarray):
    """Most ideal 1s matched over all orderings, per image; first best ordering kept."""
    n_img, n_pos, _ = images.shape
    flat = images.reshape(n_img, -1).T.astype(np.float64)  # (B*B, D)
    exact = images.dtype.kind in "iub"
    best = np.full(n_img, -1, dtype=np.int64 if exact else np.float64)
    best_order = np.zeros((n_img, n_pos), dtype=np.int64)
    perms = _permutations(n_pos)
    n_cells = rows.size
    for start in range(0, len(perms), _CHUNK):
        chunk = perms[start : start + _CHUNK].astype(np.intp)
        # cell of the image that ordering p maps onto ideal cell (r, c)
        cells = chunk[:, rows] * n_pos + chunk[:, cols]
        mapping = sp.csr_array(
            (np.ones(cells.size), cells.ravel(), np.arange(0, cells.size + 1, n_cells)),
            shape=(len(chunk), n_pos * n_pos),
        )
        agree = mapping @ flat  # (chunk, D)
        agree = np.rint(agree).astype(np.int64) if exact else np.round(agree, 12)
        arg = agree.argmax(axis=0)
        val = agree[arg, np.arange(n_img)]
        better = val > best
        best[better] = val[better]
        best_order[better] = chunk[arg[better]]
    return best, best_order


@lru_cache(maxsize=None)
def _moves(n_pos: int) -> np.ndarray:
    """Index maps of the neighbourhood of an ordering: all swaps and all single moves."""
    base = np.arange(n_pos)
    maps = []
    for i in range(n_pos):
        for j in range(n_pos):
            if i < j:
                swap = base.copy()
                swap[[i, j]] = swap[[j, i]]
                maps.append(swap)
            if i != j:
                maps.append(np.insert(np.delete(base, i), j, i))
    out = np.unique(np.array(maps), axis=0)
    out.flags.writeable = False
    return out


def _orders_local(images: np.ndarray, rows: np.ndarray, cols: np.ndarray, seed: int):
    n_img, n_pos, _ = images.shape
    rng = np.random.default_rng(seed)
    moves = _moves(n_pos)
    exact = images.dtype.kind in "iub"
    best = np.zeros(n_img, dtype=np.int64 if exact else np.float64)
    best_order = np.zeros((n_img, n_pos), dtype=np.int64)
    for d in range(n_img):
        x = images[d]
        net_received = x.sum(axis=0) - x.sum(axis=1)
        starts = [np.argsort(-net_received, kind="stable")]
        starts += [rng.permutation(n_pos) for _ in range(_RESTARTS - 1)]
        found, found_agree = None, -1
        for order in starts:
            agree = x[order[rows], order[cols]].sum()
            while True:
                cand = order[moves]
                cand_agree = x[cand[:, rows], cand[:, cols]].sum(axis=1)
                k = int(cand_agree.argmax())
                if cand_agree[k] <= agree + 1e-12:
                    break
                order, agree = cand[k], cand_agree[k]
            if agree > found_agree:
                found, found_agree = order, agree
        best[d], best_order[d] = found_agree, found
    return best, best_order
