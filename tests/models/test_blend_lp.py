"""Blend weights under absolute loss, and the time-ordered fallback."""

from __future__ import annotations

import numpy as np
import pytest

from models.blend_lp import absolute_weights, choose_weights


def _simplex_grid(step: float) -> np.ndarray:
    k = round(1 / step)
    pts = [(i, j, k - i - j) for i in range(k + 1) for j in range(k + 1 - i)]
    return np.asarray(pts, dtype=float) / k


def test_absolute_weights_match_a_brute_force_grid_over_the_simplex() -> None:
    # Independent computation: the summed absolute error evaluated on every
    # point of a 0.005 grid over the 3-candidate simplex (no solver at all).
    rng = np.random.default_rng(11)
    n = 400
    y = rng.standard_t(2, size=n)  # heavy tails, where squared and absolute losses part
    Fm = np.column_stack([y + rng.normal(scale=s, size=n) for s in (0.7, 1.0, 1.6)])
    w, g = absolute_weights(Fm, y)
    assert g.size == 0 and np.all(w >= 0) and w.sum() == pytest.approx(1.0)
    grid = _simplex_grid(0.005)
    losses = np.abs(y[None, :] - grid @ Fm.T).sum(axis=1)
    best = grid[int(np.argmin(losses))]
    lp_loss = float(np.abs(y - Fm @ w).sum())
    assert lp_loss <= losses.min() + 1e-9  # the LP optimum is no worse than any grid point
    np.testing.assert_allclose(w, best, atol=0.02)


def test_absolute_weights_agree_with_statsmodels_quantreg_when_the_simplex_binds_nothing() -> None:
    # Source: statsmodels QuantReg at q = 0.5 (least absolute deviations).
    # Writing w3 = 1 - w1 - w2 turns the simplex into an unconstrained median
    # regression of y - F3 on (F1 - F3, F2 - F3) without intercept; when its
    # solution has every weight inside (0, 1) it is our optimum too.
    from statsmodels.regression.quantile_regression import QuantReg

    rng = np.random.default_rng(3)
    n = 600
    y = rng.laplace(size=n)
    Fm = np.column_stack([y + rng.laplace(scale=s, size=n) for s in (0.8, 1.0, 1.3)])
    w, _ = absolute_weights(Fm, y)
    Z = Fm[:, :2] - Fm[:, [2]]
    ref = QuantReg(y - Fm[:, 2], Z).fit(q=0.5).params
    ref_w = np.r_[ref, 1 - ref.sum()]
    assert np.all((ref_w > 0) & (ref_w < 1))  # the constraint checked: inside the simplex
    loss = lambda v: float(np.abs(y - Fm @ v).sum())  # noqa: E731
    assert loss(w) == pytest.approx(loss(ref_w), rel=1e-6)


def test_absolute_weights_beat_least_squares_on_absolute_error() -> None:
    from models.blend import simplex_weights

    rng = np.random.default_rng(5)
    n = 800
    y = rng.standard_t(1.5, size=n)
    # One candidate tracks the median but has rare huge misses; one is a mean-minded smoother.
    spiky = y + np.where(rng.random(n) < 0.05, rng.normal(scale=20, size=n), rng.normal(scale=0.3, size=n))
    smooth = 0.5 * y + rng.normal(scale=0.5, size=n)
    Fm = np.column_stack([spiky, smooth, np.zeros(n)])
    w1, _ = absolute_weights(Fm, y)
    w2, _ = simplex_weights(Fm, y)
    assert np.abs(y - Fm @ w1).mean() <= np.abs(y - Fm @ w2).mean()


