"""Telling options apart: best hours and compared wordings use one rule.

Two options whose intervals (on the log1p scale the model works on) overlap
by at least half of the narrower width are "about equal". Predictive
intervals include the post-to-post noise, so the rule is cautious: it only
calls a difference when it is large next to what a single post can do anyway.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

RULE = (
    "two options are about equal when their intervals (log1p scale) overlap by at least "
    "half of the narrower interval's width"
)


def heavy_overlap(a: tuple[float, float], b: tuple[float, float]) -> bool:
    """Whether intervals ``a`` and ``b`` (low, high) overlap by at least half
    of the narrower one's width (two equal points count as overlapping)."""
    overlap = min(a[1], b[1]) - max(a[0], b[0])
    narrower = min(a[1] - a[0], b[1] - b[0])
    return overlap >= 0.5 * narrower


def tied_with_best(logs: Sequence[tuple[float, float, float]]) -> tuple[int, list[bool]]:
    """Index of the highest median (first on ties) and, per option, whether
    its interval overlaps the best one's heavily (the best itself: True)."""
    best = int(np.argmax([m for _, m, _ in logs]))
    lo_b, _, hi_b = logs[best]
    return best, [heavy_overlap((lo_b, hi_b), (lo, hi)) for lo, _, hi in logs]


def ranks(medians: Sequence[float]) -> list[int]:
    order = sorted(range(len(medians)), key=lambda i: (-medians[i], i))
    ranks = [0] * len(medians)
    for r, i in enumerate(order, start=1):
        ranks[i] = r
    return ranks
