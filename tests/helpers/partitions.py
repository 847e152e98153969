"""Brute-force enumeration of partitions, for checks against a definition."""

from __future__ import annotations

import numpy as np


def set_partitions(n: int):
    """Every partition of range(n) as labels numbered by first appearance (restricted growth strings)."""

    def grow(prefix, top):
        if len(prefix) == n:
            yield np.array(prefix)
            return
        for label in range(top + 2):
            yield from grow(prefix + [label], max(top, label))

    yield from grow([0], 0) if n else iter([np.zeros(0, dtype=int)])
