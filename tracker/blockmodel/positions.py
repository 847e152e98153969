"""One entry point for finding positions, whatever the method.

:func:`find_positions` runs a registered method on the actors that have at
least one tie, puts the tieless actors in a position of their own, numbers
the positions in a fixed order and records how well the partition fits.

Methods are classes with the constructor ``(n_positions, *, seed=0,
**options)``, a ``fit(matrices, directed)`` method returning the object, and a
``labels_`` attribute.  The built-in ones are imported only when first used,
so a missing or broken module affects only its own method:

=============  ==================================================================
``structural`` :class:`tracker.blockmodel.structural.StructuralPositions` (Burt 1976)
``concor``     :class:`tracker.blockmodel.concor.ConcorPositions` (Breiger et al. 1975)
``regular``    :class:`tracker.blockmodel.regular.RegularPositions` (White & Reitz 1983)
``optimize``   :class:`tracker.blockmodel.optimize.OptimizedPositions`
               (Doreian, Batagelj & Ferligoj 2005)
``sbm``        :class:`tracker.blockmodel.sbm.SBMPositions`
               (Holland, Laskey & Leinhardt 1983; Karrer & Newman 2011)
=============  ==================================================================

Other methods join with :func:`register_method`.
"""

from __future__ import annotations

import importlib
from collections.abc import MutableMapping
from typing import Sequence

import numpy as np
import scipy.sparse as sp

from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.goodness import density_correlation, fit_summary, inconsistencies
from tracker.blockmodel.image import CRITERIA, image
from tracker.blockmodel.partition import Partition
from tracker.blockmodel.selection import AUTO_RULE, MIN_GAIN, choose_k
from tracker.errors import UsageError

__all__ = ["METHODS", "METHOD_OPTIONS", "register_method", "find_positions", "tied_actors"]

# Options that hold one value per actor: find_positions cuts them down to the
# tied actors before handing them to the method.
_PER_ACTOR_OPTIONS = ("init_labels", "prior_labels")


class _MethodRegistry(MutableMapping):
    """Name -> method class; built-in entries are ``"module:Class"`` until first used."""

    def __init__(self, entries: dict) -> None:
        self._entries = dict(entries)

    def __getitem__(self, name: str) -> type:
        entry = self._entries[name]
        if isinstance(entry, str):
            module_name, _, attr = entry.partition(":")
            try:
                entry = getattr(importlib.import_module(module_name), attr)
            except (ImportError, AttributeError) as exc:
                raise UsageError(
                    f"method {name!r} is not available ({module_name}.{attr} cannot be loaded: {exc}); "
                    "choose another method"
                ) from exc
            self._entries[name] = entry
        return entry

    def __setitem__(self, name: str, cls) -> None:
        self._entries[name] = cls

    def __delitem__(self, name: str) -> None:
        del self._entries[name]

    def __iter__(self):
        return iter(self._entries)

    def __len__(self) -> int:
        return len(self._entries)

    def __repr__(self) -> str:
        return f"METHODS({', '.join(self._entries)})"


METHODS: MutableMapping = _MethodRegistry(
    {
        "structural": "tracker.blockmodel.structural:StructuralPositions",
        "concor": "tracker.blockmodel.concor:ConcorPositions",
        "regular": "tracker.blockmodel.regular:RegularPositions",
        "optimize": "tracker.blockmodel.optimize:OptimizedPositions",
        "sbm": "tracker.blockmodel.sbm:SBMPositions",
    }
)


