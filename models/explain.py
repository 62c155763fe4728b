"""Explanations of a forecast: TreeSHAP contributions grouped into
precedents, timing, account baseline and text form.

LightGBM's ``pred_contrib=True`` gives one contribution per feature plus the
expected value in the last column; they add up to the model's raw output
(TreeSHAP local accuracy, Lundberg et al. 2020). On the log1p scale a sum
becomes a product, so each group reads as a multiplicative effect on
(1 + metric).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from models.features import GROUPS


@dataclass(frozen=True, slots=True)
class GroupEffect:
    group: str
    log_contribution: float
    factor: float  # exp(log_contribution)
    summary: str


def group_contributions(
    contrib_row: np.ndarray, feature_names: Sequence[str], groups: Mapping[str, str]
) -> tuple[float, dict[str, float]]:
    """(expected value, {group: summed contribution}) for one row."""
    expected = float(contrib_row[-1])
    sums = dict.fromkeys(GROUPS, 0.0)
    for name, value in zip(feature_names, contrib_row[:-1], strict=True):
        g = groups.get(name, "text form")
        sums[g] = sums.get(g, 0.0) + float(value)
    return expected, sums


_WHY = {
    "precedents": ("similar past posts did better than usual", "similar past posts did worse than usual"),
    "timing": ("the planned hour and day tend to do well", "the planned hour and day tend to do worse"),
    "account baseline": (
        "this account's recent posts run above the team's usual",
        "this account's recent posts run below the team's usual",
    ),
    "text form": (
        "the draft's form (length, link, tags, media) helps",
        "the draft's form (length, link, tags, media) holds it back",
    ),
}


def describe(group: str, log_contribution: float) -> GroupEffect:
    """A one-line, plain reading of one group's effect."""
    factor = float(np.exp(log_contribution))
    if abs(factor - 1.0) < 0.03:
        text = f"{group}: about neutral (x{factor:.2f})"
    else:
        up, down = _WHY.get(group, ("raises the forecast", "lowers the forecast"))
        pct = (factor - 1.0) * 100
        text = f"{group}: x{factor:.2f} ({pct:+.0f}%), {up if factor > 1 else down}"
    return GroupEffect(group, float(log_contribution), factor, text)
