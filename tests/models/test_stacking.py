"""The learnt pieces of the served forecast, each against an
independent computation: the ridge text model against scikit-learn's Ridge,
the blend weights against scipy's NNLS, the blend's CQR band against the
split-conformal guarantee over many seeds, and the text column's time order
(no post sees its own target or anything not yet settled)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import nnls
from sklearn.linear_model import Ridge

from models import features as F
from models.backtest import _splits, signal_note, text_signal
from models.blend import simplex_weights
from models.calibration import recency_weights, weighted_conformal_quantile
from models.errors import InputError, NotFittedError
from models.evaluation import rolling_origin_splits
from models.stack_columns import extra_columns
from models.stacking import ALL_FEATURES, StackedForecaster
from models.textmodel import (
    RidgeText,
    chunk_starts,
    ridge_fit,
    time_ordered_predictions,
)
from models.timing import TimingEffect, best_hour_share, hour_from_cyclic

DAY = 86400.0


def _vectors(rng: np.random.Generator, n: int, d: int = 24) -> np.ndarray:
    v = rng.normal(size=(n, d))
    return v / np.linalg.norm(v, axis=1, keepdims=True)


# Ridge text model -------------------------------------------------------------


@pytest.mark.parametrize("alpha", [0.1, 3.0, 300.0])
def test_ridge_matches_sklearn(alpha: float) -> None:
    # Source: scikit-learn's Ridge(fit_intercept=True), a different solver
    # (it centres the data and solves by Cholesky), on the same rows.
    rng = np.random.default_rng(1)
    V = _vectors(rng, 400)
    y = V @ rng.normal(size=V.shape[1]) * 3 + rng.normal(size=400) + 5
    coef, intercept = ridge_fit(V, y, alpha)
    ref = Ridge(alpha=alpha, fit_intercept=True).fit(V, y)
    np.testing.assert_allclose(coef, ref.coef_, atol=1e-8)
    assert intercept == pytest.approx(ref.intercept_, abs=1e-8)


def test_time_ordered_predictions_are_refits_on_settled_posts_only() -> None:
    """Every prediction equals scikit-learn's Ridge fitted on exactly the posts
    settled before the post's chunk began, with the penalty that chunk used;
    so a post never sees its own target nor any later one."""
    rng = np.random.default_rng(2)
    n, maturity = 600, 2 * DAY
    V = _vectors(rng, n)
    y = V @ rng.normal(size=V.shape[1]) * 2 + rng.normal(size=n)
    y[rng.random(n) < 0.05] = np.nan  # missing metrics are never fitted on
    times = np.sort(rng.uniform(0, 300 * DAY, n))
    pred, used, _ = time_ordered_predictions(V, y, times, maturity_s=maturity, n_chunks=12)
    starts = chunk_starts(n, n_chunks=12)
    checked = 0
    for j, s in enumerate(starts):
        stop = starts[j + 1] if j + 1 < len(starts) else n
        fit = (times <= times[s] - maturity) & ~np.isnan(y)
        if np.isnan(pred[s]):
            assert fit.sum() < 30
            continue
        assert np.all(times[fit] <= times[s:stop].min() - maturity)
        ref = Ridge(alpha=used[s]).fit(V[fit], y[fit])
        np.testing.assert_allclose(pred[s:stop], ref.predict(V[s:stop]), atol=1e-8)
        checked += 1
    assert checked >= 8


def test_penalty_is_chosen_in_time_order() -> None:
    # The final penalty minimises the time-ordered out-of-sample error; with
    # pure-noise targets the largest penalty (predicting the mean) wins.
    rng = np.random.default_rng(3)
    n = 800
    V = _vectors(rng, n)
    times = np.arange(n) * DAY
    noise = RidgeText(maturity_s=DAY).fit(V, rng.normal(size=n), times)
    assert noise.alpha_ == max(noise.alphas)
    signal = RidgeText(maturity_s=DAY).fit(V, V @ rng.normal(size=V.shape[1]) * 4, times)
    assert signal.alpha_ < noise.alpha_
    assert np.argmin(signal.alpha_errors_) == list(signal.alphas).index(signal.alpha_)


def test_ridge_text_before_fit_raises() -> None:
    with pytest.raises(NotFittedError):
        RidgeText().predict(np.zeros((1, 4)))


# Blend weights ----------------------------------------------------------------


def test_simplex_weights_match_scipy_nnls() -> None:
    # Source: scipy.optimize.nnls (Lawson-Hanson). The sum-to-one constraint
    # is imposed there by one heavily weighted extra row, the textbook
    # penalty method; the timing column is free (>= 0) in both.
    rng = np.random.default_rng(4)
    n = 500
    y = rng.normal(size=n)
    Fm = np.column_stack(
        [y + rng.normal(scale=s, size=n) for s in (0.6, 1.0, 1.5)]
        + [np.full(n, 0.3), -y + rng.normal(size=n)]
    )
    E = (0.5 * y + rng.normal(size=n))[:, None]
    w, g = simplex_weights(Fm, y, E)
    assert np.all(w >= 0) and w.sum() == pytest.approx(1.0)
    big = 1e5
    A = np.vstack([np.hstack([Fm, E]), big * np.r_[np.ones(Fm.shape[1]), 0.0]])
    ref = nnls(A, np.r_[y, big])[0]
    np.testing.assert_allclose(np.r_[w, g], ref, atol=1e-4)
    assert w[-1] == pytest.approx(0.0, abs=1e-9)  # the anti-correlated candidate is dropped


# Timing component ---------------------------------------------------------------


def test_hours_come_back_from_the_cyclic_features() -> None:
    hours = np.arange(0, 24, 0.5)
    a = 2 * np.pi * hours / 24
    np.testing.assert_allclose(hour_from_cyclic(np.sin(a), np.cos(a)), hours, atol=1e-9)


def test_timing_effect_recovers_a_planted_curve_at_full_size() -> None:
    rng = np.random.default_rng(5)
    n = 3000
    hours = rng.uniform(0, 24, n)
    wd = rng.integers(0, 7, n)
    acc = rng.integers(0, 2, n)
    curve = 0.4 * np.cos(2 * np.pi * (hours - 13) / 24)
    m = TimingEffect(n_bootstrap=20).fit(hours, wd, acc, curve + rng.normal(scale=0.5, size=n))
    grid = np.arange(24.0)
    got = m.predict(grid, np.zeros(24), np.zeros(24))
    truth = 0.4 * np.cos(2 * np.pi * (grid - 13) / 24)
    assert np.ptp(got) == pytest.approx(np.ptp(truth), rel=0.2)
    assert int(np.argmax(got)) in (12, 13, 14)
    # Time that carries nothing gets a near-zero effect.
    flat = TimingEffect(n_bootstrap=0).fit(hours, wd, acc, rng.normal(scale=0.5, size=n))
    assert np.ptp(flat.predict(grid, np.zeros(24), np.zeros(24))) < 0.1


def test_best_hour_share() -> None:
    med = np.array([0.0, 1.0, 0.2])
    eff = np.array([0.0, 0.5, 0.0])
    assert best_hour_share(med, eff, np.tile(eff, (10, 1)), scale=1.0) == 1.0
    flipped = np.tile([0.0, -1.0, 0.0], (4, 1))  # slot 1 loses its edge in these refits
    both = np.vstack([np.tile(eff, (6, 1)), flipped])
    assert best_hour_share(med, eff, both, scale=1.0) == pytest.approx(0.6)


# The stacked forecaster ---------------------------------------------------------


def _synthetic(
    rng: np.random.Generator, n: int, *, one_account: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Feature rows in ALL_FEATURES order with a known log target."""
    col = {nm: i for i, nm in enumerate(ALL_FEATURES)}
    X = rng.normal(size=(n, len(ALL_FEATURES)))
    hours = rng.uniform(0, 24, n)
    X[:, col["hour_sin"]] = np.sin(2 * np.pi * hours / 24)
    X[:, col["hour_cos"]] = np.cos(2 * np.pi * hours / 24)
    X[:, col["weekday"]] = rng.integers(0, 7, n)
    X[:, col["account_code"]] = 0 if one_account else rng.integers(0, 3, n)
    level = rng.normal(size=n)
    X[:, col["baseline"]] = level + rng.normal(scale=0.3, size=n)
    X[:, col["team_median"]] = level + rng.normal(scale=0.6, size=n)
    X[:, col["text_ridge"]] = level + rng.normal(scale=0.8, size=n)
    if one_account:
        for s in F.NEIGHBOUR_STATS:
            X[:, col[f"own_{s}"]] = X[:, col[f"team_{s}"]]
    y = level + 0.3 * np.cos(2 * np.pi * (hours - 13) / 24) + rng.standard_t(5, size=n) * 0.4
    return X, y