def _method_options() -> dict:
    """The options each built-in method accepts (checked by :func:`tracker.blockmodel.options.check_options`)."""
    from tracker.blockmodel.options import Option

    hier = ("single", "complete", "average", "weighted")
    restarts = Option("restarts", int, "--restarts", low=1, high=10_000, help="random starts")
    sweeps = Option("max_sweeps", int, "--max-sweeps", low=0, help="cap on the sweeps of each start")
    return {
        "structural": {
            "linkage": Option("linkage", str, "--linkage", choices=hier + ("ward",)),
            "measure": Option("measure", str, "--measure", choices=("euclidean", "correlation")),
            # above this many tied actors the embedding approximation runs (tracker.blockmodel.embedding)
            "exact_limit": Option("exact_limit", int, "exact_limit", low=2),
        },
        "concor": {
            "max_iter": Option("max_iter", int, "--max-iter", low=1),
            "tol": Option("tol", float, "--tol", low=1e-15),
        },
        "regular": {
            "linkage": Option("linkage", str, "--linkage", choices=hier),
            "exact": Option("exact", bool, "--exact"),
            "iterations": Option("iterations", int, "--iterations", low=1, high=100),
            "match": Option("match", str, "--match", choices=("pair", "arc")),
        },
        "optimize": {
            "restarts": restarts,
            "init": Option("init", str, "--init", choices=("structural", "random")),
            "max_sweeps": sweeps,
        },
        "sbm": {
            "model": Option("model", str, "--model", choices=("poisson", "bernoulli")),
            "degree_corrected": Option("degree_corrected", bool, "--degree-corrected"),
            "restarts": restarts,
            "max_sweeps": sweeps,
        },
        # Not a per-period method: one model over all periods (tracker.pipeline.fitting.fit_dynamic).
        "dynamic": {
            "model": Option("model", str, "--model", choices=("poisson", "bernoulli")),
            "degree_corrected": Option("degree_corrected", bool, "--degree-corrected"),
            "restarts": restarts,
            "max_iter": Option("max_iter", int, "max_iter", low=1),
            "tol": Option("tol", float, "tol", low=1e-15),
            "births": Option("births", bool, "births"),
        },
    }


#: Method name -> {option name: Option}: what each method accepts, with types and ranges.
METHOD_OPTIONS: dict = _method_options()


def register_method(name: str, cls, options: dict | None = None) -> None:
    """Make a position-finding method available to :func:`find_positions`.

    Parameters
    ----------
    name : str
        The name users give as ``method``.
    cls : type or str
        The class, or ``"module:Class"`` to import it on first use.
    options : dict, optional
        ``{option name: tracker.blockmodel.options.Option}``: what the method
        accepts.  Without it the method's options are not checked up front.
    """
    if not isinstance(name, str) or not name:
        raise ValueError("a method needs a non-empty name")
    METHODS[name] = cls
    if options is not None:
        METHOD_OPTIONS[name] = dict(options)
    else:
        METHOD_OPTIONS.pop(name, None)


