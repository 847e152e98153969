"""How the best-fitting ideal structure of each relation changes from period to period.

:func:`structures_over_time` lays the best :class:`~tracker.structures.ideal.IdealFit`
of each period and relation out as a table; :func:`describe_changes` turns that
table into plain sentences for a report, naming positions by the display names
given (for example the names of aligned position tracks).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from tracker.errors import UsageError
from tracker.structures.ideal import IdealFit

__all__ = ["structures_over_time", "describe_changes"]

_COLUMNS = [
    "period",
    "relation",
    "ideal",
    "variant",
    "mismatches",
    "fit",
    "p_value",
    "roles",
    "parts",
    "changed",
]


def structures_over_time(
    rows: Iterable,
    *,
    labels: Mapping | None = None,
    periods: Sequence | None = None,
) -> pd.DataFrame:
    """Table of the best ideal structure per period and relation.

    Parameters
    ----------
    rows : iterable
        Each item is ``(period, relation, fit)`` or a mapping with keys
        ``"period"``, ``"relation"``, ``"fit"``; ``fit`` is the best
        :class:`~tracker.structures.ideal.IdealFit` of that relation's image in
        that period.  Each (period, relation) at most once.
    labels : mapping, optional
        ``labels[period][k]`` is the display name of position ``k`` in that period
        (e.g. its track's name).  Positions without a name show as ``"position k"``.
    periods : sequence, optional
        The order of the periods.  Default: the order in which they first appear in
        ``rows``.

    Returns
    -------
    pandas.DataFrame
        One row per (period, relation), in period order, with columns
        ``period, relation, ideal, variant, mismatches, fit, p_value`` (NaN when
        not computed), ``roles`` (text such as ``"core: A, C; periphery: B"``),
        ``parts`` (dict from role to the tuple of names holding it, in rank order)
        and ``changed`` (the ideal differs from the one of the previous period of
        the same relation; False in a relation's first period).

    Examples
    --------
    >>> import numpy as np
    >>> from tracker.structures.ideal import closest_ideal
    >>> cp = closest_ideal(np.array([[1, 1], [1, 0]]))[0]
    >>> coh = closest_ideal(np.eye(3, dtype=int))[0]
    >>> table = structures_over_time([("2014", "aid", cp), ("2015", "aid", coh)],
    ...                              labels={"2014": {0: "North", 1: "South"}})
    >>> table["roles"].tolist()
    ['core: North; periphery: South', 'subgroup: position 0, position 1, position 2']
    >>> table["changed"].tolist()
    [False, True]
    """
    records = [_unpack(row) for row in rows]
    order = list(periods) if periods is not None else list(dict.fromkeys(r[0] for r in records))
    rank = {p: i for i, p in enumerate(order)}
    seen = set()
    for period, relation, _ in records:
        if period not in rank:
            raise UsageError(f"period {period!r} is not in the periods given; add it to periods")
        if (period, relation) in seen:
            raise UsageError(
                f"period {period!r} and relation {relation!r} appear twice; pass one best fit for each"
            )
        seen.add((period, relation))
    relations = list(dict.fromkeys(r[1] for r in records))
    records.sort(key=lambda r: (rank[r[0]], relations.index(r[1])))

    out = []
    previous: dict = {}
    for period, relation, fit in records:
        names = (labels or {}).get(period, {}) or {}
        parts = _parts(fit, names)
        out.append(
            {
                "period": period,
                "relation": relation,
                "ideal": fit.ideal,
                "variant": fit.variant,
                "mismatches": int(fit.mismatches),
                "fit": float(fit.fit),
                "p_value": np.nan if fit.p_value is None else float(fit.p_value),
                "roles": "; ".join(f"{role}: {', '.join(who)}" for role, who in parts.items()),
                "parts": parts,
                "changed": relation in previous and previous[relation] != fit.ideal,
            }
        )
        previous[relation] = fit.ideal
    return pd.DataFrame(out, columns=_COLUMNS)


def describe_changes(table: pd.DataFrame, *, alpha: float = 0.05) -> list[str]:
    """Plain sentences on each relation's structure and how it changed.

    Per relation: one sentence on its first period; one for each step where the
    ideal changed ("From 2014 to 2015 the aid structure changed from
    core-periphery to cohesive-subgroups (fit 0.94 -> 0.88)."), or where it stayed
    but its leading part changed (a different core, centre or top position); and,
    when nothing changed at all, one sentence saying so.  A structure whose
    ``p_value`` exceeds ``alpha`` is flagged as no clearer than random ties of the
    same density.

    Parameters
    ----------
    table : pandas.DataFrame
        From :func:`structures_over_time` (rows in period order).
    alpha : float
        Threshold for the flag on ``p_value``.

    Returns
    -------
    list of str

    Examples
    --------
    >>> import numpy as np
    >>> from tracker.structures.ideal import closest_ideal
    >>> cp = closest_ideal(np.array([[1, 1], [1, 0]]))[0]
    >>> coh = closest_ideal(np.eye(2, dtype=int))[0]
    >>> table = structures_over_time([("2014", "aid", cp), ("2015", "aid", coh)],
    ...                              labels={"2014": {0: "North", 1: "South"}})
    >>> for line in describe_changes(table):
    ...     print(line)
    In 2014 the aid structure was closest to core-periphery (fit 1.00); the core is North.
    From 2014 to 2015 the aid structure changed from core-periphery to cohesive-subgroups (fit 1.00 -> 1.00).
    """
    lines = []
    for relation in dict.fromkeys(table["relation"]):
        steps = table[table["relation"] == relation].to_dict("records")
        first = steps[0]
        lines.append(
            f"In {first['period']} the {relation} structure was closest to {first['ideal']}"
            f" (fit {first['fit']:.2f}{_p_text(first['p_value'])})"
            + _lead_clause(first, "; ")
            + _chance_clause(first, alpha)
            + "."
        )
        said = False
        for before, after in zip(steps, steps[1:]):
            span = f"From {before['period']} to {after['period']} the {relation} structure"
            fits = f"(fit {before['fit']:.2f} -> {after['fit']:.2f})"
            if after["ideal"] != before["ideal"]:
                text = f"{span} changed from {before['ideal']} to {after['ideal']} {fits}"
                lines.append(text + _lead_clause(after, "; ") + _chance_clause(after, alpha) + ".")
                said = True
            elif _lead(before) != _lead(after):
                (what, was), (_, now) = _lead_text(before), _lead_text(after)
                lines.append(
                    f"{span} stayed {after['ideal']} {fits}; the {what} changed from {was} to {now}"
                    + _chance_clause(after, alpha)
                    + "."
                )
                said = True
        if len(steps) > 1 and not said:
            lines.append(
                f"From {first['period']} to {steps[-1]['period']} the {relation} structure "
                f"stayed {first['ideal']} (fit {first['fit']:.2f} -> {steps[-1]['fit']:.2f})."
            )
    return lines


def _unpack(row) -> tuple:
    if isinstance(row, Mapping):
        try:
            row = (row["period"], row["relation"], row["fit"])
        except KeyError as missing:
            raise UsageError(f"a row lacks the key {missing}; give period, relation and fit") from None
    period, relation, fit = row
    if not isinstance(fit, IdealFit):
        raise UsageError(f"the fit of {period!r}, {relation!r} is not an IdealFit; pass closest_ideal(...)[0]")
    return period, relation, fit


def _parts(fit: IdealFit, names: Mapping) -> dict[str, tuple[str, ...]]:
    """Role -> names holding it, roles and names in rank order."""
    parts: dict[str, list[str]] = {}
    for k in fit.order:
        parts.setdefault(fit.roles[k], []).append(str(names.get(k, f"position {k}")))
    return {role: tuple(who) for role, who in parts.items()}


def _lead(row) -> tuple:
    """What leads the structure: the core, the centre (and its variant), the top rank."""
    parts = row["parts"]
    if row["ideal"] == "core-periphery":
        return parts["core"]
    if row["ideal"] == "centralized":
        return parts["centre"] + (row["variant"],)
    if row["ideal"] in ("hierarchy", "transitive"):
        return parts["rank 1 (top)"]
    return ()


def _lead_clause(row, prefix: str) -> str:
    lead = _lead_text(row)
    return "" if lead is None else f"{prefix}the {lead[0]} is {lead[1]}"


def _lead_text(row) -> tuple[str, str] | None:
    """(what leads, who) for the sentences: ("core", "A and B"), or None."""
    parts, ideal = row["parts"], row["ideal"]
    if ideal == "core-periphery":
        return "core", _join(parts["core"])
    if ideal == "centralized":
        way = "go to it" if row["variant"] == "to-centre" else "come from it"
        return "centre", f"{_join(parts['centre'])} (ties {way})"
    if ideal in ("hierarchy", "transitive"):
        return "top position", _join(parts["rank 1 (top)"])
    return None


def _chance_clause(row, alpha: float) -> str:
    p = row["p_value"]
    if p is None or np.isnan(p) or p <= alpha:
        return ""
    return f"; it is no clearer than random ties of the same density (p = {p:.2f})"


def _p_text(p) -> str:
    return "" if p is None or np.isnan(p) else f", p = {p:.3f}"


def _join(names: Sequence[str]) -> str:
    names = list(names)
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]