SMALL = {
    "max_estimators": 60,
    "early_stopping_rounds": 10,
    "num_leaves": 7,
    "min_child_samples": 10,
    "num_threads": 1,
}


def test_blend_band_keeps_conformal_coverage_over_many_seeds() -> None:
    """Split-conformal / CQR guarantee (Lei et al. 2018; Romano et al. 2019):
    with exchangeable calibration and test rows, the mean coverage over seeds
    lies in [c, c + 1/(n_cal + 1)], up to sampling error (3 standard errors
    of a mean over 40 seeds of per-seed sd ~ sqrt(c(1-c)/n_cal))."""
    c, n_cal, seeds = 0.8, 150, 40
    hits = []
    for seed in range(seeds):
        rng = np.random.default_rng(100 + seed)
        X, y = _synthetic(rng, 400 + n_cal + 300)
        # Exchangeable calibration and test rows: a random split of the tail.
        tail = 400 + rng.permutation(n_cal + 300)
        cal, test = tail[:n_cal], tail[n_cal:]
        m = StackedForecaster(levels=(c,), random_state=seed, **SMALL).fit(
            X[:400], y[:400], X[cal], y[cal], feature_names=ALL_FEATURES
        )
        lo, _, hi = m.predict(X[test], coverage=c)
        hits.append(np.mean((y[test] >= lo) & (y[test] <= hi)))
    se = np.sqrt(c * (1 - c) / n_cal) / np.sqrt(seeds)
    assert c - 3 * se <= np.mean(hits) <= c + 1 / (n_cal + 1) + 3 * se


