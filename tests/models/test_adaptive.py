"""Adaptive conformal inference (models.adaptive) against its published guarantee.

Source: Gibbs & Candès, "Adaptive Conformal Inference Under Distribution Shift",
NeurIPS 2021 (update rule, eq. 2; long-run bound, Proposition 4.1). Split-conformal
coverage under exchangeability: Lei et al., JASA 2018. Independent implementation:
MAPIE's TimeSeriesRegressor(method="aci").
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from models.adaptive import AdaptiveConformal, aci_bound, adaptive_quantile
from models.calibration import conformal_quantile
from models.errors import NotFittedError

ALPHA = 0.2
T = 4000


def _stream(seed: int) -> np.ndarray:
    """N(0, 1) for the first half; then a level shift to 1 and the noise doubles."""
    rng = np.random.default_rng(seed)
    h = T // 2
    mu = np.r_[np.zeros(h), np.ones(T - h)]
    sd = np.r_[np.ones(h), np.full(T - h, 2.0)]
    return mu + sd * rng.normal(size=T)


def _calibration(seed: int) -> tuple[np.ndarray, float, float]:
    """CQR scores of a fixed quantile pair (the 10% and 90% points of N(0, 1))
    on 500 calibration draws from the first regime."""
    lo, hi = -1.2816, 1.2816  # N(0,1) quantiles, from memory (scipy.stats.norm.ppf(0.9))
    cal = np.random.default_rng(1000 + seed).normal(size=500)
    return np.maximum(lo - cal, cal - hi), lo, hi


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_fixed_split_conformal_loses_coverage_after_the_shift_and_aci_keeps_it(seed: int) -> None:
    y = _stream(seed)
    scores, lo, hi = _calibration(seed)
    q = conformal_quantile(scores, ALPHA)
    fixed = (y >= lo - q) & (y <= hi + q)
    # Before the shift the data are exchangeable with the calibration block: split
    # conformal holds its level (Lei et al. 2018), within sampling noise.
    assert abs(fixed[: T // 2].mean() - (1 - ALPHA)) < 0.04
    # After it, the fixed band falls well below the target.
    assert fixed[T // 2 :].mean() < 1 - ALPHA - 0.2
    for window in (None, 500):  # fixed calibration scores, and a rolling window of them
        aci = AdaptiveConformal(alpha=ALPHA, gamma=0.01, window=window).fit(scores)
        miss = np.array([aci.update(float(v), lo, hi) for v in y])
        # Gibbs & Candès 2021: ACI's coverage stays near the target under the shift.
        assert abs((1 - miss[T // 2 :].mean()) - (1 - ALPHA)) <= 0.03


@pytest.mark.parametrize(
    ("alpha_start", "gamma", "steps"), [(0.2, 0.01, 500), (0.1, 0.05, 300), (0.5, 0.005, 2000)]
)
def test_long_run_bound_holds_on_an_adversarial_sequence(
    alpha_start: float, gamma: float, steps: int
) -> None:
    """An adversary puts every outcome just outside any finite band; only the
    whole-line band (alpha_t <= 0) covers. Proposition 4.1 of Gibbs & Candès 2021:
    |mean(err) - alpha| <= (max(alpha_1, 1 - alpha_1) + gamma) / (gamma T)."""
    scores = np.linspace(0.0, 1.0, 101)
    aci = AdaptiveConformal(alpha=ALPHA, gamma=gamma, alpha_start=alpha_start).fit(scores)
    for _ in range(steps):
        q = aci.quantile()
        y = 10.0 + (q if np.isfinite(q) else 0.0)  # outside [0 - q, 0 + q] whenever finite
        aci.update(y, 0.0, 0.0)
    miss_rate = float(np.mean(aci.misses_))
    bound = (max(alpha_start, 1 - alpha_start) + gamma) / (gamma * steps)  # the paper's bound
    assert bound == pytest.approx(aci_bound(alpha_start=alpha_start, gamma=gamma, steps=steps))
    assert abs(miss_rate - ALPHA) <= bound
    assert 0 < np.mean(aci.misses_) < 1  # the adversary did force misses and the line did cover


def test_bound_also_holds_on_random_adversarial_scores() -> None:
    rng = np.random.default_rng(7)
    gamma, steps = 0.02, 1500
    aci = AdaptiveConformal(alpha=ALPHA, gamma=gamma).fit(rng.exponential(size=200))
    # Heavy-tailed outcomes whose scale jumps every 100 steps.
    scale = np.repeat(rng.choice([0.2, 1.0, 8.0], size=steps // 100), 100)
    for s in scale:
        aci.update(float(s * rng.standard_cauchy()), 0.0, 0.0)
    bound = (max(ALPHA, 1 - ALPHA) + gamma) / (gamma * steps)  # Gibbs & Candès 2021, Prop. 4.1
    assert abs(np.mean(aci.misses_) - ALPHA) <= bound


def test_agrees_with_mapie_aci_on_the_same_stream() -> None:
    """MAPIE's TimeSeriesRegressor(method="aci") on absolute residuals of a
    constant predictor: the same ACI update, its own quantile code. MAPIE clips
    alpha_t to [0, 1] and reads the quantile its own way, so the trajectories are
    compared in coverage and closeness, not bit for bit."""
    from mapie.regression import TimeSeriesRegressor
    from sklearn.dummy import DummyRegressor

    rng = np.random.default_rng(3)
    cal = rng.normal(size=300)
    n = 1500
    y = np.r_[rng.normal(size=n // 2), 0.3 + 1.3 * rng.normal(size=n - n // 2)]
    est = DummyRegressor(strategy="constant", constant=0.0).fit(np.zeros((5, 1)), np.zeros(5))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mapie = TimeSeriesRegressor(estimator=est, method="aci", cv="prefit").fit(np.zeros((300, 1)), cal)
        theirs = []
        for v in y:
            # Their coverage check, before the update: is v inside their band at alpha_t?
            alpha_t = float(next(iter(getattr(mapie, "current_alpha", {}).values()), ALPHA))
            _, bounds = mapie.predict(
                np.zeros((1, 1)),
                confidence_level=1 - alpha_t if 0 < alpha_t < 1 else 0.999,
                allow_infinite_bounds=True,
            )
            theirs.append(not (bounds[0, 0, 0] < v < bounds[0, 1, 0]) if alpha_t > 0 else False)
            mapie.adapt_conformal_inference(np.zeros((1, 1)), np.array([v]), gamma=0.01, confidence_level=0.8)
    ours = AdaptiveConformal(alpha=ALPHA, gamma=0.01).fit(np.abs(cal))  # |y - 0| = CQR score
    mine = [ours.update(float(v), 0.0, 0.0) for v in y]
    ours_alpha = min(max(ours.alpha_t_, 0.0), 1.0)
    their_alpha = float(next(iter(mapie.current_alpha.values())))
    assert abs(np.mean(mine) - np.mean(theirs)) < 0.01
    assert abs(ours_alpha - their_alpha) < 0.05
    assert abs(np.mean(mine) - ALPHA) < 0.03


def test_edges_and_estimator_habits() -> None:
    s = np.sort(np.random.default_rng(0).normal(size=50))
    assert adaptive_quantile(s, 0.0) == np.inf and adaptive_quantile(s, 1.0) == -np.inf
    # Inside (0, 1) it is the split-conformal quantile (Lei et al. 2018), computed apart.
    k = int(np.ceil(51 * 0.8))
    assert adaptive_quantile(s, 0.2) == s[k - 1]
    with pytest.raises(NotFittedError):
        AdaptiveConformal().quantile()
