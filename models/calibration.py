"""Conformalized Quantile Regression (CQR) on a held-out calibration block.

Romano, Patterson & Candès, "Conformalized Quantile Regression", NeurIPS
2019. Given any lower/upper quantile predictions ``lo``, ``hi`` and
calibration targets ``y``, the conformity score of a calibration row is
``max(lo - y, y - hi)``: positive when ``y`` falls outside the band (by how
much), negative when inside. Widening every new band by the conformal
quantile ``q`` of these scores, ``[lo - q, hi + q]``, covers a new
exchangeable row with probability at least ``1 - alpha`` whatever the
quality of the quantile models (split conformal; Lei et al., JASA 2018).
"""

from __future__ import annotations

import math
from typing import Self, cast

import numpy as np
from numpy.typing import ArrayLike

from models.errors import InputError, NotFittedError

# (n + 1)(1 - alpha) is often an integer in exact arithmetic (n = 19,
# alpha = 0.05 gives 20 * 0.95 = 19) but lands a hair above it in floating
# point, which would make ceil() pick one order statistic too many.
_INTEGER_SLACK = 1e-9


def _vectors(**named: ArrayLike) -> list[np.ndarray]:
    """1-D float arrays of one common length, or a clear InputError."""
    try:
        out = [np.asarray(v, dtype=float) for v in named.values()]
    except (TypeError, ValueError) as exc:
        raise InputError(f"expected numeric arrays: {exc}") from None
    for name, arr in zip(named, out, strict=True):
        if arr.ndim != 1:
            raise InputError(f"{name} must be 1-D, got shape {arr.shape}", field=name)
    lengths = {arr.shape[0] for arr in out}
    if len(lengths) != 1:
        sizes = ", ".join(f"{n}={a.shape[0]}" for n, a in zip(named, out, strict=True))
        raise InputError(f"arrays differ in length ({sizes})")
    return out


def _check_alpha(alpha: float) -> float:
    alpha = float(alpha)
    if not 0.0 < alpha < 1.0:
        raise InputError(f"alpha must lie in (0, 1), got {alpha}", field="alpha", value=alpha)
    return alpha


def cqr_scores(y: ArrayLike, lo: ArrayLike, hi: ArrayLike) -> np.ndarray:
    """CQR conformity scores ``max(lo - y, y - hi)``, one per row."""
    y_, lo_, hi_ = _vectors(y=y, lo=lo, hi=hi)
    if not (np.isfinite(y_).all() and np.isfinite(lo_).all() and np.isfinite(hi_).all()):
        raise InputError("y, lo and hi must be finite")
    return cast(np.ndarray, np.maximum(lo_ - y_, y_ - hi_))


def conformal_rank(n: int, alpha: float) -> int:
    """The 1-based rank ``k = ceil((n + 1)(1 - alpha))`` of the conformal
    quantile among ``n`` sorted scores; ``k > n`` means no finite quantile."""
    alpha = _check_alpha(alpha)
    return max(1, math.ceil((n + 1) * (1.0 - alpha) - _INTEGER_SLACK))


def conformal_quantile(scores: ArrayLike, alpha: float) -> float:
    """The split-conformal quantile of ``scores`` at miscoverage ``alpha``.

    This is the ``ceil((n + 1)(1 - alpha)) / n`` empirical quantile, i.e.
    the k-th smallest of the n scores with ``k = ceil((n + 1)(1 - alpha))``
    (no interpolation). The ``+1`` accounts for the new test point, which is
    what makes coverage at least ``1 - alpha`` in finite samples; for
    continuous scores coverage is also at most ``1 - alpha + 1/(n + 1)``.
    When ``k > n`` (fewer than ``(1 - alpha)/alpha`` scores) no finite
    quantile guarantees the level and the result is ``+inf``.
    """
    (s,) = _vectors(scores=scores)
    if s.size == 0:
        raise InputError("no calibration scores", field="scores")
    if np.isnan(s).any():
        raise InputError("calibration scores contain NaN", field="scores")
    k = conformal_rank(s.size, alpha)
    if k > s.size:
        return math.inf
    # partition is O(n); the k-th smallest sits at index k - 1.
    return float(np.partition(s, k - 1)[k - 1])


class CQRCalibrator:
    """Split-conformal correction of a lower/upper quantile pair (CQR).

    ``fit`` stores the sorted calibration scores, so corrections for any
    other ``alpha`` come from the same scores without refitting: the
    guarantee holds for every alpha, since CQR needs nothing of the
    quantile models but exchangeability of calibration and test rows.
    """

    def __init__(self, *, alpha: float = 0.2) -> None:
        self.alpha = alpha

    def fit(self, y_cal: ArrayLike, lo_cal: ArrayLike, hi_cal: ArrayLike) -> Self:
        _check_alpha(self.alpha)
        scores = cqr_scores(y_cal, lo_cal, hi_cal)
        if scores.size == 0:
            raise InputError("the calibration block is empty", field="y_cal")
        self.scores_ = np.sort(scores)
        self.n_cal_ = int(scores.size)
        self.correction_ = conformal_quantile(self.scores_, self.alpha)
        return self

    @classmethod
    def from_scores(cls, scores: ArrayLike, *, alpha: float = 0.2) -> Self:
        """A fitted calibrator from stored scores (used when loading)."""
        (s,) = _vectors(scores=scores)
        if s.size == 0 or not np.isfinite(s).all():
            raise InputError("stored calibration scores must be finite and non-empty")
        cal = cls(alpha=alpha)
        cal.scores_ = np.sort(s)
        cal.n_cal_ = int(s.size)
        cal.correction_ = conformal_quantile(cal.scores_, alpha)
        return cal

    def _check_fitted(self) -> None:
        if not hasattr(self, "scores_"):
            raise NotFittedError(
                "CQRCalibrator is not fitted yet; call fit(y_cal, lo_cal, hi_cal) first",
                where="CQRCalibrator",
            )

    def correction(self, alpha: float | None = None) -> float:
        """The additive widening ``q`` at miscoverage ``alpha`` (default:
        the fitted one). Negative when the quantile models over-cover."""
        self._check_fitted()
        if alpha is None:
            return self.correction_
        return conformal_quantile(self.scores_, alpha)

    def transform(
        self, lo: ArrayLike, hi: ArrayLike, alpha: float | None = None
    ) -> tuple[np.ndarray, np.ndarray]:
        """The conformalized band ``(lo - q, hi + q)``."""
        q = self.correction(alpha)
        lo_, hi_ = _vectors(lo=lo, hi=hi)
        return lo_ - q, hi_ + q
