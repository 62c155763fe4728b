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

from typing import Any

import numpy as np

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