def test_stacked_forecaster_blend_drops_duplicates_and_round_trips(tmp_path: Path) -> None:
    rng = np.random.default_rng(7)
    X, y = _synthetic(rng, 1200, one_account=True)
    m = StackedForecaster(**SMALL).fit(X[:900], y[:900], X[900:], y[900:], feature_names=ALL_FEATURES)
    assert sum(m.weights_.values()) == pytest.approx(1.0)
    assert all(w >= 0 for w in m.weights_.values()) and m.timing_weight_ >= 0
    # One account: the own-account neighbour columns repeat the team's.
    assert {f"own_{s}" for s in F.NEIGHBOUR_STATS} <= set(m.dropped_)
    assert not any(c.startswith("own_") for c in m.boosted_columns_)
    lo, med, hi = m.predict(X[900:])
    assert np.all(lo <= med) and np.all(med <= hi)
    # Contributions add up to the served median.
    contrib = m.contributions(X[900:])
    np.testing.assert_allclose(contrib.sum(axis=1), med, atol=1e-6)
    m.save(tmp_path / "m")
    back = StackedForecaster.load(tmp_path / "m")
    for a, b in zip(back.predict(X[900:]), (lo, med, hi), strict=True):
        np.testing.assert_allclose(a, b, atol=1e-9)
    with pytest.raises(NotFittedError):
        StackedForecaster().predict(X[:2])


def test_extra_columns_use_only_settled_posts() -> None:
    """Changing the targets of posts not yet settled at a post's time leaves
    the post's text column unchanged (the no-leakage rule of features.py)."""
    rng = np.random.default_rng(8)
    n, maturity = 500, 2 * DAY
    V = _vectors(rng, n).astype(np.float32)
    times = np.sort(rng.uniform(0, 200 * DAY, n))
    y = V.astype(float) @ rng.normal(size=V.shape[1]) + 6
    h = F.History(pk=np.arange(n), time=times, account=np.zeros(n, dtype=np.int64), log_target=y, vectors=V)
    cols, models = extra_columns(h, maturity_s=maturity, now=times[-1] + 10 * DAY)
    assert models.text is not None
    i = 350
    later = times > times[i] - maturity  # not settled when post i went out (incl. itself)
    h2 = F.History(
        pk=h.pk,
        time=times,
        account=h.account,
        log_target=np.where(later, rng.uniform(0, 15, n), y),
        vectors=V,
    )
    cols2, _ = extra_columns(h2, maturity_s=maturity, now=times[-1] + 10 * DAY)
    assert np.isfinite(cols[i, 0])
    np.testing.assert_allclose(cols2[: i + 1, 0], cols[: i + 1, 0], atol=1e-10)
    assert not np.allclose(cols2[-50:, 0], cols[-50:, 0])  # later rows do see them


