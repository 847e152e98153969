"""Likely duplicate actor names: the same name in other case, punctuation or a small misspelling.

Pure functions on lists of labels (no database).  Each name gets a *key*:
case-folded (Unicode default case folding, ``str.casefold``), accents kept,
every character that is not a letter or digit removed.  Two names are likely
the same actor when

* their keys are equal (``case`` when only case differs, else ``punctuation``), or
* the Levenshtein distance between their keys is at most ``max_edits``
  (``spelling``) and the keys are at least ``min_length`` characters long,
  so that short codes ("US", "UK") are not paired.

Edit distances come from rapidfuzz (``rapidfuzz.distance.Levenshtein``,
Levenshtein 1966: insertions, deletions and substitutions, each of cost 1),
computed in blocks of rows so memory stays ``block x n``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["name_key", "similar_names"]


def name_key(label: str) -> str:
    """The comparison key: case-folded letters and digits only."""
    return "".join(ch for ch in str(label).casefold() if ch.isalnum())


def similar_names(labels, *, max_edits: int = 1, min_length: int = 5, block: int = 2000) -> pd.DataFrame:
    """Pairs of labels that likely name the same actor.

    Returns a frame with columns ``name``, ``other``, ``reason`` (case,
    punctuation, spelling) and ``edits`` (edit distance between the keys),
    one row per pair, ``name`` < ``other`` in code-point order, sorted.
    """
    if max_edits < 0 or min_length < 1 or block < 1:
        raise ValueError("max_edits must be >= 0, min_length and block >= 1")
    from rapidfuzz.distance import Levenshtein
    from rapidfuzz.process import cdist

    labels = sorted({str(x) for x in labels})
    keys = [name_key(x) for x in labels]
    rows: list[tuple[str, str, str, int]] = []
    by_key = pd.Series(range(len(labels))).groupby(pd.Series(keys)).agg(list)
    for key, members in by_key.items():
        for i, a in enumerate(members):
            for b in members[i + 1:]:
                same_case = labels[a].casefold() == labels[b].casefold()
                rows.append((labels[a], labels[b], "case" if same_case else "punctuation", 0))
    if max_edits > 0:
        unique = [k for k in by_key.index if len(k) >= min_length]
        first = {k: by_key[k][0] for k in unique}
        lengths = np.array([len(k) for k in unique])
        for start in range(0, len(unique), block):
            part = unique[start : start + block]
            dist = cdist(part, unique, scorer=Levenshtein.distance, score_cutoff=max_edits, dtype=np.int32, workers=-1)
            hit_i, hit_j = np.nonzero(dist <= max_edits)
            for i, j in zip(hit_i.tolist(), hit_j.tolist()):
                gi = start + i
                if j <= gi or abs(lengths[gi] - lengths[j]) > max_edits or dist[i, j] == 0:
                    continue
                a, b = sorted((labels[first[unique[gi]]], labels[first[unique[j]]]))
                rows.append((a, b, "spelling", int(dist[i, j])))
    frame = pd.DataFrame(rows, columns=["name", "other", "reason", "edits"])
    return frame.sort_values(["name", "other"]).reset_index(drop=True)
