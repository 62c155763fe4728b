"""Stacking weights: least squares over candidate forecasts with
non-negative weights that sum to one, plus optional non-negative
"effect" columns outside that sum (an additive timing effect).

    minimise ||y - F w - E g||^2   subject to  w >= 0, sum(w) = 1, g >= 0

The candidates are few (under ten), so the exact optimum is found by
trying every support: on each subset of active columns the equality-
constrained least squares has a closed form (its KKT system); the best
feasible one is the optimum of this convex problem.
"""

from __future__ import annotations

import itertools

import numpy as np
from numpy.typing import ArrayLike

from models.errors import InputError

MAX_COLUMNS = 12


def simplex_weights(
    forecasts: ArrayLike, y: ArrayLike, effects: ArrayLike | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """``(w, g)``: weights of the candidate forecasts (>= 0, summing to 1)
    and of the effect columns (>= 0)."""
    F = np.asarray(forecasts, dtype=np.float64)
    t = np.asarray(y, dtype=np.float64)
    E = (
        np.zeros((F.shape[0], 0))
        if effects is None
        else np.asarray(effects, dtype=np.float64).reshape(F.shape[0], -1)
    )
    if F.ndim != 2 or F.shape[1] == 0 or t.shape != (F.shape[0],):
        raise InputError("forecasts must be (rows x candidates) with one target per row", field="forecasts")
    if not (np.isfinite(F).all() and np.isfinite(t).all() and np.isfinite(E).all()):
        raise InputError("forecasts, effects and y must be finite", field="forecasts")
    k, m = F.shape[1], E.shape[1]
    if k + m > MAX_COLUMNS:
        raise InputError(f"at most {MAX_COLUMNS} columns", field="forecasts")
    A = np.hstack([F, E])
    AtA, Aty = A.T @ A, A.T @ t
    best: tuple[float, np.ndarray] | None = None
    for size in range(1, k + 1):
        for fs in itertools.combinations(range(k), size):
            for es_size in range(m + 1):
                for es in itertools.combinations(range(k, k + m), es_size):
                    cols = list(fs) + list(es)
                    n = len(cols)
                    kkt = np.zeros((n + 1, n + 1))
                    kkt[:n, :n] = AtA[np.ix_(cols, cols)]
                    kkt[:size, n] = kkt[n, :size] = 1.0
                    rhs = np.r_[Aty[cols], 1.0]
                    sol = np.linalg.lstsq(kkt, rhs, rcond=None)[0][:n]
                    if np.any(sol < -1e-10):
                        continue
                    full = np.zeros(k + m)
                    full[cols] = np.clip(sol, 0.0, None)
                    full[:k] /= full[:k].sum()
                    loss = float(np.sum((t - A @ full) ** 2))
                    if best is None or loss < best[0] - 1e-12:
                        best = (loss, full)
    assert best is not None  # a single candidate with weight 1 is always feasible
    return best[1][:k], best[1][k:]
