"""When the learned-neighbours candidate is kept: only when, in time order,
the forecast with it beats the forecast without it.

Judged as the fallback rule judges (``models.blend_lp``,
``models.backtest.fallback_after``): mean absolute error of log values and
Spearman's rank correlation, on rows the weights were not fitted on. Kept
when it is no worse on both and better on at least one (within ``TOL``);
a tie (the blend gave it no weight) leaves it out, so it never serves
without having shown a gain.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from models.blend_lp import BlendChoice, choose_weights
from models.evaluation import mae, spearman

LEARNED = "learned_neighbours"
#: Ties within this much count as equal (float noise, our choice).
TOL = 1e-9


def _rank(y: np.ndarray, f: np.ndarray) -> float:
    r = spearman(y, f)
    return -1.0 if np.isnan(r) else float(r)


def scores(y: np.ndarray, f: np.ndarray) -> dict[str, float]:
    return {"mae_log": float(mae(y, f)), "spearman": _rank(y, f)}


def improves(with_: dict[str, float], without: dict[str, float]) -> bool:
    """Whether scores ``with_`` beat ``without`` (see the module doc)."""
    no_worse = with_["mae_log"] <= without["mae_log"] + TOL and with_["spearman"] >= without["spearman"] - TOL
    better = with_["mae_log"] < without["mae_log"] - TOL or with_["spearman"] > without["spearman"] + TOL
    return bool(no_worse and better)


def served_check(
    check: dict[str, dict[str, float]], kind: str, fallback_to: str | None
) -> dict[str, float] | None:
    """The later-half scores of what a blend choice serves (its blend, or the
    candidate it fell back to); None when the choice had no such check."""
    if not check:
        return None
    if kind == "blend":
        return check.get("blend")
    return check.get(fallback_to or "", check.get("reference"))


def learned_after(y: np.ndarray, with_: np.ndarray, without: np.ndarray) -> dict[str, Any]:
    """The backtest's verdict over pooled test folds: the forecast served
    with the candidate on offer against the same forecast without it."""
    a, b = scores(y, with_), scores(y, without)
    return {"in_use": improves(a, b), "with": a, "without": b}


@dataclass
class LearnedChoice:
    """The blend served and the blend without the learned neighbours, both
    with one weight per candidate (the learned one 0 in ``without``)."""

    served: BlendChoice
    without: BlendChoice
    in_use: bool
    check: dict[str, Any]


def choose_with_learned(
    forecasts: dict[str, np.ndarray],
    y: np.ndarray,
    names: Sequence[str],
    simple: Sequence[str],
    effects: np.ndarray | None,
    references: np.ndarray,
    *,
    offered: bool,
) -> LearnedChoice:
    """Blend weights with and without the learned neighbours on the stack
    block (``models.blend_lp.choose_weights``, rows in time order); the
    learned ones are served only when what the blend with them serves beats
    what the blend without them serves on the later half (``improves``)."""
    names = list(names)
    frozen = [c for c in names if c != LEARNED]

    def blend_of(cols: list[str]) -> BlendChoice:
        F = np.column_stack([forecasts[c] for c in cols])
        return choose_weights(F, y, cols, simple, effects, references=references)

    without = blend_of(frozen)
    full = np.array([0.0 if c == LEARNED else without.weights[frozen.index(c)] for c in names])
    without = replace(without, weights=full)
    if not offered:
        return LearnedChoice(without, without, False, {})
    choice = blend_of(names)
    a = served_check(choice.check, choice.kind, choice.fallback_to)
    b = served_check(without.check, without.kind, without.fallback_to)
    use = a is not None and b is not None and improves(a, b)
    return LearnedChoice(choice if use else without, without, use, {"with": a, "without": b})
