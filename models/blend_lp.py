"""Blend weights for the loss the forecast is scored on: absolute error.

The served point forecast is read as a median and scored by the mean
absolute error of log values, so its weights minimise that loss:

    minimise sum_i |y_i - F_i w - E_i g|   subject to  w >= 0, sum(w) = 1, g >= 0

a small linear program (each residual split into its positive and negative
parts; scipy.optimize.linprog, HiGHS). The optimum is a quantile
regression at 0.5 through the origin restricted to the simplex. Least
squares (``models.blend``) pulls the blend towards a mean on heavy-tailed
outcomes, which costs absolute error.

``choose_weights`` then checks the blend in time order: weights fitted on
the earlier half of the stacking rows are scored on the later half beside
each candidate alone. When the blend is worse than the better simple
forecaster there (``simple_reference``), on absolute error or on rank
correlation, the served forecast falls back to a single model that is not
(boosted, text ridge, learned neighbours), or failing that to that simple
forecaster as it is. The blend and the models must beat its absolute error
by one standard error of the paired difference to count as no worse.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from models.errors import InputError
from models.evaluation import spearman

#: Rows fed to the linear program at most (evenly spaced in time order): the
#: optimum of a few weights is settled long before this, and HiGHS time
#: grows with the rows.
MAX_LP_ROWS = 20_000
#: Ties within this much count as "no worse" (float noise, our choice).
TOL = 1e-9


def absolute_weights(
    forecasts: ArrayLike, y: ArrayLike, effects: ArrayLike | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """``(w, g)`` minimising the summed absolute error; ``w`` on the simplex,
    ``g >= 0`` for the effect columns."""
    from scipy.optimize import linprog

    F = np.asarray(forecasts, dtype=np.float64)
    t = np.asarray(y, dtype=np.float64)
    if F.ndim != 2 or F.shape[1] == 0 or t.shape != (F.shape[0],) or F.shape[0] == 0:
        raise InputError("forecasts must be (rows x candidates) with one target per row", field="forecasts")
    E = (
        np.zeros((F.shape[0], 0))
        if effects is None
        else np.asarray(effects, dtype=np.float64).reshape(len(t), -1)
    )
    if not (np.isfinite(F).all() and np.isfinite(t).all() and np.isfinite(E).all()):
        raise InputError("forecasts, effects and y must be finite", field="forecasts")
    if len(t) > MAX_LP_ROWS:
        keep = np.linspace(0, len(t) - 1, MAX_LP_ROWS).round().astype(int)
        F, E, t = F[keep], E[keep], t[keep]
    n, k, m = F.shape[0], F.shape[1], E.shape[1]
    # Solved through its dual, which has one bounded variable per row and
    # only k + m constraints (the primal's 2n residual parts made HiGHS
    # 40x slower at 20,000 rows; our measurement):
    #     maximise y'd + lam  s.t.  F'd + lam <= 0,  E'd <= 0,  -1 <= d <= 1
    # The primal weights are the multipliers of those constraints.
    c = np.r_[-t, -1.0]
    a_ub = np.vstack([np.hstack([F.T, np.ones((k, 1))]), np.hstack([E.T, np.zeros((m, 1))])])
    bounds = [(-1.0, 1.0)] * n + [(None, None)]
    res = linprog(c, A_ub=a_ub, b_ub=np.zeros(k + m), bounds=bounds, method="highs")
    if res.status != 0:  # pragma: no cover - the problem is always feasible and bounded
        raise InputError(f"blend weights: {res.message}", field="forecasts")
    mult = np.clip(-np.asarray(res.ineqlin.marginals, dtype=float), 0.0, None)
    w = mult[:k] / mult[:k].sum()
    return w, mult[k:]


def _spear(y: np.ndarray, f: np.ndarray) -> float:
    s = spearman(y, f)
    return -1.0 if np.isnan(s) else s  # a constant forecast ranks nothing


def _scores(y: np.ndarray, f: np.ndarray) -> dict[str, float]:
    return {"mae_log": float(np.mean(np.abs(y - f))), "spearman": _spear(y, f)}


def _paired_se(d: np.ndarray) -> float:
    """Standard error of the mean of paired differences."""
    return float(np.std(d, ddof=1) / np.sqrt(len(d))) if len(d) > 1 else 0.0


def simple_reference(y: np.ndarray, forecasts: dict[str, np.ndarray]) -> str:
    """The better simple forecaster: of those whose absolute error is within
    one standard error of the least (paired differences), the one that ranks
    best, then the least error. A constant forecaster often has the least
    error by a hair and ranks nothing; one that ranks as well and errs as
    little is the bar to meet on both measures."""
    y = np.asarray(y, dtype=np.float64)
    err = {s: np.abs(y - np.asarray(f, dtype=np.float64)) for s, f in forecasts.items()}
    least = min(err, key=lambda s: float(np.mean(err[s])))
    close = [
        s
        for s in err
        if float(np.mean(err[s])) <= float(np.mean(err[least])) + _paired_se(err[s] - err[least]) + TOL
    ]
    return max(close, key=lambda s: (_spear(y, forecasts[s]), -float(np.mean(err[s]))))


@dataclass
class BlendChoice:
    """The weights served and why: ``kind`` is "blend" or "fallback"."""

    weights: np.ndarray
    effect_weights: np.ndarray
    kind: str
    fallback_to: str | None = None
    raw: bool = False
    check: dict[str, dict[str, float]] = field(default_factory=dict)


def choose_weights(
    forecasts: ArrayLike,
    y: ArrayLike,
    names: Sequence[str],
    simple: Sequence[str],
    effects: ArrayLike | None = None,
    *,
    references: ArrayLike | None = None,
) -> BlendChoice:
    """Absolute-loss weights on all rows, kept when the time-ordered check
    (fit on the earlier half, score on the later half) finds the blend no
    worse than the best simple forecaster on both MAE and Spearman; else a
    single candidate. Rows in time order. ``references`` (rows x len(simple))
    are the simple forecasters to beat when the candidates named ``simple``
    are adjusted versions of them (default: those candidate columns)."""
    F = np.asarray(forecasts, dtype=np.float64)
    t = np.asarray(y, dtype=np.float64)
    E = None if effects is None else np.asarray(effects, dtype=np.float64).reshape(len(t), -1)
    names = [str(x) for x in names]
    w, g = absolute_weights(F, t, E)
    half = len(t) // 2
    if half < 10 or len(t) - half < 10:
        return BlendChoice(w, g, "blend")
    w_a, g_a = absolute_weights(F[:half], t[:half], None if E is None else E[:half])
    tb = t[half:]
    later = {"blend": F[half:] @ w_a + (0.0 if E is None else E[half:] @ g_a)}
    later.update({nm: F[half:, j] for j, nm in enumerate(names)})
    if references is None:
        bars = {s: later[s] for s in simple}
    else:
        R = np.asarray(references, dtype=np.float64).reshape(len(t), -1)[half:]
        bars = dict(zip(simple, R.T, strict=True))
    check = {k: _scores(tb, f) for k, f in later.items()}
    bar = {s: _scores(tb, f) for s, f in bars.items()}
    # The blend must match the better simple forecaster on both absolute
    # error and rank correlation.
    ref = simple_reference(tb, bars)
    check["reference"] = {**bar[ref]}
    ref_err = np.abs(tb - bars[ref])

    def no_worse(key: str) -> bool:
        # Any forecaster but the reference as it is (the blend, the models,
        # a simple forecaster carrying the timing effect) must beat the
        # reference by one standard error of the paired difference in
        # absolute error (the one-standard-error rule: Breiman, Friedman,
        # Olshen & Stone 1984, sec. 3.4.3; Hastie, Tibshirani & Friedman,
        # ESL sec. 7.10): a win within the noise of half a stacking block
        # did not survive the next block of real posts in our backtests.
        # A candidate equal to the reference has no spread, so no margin.
        margin = _paired_se(np.abs(tb - later[key]) - ref_err)
        return (
            check[key]["mae_log"] + margin <= bar[ref]["mae_log"] + TOL
            and check[key]["spearman"] >= bar[ref]["spearman"] - TOL
        )

    if no_worse("blend"):
        return BlendChoice(w, g, "blend", check=check)
    # A model alone where one holds up; else the better simple forecaster
    # itself (``raw``: as it is, without the adjustments the candidates
    # carry), so a fallback serves exactly the forecaster it fell back to.
    fine = [nm for nm in names if nm not in simple and no_worse(nm)]
    pick = min(fine, key=lambda nm: check[nm]["mae_log"]) if fine else ref
    one = np.zeros(len(names))
    one[names.index(pick)] = 1.0
    return BlendChoice(one, np.zeros_like(g), "fallback", fallback_to=pick, check=check, raw=not fine)