def find_positions(
    matrices: Sequence[sp.sparray],
    directed: Sequence[bool],
    n_positions,
    *,
    method: str = "structural",
    seed: int = 0,
    criterion: str = "zero-block",
    alpha=None,
    cut=None,
    k_range: tuple[int, int] = (2, 8),
    **options,
) -> Partition:
    """Partition the actors into positions.

    Parameters
    ----------
    matrices : sequence of scipy.sparse arrays
        One ``n x n`` tie-value matrix per relation.
    directed : sequence of bool
    n_positions : int or "auto"
        Number of positions **of the tied actors**; the tieless actors'
        position comes on top.  When fewer actors have ties, each tied actor
        gets a position of its own (recorded in ``diagnostics``).  ``"auto"``
        chooses it over ``k_range`` by the elbow rule of
        :mod:`tracker.blockmodel.selection`.
    method : str
        A key of :data:`METHODS`.
    seed : int
        Passed to the method.
    criterion, alpha, cut
        Image criterion used to report inconsistencies (see
        :func:`tracker.blockmodel.image.image`).
    k_range : (int, int)
        Smallest and largest number of positions tried by ``"auto"`` (both included).
    **options
        Passed to the method's constructor.  ``init_labels`` and
        ``prior_labels``, when given one value per actor, are restricted to the
        tied actors first.

    Returns
    -------
    Partition
        Positions ordered by decreasing size, then by their smallest actor
        index; the tieless actors' position, if any, is last and named by
        ``Partition.isolates``.  ``diagnostics`` holds ``method``,
        ``criterion``, ``n_positions_requested``, ``tied_positions``, ``fit``
        (see :func:`tracker.blockmodel.goodness.fit_summary`, over all actors)
        and, for ``"auto"``, ``auto`` (one dict per ``K``: ``k``,
        ``inconsistencies``, ``density_correlation``, ``chosen``) and
        ``auto_rule``; ``approximation`` when the method reports one (its
        ``approximation_``, e.g. structural positions of a period above the
        exact limit, see :mod:`tracker.blockmodel.embedding`).

    Notes
    -----
    Actors without any tie are structurally equivalent to each other and
    carry no information about the others, so they are never mixed with them
    (they would otherwise fall into whichever position is sparsest).

    Examples
    --------
    >>> import numpy as np, scipy.sparse as sp
    >>> a = np.zeros((7, 7)); a[:3, :3] = 1; a[3:6, 3:6] = 1; np.fill_diagonal(a, 0)
    >>> p = find_positions([sp.csr_array(a)], [False], 2, method="optimize", restarts=3)
    >>> p.labels.tolist(), p.isolates
    ([0, 0, 0, 1, 1, 1, 2], 2)
    """
    matrices = [sp.csr_array(m) for m in matrices]
    directed = tuple(bool(d) for d in directed)
    if len(matrices) != len(directed):
        raise ValueError("give one directed flag per matrix")
    if not matrices:
        raise UsageError("no relation to analyse; select at least one relation")
    if criterion not in CRITERIA:
        raise UsageError(f"unknown image criterion {criterion!r}; use one of: {', '.join(CRITERIA)}")
    if method not in METHODS:
        raise UsageError(f"unknown method {method!r}; use one of: {', '.join(METHODS)}")
    auto = isinstance(n_positions, str)
    if auto and n_positions != "auto":
        raise UsageError(f"n_positions must be a whole number or 'auto'; got {n_positions!r}")
    if not auto and (isinstance(n_positions, bool) or int(n_positions) != n_positions or n_positions < 1):
        raise UsageError(f"n_positions must be a positive whole number or 'auto'; got {n_positions!r}")
    cls = METHODS[method]

    n = matrices[0].shape[0]
    tied = tied_actors(matrices, n)
    index = np.flatnonzero(tied)
    m = index.size
    sub = [mat[index][:, index] for mat in matrices]
    options = _restrict(options, tied, n)
    diagnostics = {"method": method, "criterion": criterion, "n_positions_requested": n_positions}
    notes: list = []  # approximations the method reports (``approximation_``), e.g. on large periods

    if m == 0:
        sub_labels = np.zeros(0, dtype=np.int64)
    elif auto:
        sub_labels, table = _auto(cls, sub, directed, m, seed, criterion, alpha, cut, k_range, options, notes)
        diagnostics["auto"] = table
        diagnostics["auto_rule"] = getattr(cls, "auto_rule", None) or AUTO_RULE.format(gain=MIN_GAIN)
    else:
        k = int(n_positions)
        if k > m:
            diagnostics["note"] = f"{m} tied actors: fewer than the {k} positions asked for"
            k = m
        sub_labels = _fit(cls, sub, directed, k, seed, options, notes)

    if notes:
        diagnostics["approximation"] = notes[-1]
    labels, n_tied = _canonical(sub_labels, index, n)
    diagnostics["tied_positions"] = n_tied
    has_isolates = m < n
    n_total = n_tied + (1 if has_isolates else 0)
    partition = Partition(labels, n_total, n_tied if has_isolates else None)
    diagnostics["fit"] = fit_summary(matrices, directed, partition, criterion, alpha=alpha, cut=cut)
    return Partition(labels, n_total, partition.isolates, diagnostics)


def tied_actors(matrices, n: int | None = None) -> np.ndarray:
    """Actors with at least one tie sent or received in any relation (zeros and self-ties ignored)."""
    if n is None:
        n = matrices[0].shape[0] if len(matrices) else 0
    mask = np.zeros(n, dtype=bool)
    for mat in matrices:
        coo = sp.coo_array(mat)
        keep = (coo.data != 0) & (coo.row != coo.col)
        mask[coo.row[keep]] = True
        mask[coo.col[keep]] = True
    return mask