def test_the_blend_falls_back_when_it_loses_later_in_time() -> None:
    rng = np.random.default_rng(8)
    n = 400
    y = rng.normal(size=n)
    good_early = np.where(np.arange(n) < n // 2, y + rng.normal(scale=0.1, size=n), -y)
    simple = y + rng.normal(scale=0.8, size=n)
    const = np.zeros(n)
    Fm = np.column_stack([good_early, simple, const])
    choice = choose_weights(
        Fm, y, ["boosted", "account_median", "history_median"], ["account_median", "history_median"]
    )
    assert choice.kind == "fallback" and choice.fallback_to == "account_median"
    np.testing.assert_array_equal(choice.weights, [0.0, 1.0, 0.0])
    # The later half's check, by hand: the blend fitted on the first half loses there.
    later = slice(n // 2, n)
    assert choice.check["blend"]["mae_log"] > np.abs(y[later] - simple[later]).mean()


def test_the_blend_is_kept_when_it_is_no_worse() -> None:
    rng = np.random.default_rng(9)
    n = 400
    y = rng.normal(size=n)
    a = y + rng.normal(scale=0.6, size=n)
    b = y + rng.normal(scale=0.6, size=n)
    choice = choose_weights(np.column_stack([a, b]), y, ["boosted", "account_median"], ["account_median"])
    assert choice.kind == "blend" and 0.2 < choice.weights[0] < 0.8


def test_backtest_folds_fall_back_after_a_fold_the_blend_lost() -> None:
    from models.backtest import fallback_after

    y = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    close = y + np.array([0.1, -0.1, 0.1, -0.1, 0.1, -0.1])  # MAE 0.1, same ranks as y
    far = y[::-1].copy()  # ranks reversed
    pooled = {
        "y": [y],
        "med": [far],
        "account_median": [np.full(6, 3.5)],
        "precedents_median": [close],
        "history_median": [np.full(6, 3.0)],
    }
    # By hand: the precedents' median has the least absolute error (0.1), and
    # the served forecast is worse than it on both measures.
    assert fallback_after(pooled) == "precedents_median"
    pooled["med"] = [y.copy()]  # exact: no worse on either measure
    assert fallback_after(pooled) is None
    assert fallback_after({k: [] for k in pooled}) is None


def _near_tie(n: int, gain: float, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """y, a simple forecaster, and a complex one missing on the same side by
    a random share of the simple one's miss, ``gain`` smaller on average:
    the paired differences are noisy, and blending the two gains nothing."""
    rng = np.random.default_rng(seed)
    y = rng.normal(size=n)
    noise = rng.laplace(scale=0.8, size=n)
    share = rng.uniform(0.5, 1.5, size=n) - gain
    return y, y + noise, y + noise * share


@pytest.mark.parametrize("gain, kept", [(0.005, False), (0.3, True)])
def test_a_complex_forecaster_must_beat_the_simple_one_by_a_standard_error(gain: float, kept: bool) -> None:
    # The one-standard-error rule (Breiman et al. 1984, sec. 3.4.3; Hastie,
    # Tibshirani & Friedman, ESL sec. 7.10), with the standard error of the
    # paired differences taken from scipy.stats.sem, independently of ours.
    from scipy.stats import sem

    y, simple, complex_ = _near_tie(600, gain, seed=4)
    choice = choose_weights(
        np.column_stack([complex_, simple]), y, ["boosted", "account_median"], ["account_median"]
    )
    later = slice(300, 600)
    d = np.abs(y[later] - complex_[later]) - np.abs(y[later] - simple[later])
    beats_by_one_se = bool(np.mean(d) + sem(d) <= 0.0)
    assert beats_by_one_se is kept  # the generator puts the case on the side intended
    assert float(np.mean(d)) < 0  # the complex one is better on the later half either way
    if kept:
        assert choice.weights[0] > 0
    else:
        assert choice.kind == "fallback" and choice.fallback_to == "account_median"
        np.testing.assert_array_equal(choice.weights, [0.0, 1.0])


@pytest.mark.parametrize("extra_error, expected", [(0.01, "precedents_median"), (0.5, "history_median")])
def test_the_simple_bar_ranks_when_its_error_is_as_low(extra_error: float, expected: str) -> None:
    # By hand: a constant forecaster at the median of y, and one that ranks
    # (noisy y) whose absolute error is the constant's plus ``extra_error``
    # on average. Within one standard error of the paired differences
    # (scipy.stats.sem, independent of ours) the one that ranks is the bar.
    from scipy.stats import sem

    from models.blend_lp import simple_reference

    rng = np.random.default_rng(2)
    n = 500
    y = rng.laplace(size=n)
    const = np.full(n, float(np.median(y)))
    ranked = y + rng.normal(scale=1.0, size=n)
    # Shift the ranking forecaster's errors so their mean is the constant's plus extra_error.
    gap = np.abs(y - const).mean() + extra_error - np.abs(y - ranked).mean()
    ranked = ranked + np.sign(ranked - y) * gap
    assert np.abs(y - ranked).mean() == pytest.approx(np.abs(y - const).mean() + extra_error, abs=1e-2)
    d = np.abs(y - ranked) - np.abs(y - const)
    assert bool(np.mean(d) <= sem(d)) is (expected == "precedents_median")
    got = simple_reference(y, {"history_median": const, "precedents_median": ranked})
    assert got == expected
