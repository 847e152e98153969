"""How the best-fitting ideal structure of each relation changes from period to period.

:func:`structures_over_time` lays the best :class:`~tracker.structures.ideal.IdealFit`
of each period and relation out as a table, says whether it is a clear
structure (significant) or "no clear structure", and marks the changes between
clear structures; :func:`describe_changes` turns that table into a short
summary for a report, naming positions by the display names given (for
example the names of aligned position tracks).

A structure is **clear** when both tests say so at the level ``alpha``
(0.05, common practice), after Benjamini-Hochberg correction across the
periods (Benjamini & Hochberg 1995; one family per relation, since each
relation asks its own question):

* the ideal's own test (:func:`tracker.structures.ideal.ideal_significance`:
  the ideal fits better than the same blocks rearranged at random), and
* the period's fit test (:mod:`tracker.inference.fit_test`: the method finds
  positions clearer than in networks drawn without positions), when given.

Without either test (no draws) significance is unknown and the closest ideal
is named as it is.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from tracker.errors import UsageError
from tracker.structures.ideal import IdealFit

__all__ = ["structures_over_time", "describe_changes", "NO_CLEAR_STRUCTURE", "SIGNIFICANCE"]

#: What the ``structure`` column says when the best ideal is not significant.
NO_CLEAR_STRUCTURE = "no clear structure"
#: Level of the significance verdicts (common practice).
SIGNIFICANCE = 0.05

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
    "q_value",
    "fit_q_value",
    "significant",
    "structure",
]


def structures_over_time(
    rows: Iterable,
    *,
    labels: Mapping | None = None,
    periods: Sequence | None = None,
    fit_q_values: Mapping | None = None,
    alpha: float = SIGNIFICANCE,
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
    fit_q_values : mapping, optional
        ``period -> q-value`` of the period's fit test (the ``q_value`` of the
        fit table); missing or NaN: not tested.
    alpha : float
        Level of the verdicts.

    Returns
    -------
    pandas.DataFrame
        One row per (period, relation), in period order, with columns
        ``period, relation, ideal`` (the closest ideal, significant or not),
        ``variant, mismatches, fit, p_value`` (the ideal's, NaN when not
        computed), ``roles`` (text such as ``"core: A, C; periphery: B"``),
        ``parts`` (dict from role to the tuple of names holding it, in rank
        order), ``changed`` (a clear structure whose ideal differs from the
        relation's previous clear structure), ``q_value`` (Benjamini-Hochberg
        over the relation's ideal p-values across periods), ``fit_q_value`` (the period's fit
        test), ``significant`` (True, False, or None when untested) and
        ``structure`` (the ideal, or ``"no clear structure"`` when
        ``significant`` is False).

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
    from tracker.inference.fit_test import benjamini_hochberg

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

    p_values = np.array([np.nan if f.p_value is None else float(f.p_value) for _, _, f in records])
    rel_of = np.array([r[1] for r in records], dtype=object)
    q_values = np.full(len(records), np.nan)
    for relation in relations:  # one family per relation: its periods
        at = np.flatnonzero(rel_of == relation)
        q_values[at] = benjamini_hochberg(p_values[at])
    out = []
    previous: dict = {}
    for (period, relation, fit), q in zip(records, q_values):
        names = (labels or {}).get(period, {}) or {}
        parts = _parts(fit, names)
        fit_q = _float((fit_q_values or {}).get(period))
        verdicts = [v <= alpha for v in (q, fit_q) if np.isfinite(v)]
        significant = all(verdicts) if verdicts else None
        clear = significant is not False
        changed = clear and relation in previous and previous[relation] != fit.ideal
        out.append(
            {
                "period": period,
                "relation": relation,
                "ideal": fit.ideal,
                "variant": fit.variant,
                "mismatches": fit.mismatches,
                "fit": float(fit.fit),
                "p_value": np.nan if fit.p_value is None else float(fit.p_value),
                "roles": "; ".join(f"{role}: {', '.join(who)}" for role, who in parts.items()),
                "parts": parts,
                "changed": bool(changed),
                "q_value": q,
                "fit_q_value": fit_q,
                "significant": significant,
                "structure": fit.ideal if clear else NO_CLEAR_STRUCTURE,
            }
        )
        if clear:
            previous[relation] = fit.ideal
    return pd.DataFrame(out, columns=_COLUMNS)


def describe_changes(table: pd.DataFrame, *, alpha: float = SIGNIFICANCE) -> list[str]:
    """A short summary of each relation's structure over time.

    First, when the table holds fit-test q-values, one sentence on the fit
    test.  Then, per relation, at most three kinds of sentence:

    1. the periods with a clear structure, grouped by ideal (with the leading
       part: core, centre or top position, when it stays the same);
    2. each change between consecutive clear structures whose ideals differ
       (the ``changed`` rows);
    3. one sentence on the rest: the periods with no clear structure.

    When significance is unknown (no tests were run) the closest ideal is
    named and the sentence says it is untested.

    Parameters
    ----------
    table : pandas.DataFrame
        From :func:`structures_over_time` (rows in period order).
    alpha : float
        Only quoted in the sentences (the verdicts are in the table).

    Returns
    -------
    list of str

    Examples
    --------
    >>> import numpy as np
    >>> from dataclasses import replace
    >>> from tracker.structures.ideal import closest_ideal
    >>> cp = replace(closest_ideal(np.array([[1, 1], [1, 0]]))[0], p_value=0.01)
    >>> coh = replace(closest_ideal(np.eye(2, dtype=int))[0], p_value=0.01)
    >>> noise = replace(coh, p_value=0.6)
    >>> rows = [("2014", "aid", cp), ("2015", "aid", noise), ("2016", "aid", coh)]
    >>> table = structures_over_time(rows, labels={"2014": {0: "North", 1: "South"}})
    >>> for line in describe_changes(table):
    ...     print(line)
    The aid structure is clear in 2 of 3 periods: core-periphery in 2014 (core: North); cohesive-subgroups in 2016.
    From 2014 to 2016 the aid structure changed from core-periphery to cohesive-subgroups.
    In 2015 the aid ties show no clear structure (the positions or the closest ideal are no clearer than random ties at the 0.05 level).
    """
    lines = []
    if table.empty:
        return lines
    order = list(dict.fromkeys(table["period"]))
    fit_q = table.drop_duplicates("period").set_index("period")["fit_q_value"].astype(float)
    if fit_q.notna().any():
        tested = fit_q.dropna()
        passed = tested[tested <= alpha]
        text = (f"Fit test: the positions are clearer than in random networks with as many ties in "
                f"{len(passed)} of {len(tested)} periods (q <= {alpha:g})")
        failed = [p for p in tested.index if p not in passed.index]
        lines.append(text + (f"; not in {_spans(failed, order)}." if failed else "."))
    for relation in dict.fromkeys(table["relation"]):
        steps = table[table["relation"] == relation].to_dict("records")
        clear = [r for r in steps if r["significant"] is not False and not _is_na(r["significant"])]
        untested = [r for r in steps if r["significant"] is None or _is_na(r["significant"])]
        unclear = [r for r in steps if r["significant"] is False]
        if clear:
            lines.append(f"The {relation} structure is clear in {len(clear)} of {len(steps)} periods: "
                         + "; ".join(_runs(clear, order)) + ".")
        if untested:
            lines.append(f"Untested (no draws), the {relation} structure is closest to: "
                         + "; ".join(_runs(untested, order)) + ".")
        known = [r for r in steps if r["significant"] is not False]
        for before, after in zip(known, known[1:]):
            if after["changed"]:
                lines.append(f"From {before['period']} to {after['period']} the {relation} structure changed "
                             f"from {before['ideal']} to {after['ideal']}.")
        if unclear:
            where = _spans([r["period"] for r in unclear], order)
            lines.append(f"In {where} the {relation} ties show no clear structure (the positions or the "
                         f"closest ideal are no clearer than random ties at the {alpha:g} level).")
    return lines


def _is_na(value) -> bool:
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _float(value) -> float:
    try:
        return float(value) if value is not None else float("nan")
    except (TypeError, ValueError):
        return float("nan")


def _spans(periods: Sequence, order: Sequence) -> str:
    """Periods as runs of consecutive ones: "2008-2010, 2012 and 2014"."""
    index = {p: i for i, p in enumerate(order)}
    runs: list[list] = []
    for p in sorted(periods, key=index.__getitem__):
        if runs and index[p] == index[runs[-1][-1]] + 1:
            runs[-1].append(p)
        else:
            runs.append([p])
    return _join([str(r[0]) if len(r) == 1 else f"{r[0]}-{r[-1]}" for r in runs])


def _runs(rows: list, order: Sequence) -> list[str]:
    """Consecutive rows with the same ideal and lead, as "core-periphery in 2008-2010 (core: A)"."""
    groups: list[list] = []
    for row in rows:
        if groups and groups[-1][-1]["ideal"] == row["ideal"] and _lead(groups[-1][-1]) == _lead(row):
            groups[-1].append(row)
        else:
            groups.append([row])
    out = []
    for group in groups:
        lead = _lead_text(group[0])
        out.append(f"{group[0]['ideal']} in {_spans([r['period'] for r in group], order)}"
                   + (f" ({lead[0]}: {lead[1]})" if lead else ""))
    return out


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


def _join(names: Sequence[str]) -> str:
    names = list(names)
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]