def _restrict(options: dict, tied: np.ndarray, n: int) -> dict:
    out = dict(options)
    for name in _PER_ACTOR_OPTIONS:
        value = out.get(name)
        if value is not None and np.ndim(value) == 1 and len(value) == n:
            out[name] = np.asarray(value)[tied]
    return out


def _fit(cls, matrices, directed, k: int, seed: int, options: dict, notes: list | None = None) -> np.ndarray:
    model = cls(k, seed=seed, **options).fit(matrices, directed)
    if notes is not None and getattr(model, "approximation_", None):
        notes.append(model.approximation_)
    labels = np.asarray(model.labels_)
    n = matrices[0].shape[0]
    if labels.shape != (n,) or (n and labels.min() < 0):
        raise ValueError(f"{cls.__name__} returned labels of shape {labels.shape}; expected ({n},) of 0 or more")
    return labels.astype(np.int64)


def _auto(cls, matrices, directed, m, seed, criterion, alpha, cut, k_range, options, notes=None):
    """Fit every K of k_range and pick one by the elbow rule."""
    try:
        low, high = (int(k) for k in k_range)
    except (TypeError, ValueError):
        raise UsageError(f"k_range must be two whole numbers (smallest, largest); got {k_range!r}") from None
    if low < 1 or high < low:
        raise UsageError(f"k_range must satisfy 1 <= smallest <= largest; got {k_range!r}")
    ks = list(range(min(low, m), min(high, m) + 1))
    if getattr(cls, "selects_positions_by_likelihood", False):
        return _auto_by_likelihood(cls, matrices, directed, ks, seed, criterion, alpha, cut, options)
    fits, rows = [], []
    for k in ks:
        labels = _fit(cls, matrices, directed, k, seed, options, notes)
        _, compact = np.unique(labels, return_inverse=True)
        part = Partition(compact, int(compact.max()) + 1)
        stats = block_stats(matrices, directed, part)
        err = inconsistencies(stats, image(stats, criterion, alpha=alpha, cut=cut))
        rho = density_correlation(stats)
        fits.append(labels)
        rows.append({"k": k, "inconsistencies": int(err.sum()), "density_correlation": rho, "chosen": False})
    chosen = choose_k(ks, [row["density_correlation"] for row in rows])
    pos = ks.index(chosen)
    rows[pos]["chosen"] = True
    return fits[pos], rows


def _auto_by_likelihood(cls, matrices, directed, ks, seed, criterion, alpha, cut, options):
    """Statistical models choose K by their own criterion (for the SBM: ICL, Daudin et al. 2008)."""
    best_k, table = cls.select(matrices, directed, (ks[0], ks[-1]), seed=seed, **options)
    rows, chosen = [], None
    for entry in table:
        k = int(entry["n_positions"])
        labels = _fit(cls, matrices, directed, k, seed, options)
        _, compact = np.unique(labels, return_inverse=True)
        part = Partition(compact, int(compact.max()) + 1)
        stats = block_stats(matrices, directed, part)
        err = inconsistencies(stats, image(stats, criterion, alpha=alpha, cut=cut))
        rows.append({"k": k, "inconsistencies": int(err.sum()), "density_correlation": density_correlation(stats),
                     "icl": float(entry["icl"]), "log_likelihood": float(entry["log_likelihood"]),
                     "chosen": k == best_k})
        if k == best_k:
            chosen = labels
    return chosen, rows


def _canonical(sub_labels: np.ndarray, index: np.ndarray, n: int) -> tuple[np.ndarray, int]:
    """Number the tied actors' positions by decreasing size, then smallest actor index.

    Tieless actors get the label after the last tied position.
    """
    labels = np.empty(n, dtype=np.int64)
    if sub_labels.size == 0:
        labels[:] = 0
        return labels, 0
    uniq, first, inverse, counts = np.unique(sub_labels, return_index=True, return_inverse=True, return_counts=True)
    # index is increasing, so the first tied member is also the smallest actor index.
    order = np.lexsort((index[first], -counts))
    rank = np.empty(uniq.size, dtype=np.int64)
    rank[order] = np.arange(uniq.size)
    labels[:] = uniq.size
    labels[index] = rank[inverse]
    return labels, int(uniq.size)