def test_signal_note_says_when_text_explains_little() -> None:
    rng = np.random.default_rng(9)
    acct = rng.normal(size=2000)
    topic = rng.normal(size=2000)
    y = acct + topic + rng.normal(size=2000)
    weights = {"account_median": 0.7, "text_ridge": 0.3}
    strong = text_signal(y, acct, {"text_ridge": acct + topic})
    # Pearson's r of topic with topic + noise is 1/sqrt(2): r^2 = 0.5 (arithmetic).
    assert strong["text_ridge"] == pytest.approx(0.5, abs=0.05)
    assert signal_note({"text_signal": strong, "weights": weights}) is None
    weak = text_signal(y, acct, {"text_ridge": acct + rng.normal(size=2000)})
    note = signal_note({"text_signal": weak, "weights": weights})
    assert note is not None and "explains little" in note and "recent median" in note


def test_weighted_conformal_quantile_with_equal_weights_is_split_conformal() -> None:
    # Split conformal (Lei et al. 2018): the ceil((n + 1)(1 - alpha))-th
    # smallest score, infinite when that rank exceeds n.
    rng = np.random.default_rng(10)
    for n, alpha in ((50, 0.2), (99, 0.1), (7, 0.05), (200, 0.5)):
        s = rng.exponential(size=n)
        k = int(np.ceil((n + 1) * (1 - alpha)))
        want = np.sort(s)[k - 1] if k <= n else np.inf
        assert weighted_conformal_quantile(s, np.ones(n), alpha=alpha) == want


def test_recency_weights_halve_and_ties_share() -> None:
    w = recency_weights(np.arange(10.0), half_life=0.5)  # halves every 5 rows
    assert w[-1] == 1.0 and w[4] == pytest.approx(0.5) and np.all(np.diff(w) > 0)
    tied = recency_weights(np.array([1.0, 1.0, 2.0, 3.0, 3.0, 3.0]), half_life=0.3)
    assert tied[0] == tied[1] and tied[3] == tied[4] == tied[5]
    np.testing.assert_array_equal(recency_weights(np.arange(5.0), half_life=None), np.ones(5))


def test_backtest_uses_fewer_folds_when_tied_times_forbid_more() -> None:
    # A quarter of the posts share the last time (a month's posts dated to
    # the month): four folds cannot be cut, fewer can.
    times = np.r_[np.arange(300.0), np.full(100, 300.0)]
    with pytest.raises(InputError):
        list(rolling_origin_splits(times, n_folds=4))
    splits, k = _splits(times, 4)
    assert 1 <= k < 4 and len(splits) == k
    for tr, ca, te in splits:
        assert times[tr].max() < times[ca].min() and times[ca].max() < times[te].min()


def test_a_refit_forgets_the_band_quantiles_of_the_earlier_fit() -> None:
    # The band's conformal quantile is kept between forecasts; a second fit on
    # other data must serve exactly what a fresh estimator fitted on it serves.
    rng = np.random.default_rng(11)
    X, y = _synthetic(rng, 1200)
    m = StackedForecaster(**SMALL).fit(X[:600], y[:600], X[600:800], y[600:800], feature_names=ALL_FEATURES)
    m.predict(X[1000:], coverage=0.8)
    first_scores = m.calibration_scores(0.8)
    m.fit(X[:900], 2.0 * y[:900], X[900:1100], 2.0 * y[900:1100], feature_names=ALL_FEATURES)
    fresh = StackedForecaster(**SMALL).fit(
        X[:900], 2.0 * y[:900], X[900:1100], 2.0 * y[900:1100], feature_names=ALL_FEATURES
    )
    for a, b in zip(m.predict(X[1100:], coverage=0.8), fresh.predict(X[1100:], coverage=0.8), strict=True):
        np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(m.calibration_scores(0.8), fresh.calibration_scores(0.8))
    assert not np.array_equal(first_scores, m.calibration_scores(0.8))
    # The kept quantile is the calibration block's own (weighted_conformal_quantile
    # is checked against split conformal's order statistic in its own test).
    i = m.level_for(0.8)
    assert m._band_quantile(i, 0.8) == weighted_conformal_quantile(
        m.cal_scores_[i], m.cal_weights_, alpha=0.2
    )
