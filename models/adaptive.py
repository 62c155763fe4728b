"""Adaptive conformal inference (ACI) on top of a conformal calibration.

Gibbs & Candès, "Adaptive Conformal Inference Under Distribution Shift",
NeurIPS 2021. A split-conformal band uses the ``1 - alpha`` quantile of
calibration scores. When the data drift, that band's coverage drifts too.
ACI keeps a working level ``alpha_t`` and, after each outcome, moves it:

    alpha_{t+1} = alpha_t + gamma * (alpha - err_t)

where ``err_t`` is 1 when the outcome fell outside the band given at time
``t``. Misses shrink ``alpha_t`` (wider bands), hits grow it. For any
sequence of outcomes, adversarial or not, the long-run miss rate obeys
(their Proposition 4.1)

    |mean(err) - alpha| <= (max(alpha_1, 1 - alpha_1) + gamma) / (gamma * T)

provided ``alpha_t <= 0`` gives the whole line (never a miss) and
``alpha_t >= 1`` the empty set (always a miss); ``quantile`` keeps to that.

The scores are the CQR conformity scores of :mod:`models.calibration`
(``max(lo - y, y - hi)``), so the adapted band is ``[lo - q_t, hi + q_t]``
with ``q_t`` the ``1 - alpha_t`` conformal quantile. ``window`` optionally
adds each new score to the calibration scores and keeps the latest
``window`` of them, as in the paper's experiments.
"""

from __future__ import annotations

import math
from collections import deque
from typing import Self

import numpy as np
from numpy.typing import ArrayLike

from models.calibration import conformal_rank
from models.errors import InputError, NotFittedError


def aci_step(alpha_t: float, *, alpha: float, gamma: float, miss: bool) -> float:
    """One ACI update of the working level."""
    return alpha_t + gamma * (alpha - (1.0 if miss else 0.0))


def adaptive_quantile(sorted_scores: np.ndarray, alpha_t: float) -> float:
    """The ``1 - alpha_t`` conformal quantile of sorted scores, with ACI's
    edges: ``alpha_t <= 0`` gives ``+inf`` (the whole line), ``alpha_t >= 1``
    gives ``-inf`` (the empty set)."""
    n = len(sorted_scores)
    if n == 0:
        raise InputError("no calibration scores", field="scores")
    if alpha_t <= 0.0:
        return math.inf
    if alpha_t >= 1.0:
        return -math.inf
    k = conformal_rank(n, alpha_t)
    return math.inf if k > n else float(sorted_scores[k - 1])


class AdaptiveConformal:
    """ACI over a set of calibration scores (sklearn estimator habits).

    ``fit(scores)`` stores the calibration scores; ``band(lo, hi)`` widens a
    raw band by the current quantile; ``update(y, lo, hi)`` scores the
    outcome against the band that was given and moves ``alpha_t_``.
    """

    def __init__(
        self,
        *,
        alpha: float = 0.2,
        gamma: float = 0.005,
        alpha_start: float | None = None,
        window: int | None = None,
    ) -> None:
        self.alpha = alpha
        self.gamma = gamma
        self.alpha_start = alpha_start
        self.window = window

    def fit(self, scores: ArrayLike) -> Self:
        if not 0.0 < float(self.alpha) < 1.0:
            raise InputError(f"alpha must lie in (0, 1), got {self.alpha}", field="alpha")
        if not 0.0 < float(self.gamma) <= 1.0:
            raise InputError(f"gamma must lie in (0, 1], got {self.gamma}", field="gamma")
        s = np.asarray(scores, dtype=float).ravel()
        if s.size == 0 or not np.isfinite(s).all():
            raise InputError("calibration scores must be finite and non-empty", field="scores")
        keep = s[-self.window :] if self.window else s
        self.recent_: deque[float] = deque(keep.tolist(), maxlen=self.window or None)
        self.sorted_ = np.sort(keep)
        self.alpha_t_ = float(self.alpha if self.alpha_start is None else self.alpha_start)
        self.misses_: list[bool] = []
        return self

    def _check_fitted(self) -> None:
        if not hasattr(self, "alpha_t_"):
            raise NotFittedError(
                "AdaptiveConformal is not fitted yet; call fit(scores) first", where="AdaptiveConformal"
            )

    def quantile(self) -> float:
        self._check_fitted()
        return adaptive_quantile(self.sorted_, self.alpha_t_)

    def band(self, lo: ArrayLike, hi: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
        q = self.quantile()
        return np.asarray(lo, dtype=float) - q, np.asarray(hi, dtype=float) + q

    def update(self, y: float, lo: float, hi: float) -> bool:
        """Score one outcome against the band given now, then adapt. Returns
        whether it was a miss."""
        q = self.quantile()
        miss = not (lo - q <= y <= hi + q)
        self.misses_.append(miss)
        self.alpha_t_ = aci_step(self.alpha_t_, alpha=float(self.alpha), gamma=float(self.gamma), miss=miss)
        if self.window:
            self.recent_.append(float(max(lo - y, y - hi)))
            self.sorted_ = np.sort(np.fromiter(self.recent_, dtype=float))
        return miss


def aci_bound(*, alpha_start: float, gamma: float, steps: int) -> float:
    """The right side of Gibbs & Candès (2021), Proposition 4.1."""
    return (max(alpha_start, 1.0 - alpha_start) + gamma) / (gamma * steps)
