"""Metrics against their reference implementations; time-ordered splits."""

from __future__ import annotations

import itertools
import math
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from scipy.stats import spearmanr
from sklearn.metrics import mean_absolute_error, mean_pinball_loss

from models.errors import InputError
from models.evaluation import (
    coverage,
    mae,
    mean_width,
    pinball_loss,
    rolling_origin_splits,
    spearman,
)


@pytest.fixture
def pair() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(7)
    y = rng.lognormal(size=300)
    return y, y + rng.normal(scale=0.7, size=300)


@pytest.mark.parametrize("alpha", [0.05, 0.25, 0.5, 0.9])
def test_pinball_matches_sklearn(pair: tuple[np.ndarray, np.ndarray], alpha: float) -> None:
    y, q = pair
    # reference: sklearn.metrics.mean_pinball_loss
    assert pinball_loss(y, q, alpha) == pytest.approx(mean_pinball_loss(y, q, alpha=alpha), rel=1e-12)


def test_pinball_is_asymmetric() -> None:
    # y above q costs alpha per unit, below costs 1 - alpha
    assert pinball_loss([1.0], [0.0], 0.9) == pytest.approx(0.9)
    assert pinball_loss([0.0], [1.0], 0.9) == pytest.approx(0.1)


def test_mae_matches_sklearn(pair: tuple[np.ndarray, np.ndarray]) -> None:
    y, yhat = pair
    # reference: sklearn.metrics.mean_absolute_error
    assert mae(y, yhat) == pytest.approx(mean_absolute_error(y, yhat), rel=1e-12)


def test_spearman_matches_scipy_with_ties() -> None:
    rng = np.random.default_rng(3)
    # few distinct values on both sides, so ties are everywhere
    y = rng.integers(0, 6, size=200).astype(float)
    yhat = y + rng.integers(-3, 4, size=200)
    assert len(np.unique(y)) < 10 and len(np.unique(yhat)) < 20
    # reference: scipy.stats.spearmanr (average ranks for ties)
    assert spearman(y, yhat) == pytest.approx(spearmanr(y, yhat).statistic, abs=1e-12)


def test_spearman_matches_scipy_continuous(pair: tuple[np.ndarray, np.ndarray]) -> None:
    y, yhat = pair
    # reference: scipy.stats.spearmanr
    assert spearman(y, yhat) == pytest.approx(spearmanr(y, yhat).statistic, abs=1e-12)
    assert spearman(y, -y) == pytest.approx(-1.0)


def test_spearman_constant_is_nan() -> None:
    assert math.isnan(spearman([1.0, 1.0, 1.0], [1.0, 2.0, 3.0]))


def test_coverage_and_width() -> None:
    y = np.array([0.0, 1.0, 2.0, 3.0])
    lo = np.array([0.0, 1.5, 1.0, 0.0])
    hi = np.array([1.0, 2.0, 2.0, 2.9])
    # rows 0 and 2 are inside (bounds count as inside); 1 and 3 are outside
    assert coverage(y, lo, hi) == pytest.approx(0.5)
    assert mean_width(lo, hi) == pytest.approx((1.0 + 0.5 + 1.0 + 2.9) / 4)


def test_coverage_accepts_infinite_bounds() -> None:
    # a calibration block too small for the level gives an infinite bound
    assert coverage([1.0, 5.0], [-np.inf, 0.0], [np.inf, 2.0]) == pytest.approx(0.5)
    assert mean_width([0.0], [np.inf]) == np.inf


def test_metrics_reject_bad_input() -> None:
    with pytest.raises(InputError):
        mae([1.0, 2.0], [1.0])
    with pytest.raises(InputError):
        mae([], [])
    with pytest.raises(InputError):
        coverage([1.0, np.nan], [0.0, 0.0], [2.0, 2.0])
    with pytest.raises(InputError):
        pinball_loss([1.0], [1.0], 1.5)


def _check_folds(times: np.ndarray, folds: list[tuple[np.ndarray, np.ndarray, np.ndarray]]) -> None:
    seen_test: set[int] = set()
    prev_test_end = -np.inf
    for train, cal, test in folds:
        assert len(train) and len(cal) and len(test)
        # strictly time ordered, hence disjoint
        assert times[train].max() < times[cal].min()
        assert times[cal].max() < times[test].min()
        assert not (set(train) & set(cal) or set(cal) & set(test) or set(train) & set(test))
        # test blocks do not overlap and move forward
        assert not (seen_test & set(test))
        seen_test |= set(test.tolist())
        assert times[test].min() > prev_test_end
        prev_test_end = times[test].max()


def test_rolling_origin_default_rule() -> None:
    rng = np.random.default_rng(0)
    times = rng.permutation(1000).astype(float)  # shuffled, all distinct
    folds = list(rolling_origin_splits(times))
    assert len(folds) == 4
    _check_folds(times, folds)
    # the documented sizes: n0 = 400, c = 150, t = floor(450 / 4) = 112
    assert [len(f[0]) for f in folds] == [400, 512, 624, 736]
    assert all(len(f[1]) == 150 and len(f[2]) == 112 for f in folds)
    # the origin rolls forward: each train block extends the previous one
    for (tr_a, _, _), (tr_b, _, _) in itertools.pairwise(folds):
        assert set(tr_a) < set(tr_b)


def test_rolling_origin_with_ties_stays_strict() -> None:
    rng = np.random.default_rng(1)
    times = rng.integers(0, 60, size=500).astype(float)  # about 8 rows per time
    folds = list(rolling_origin_splits(times, n_folds=3, test_fraction=0.1))
    assert len(folds) == 3
    _check_folds(times, folds)


def test_rolling_origin_datetimes() -> None:
    start = datetime(2024, 1, 1, tzinfo=UTC)
    stamps = [start + timedelta(hours=h) for h in range(200)][::-1]
    folds = list(rolling_origin_splits(stamps, n_folds=2))
    _check_folds(np.arange(200)[::-1].astype(float), folds)
    as_dt64 = np.array([s.replace(tzinfo=None) for s in stamps], dtype="datetime64[ns]")
    folds64 = list(rolling_origin_splits(as_dt64, n_folds=2))
    assert all(
        np.array_equal(a, b) for f, g in zip(folds, folds64, strict=True) for a, b in zip(f, g, strict=True)
    )


def test_rolling_origin_too_little_data() -> None:
    with pytest.raises(InputError):
        rolling_origin_splits(np.arange(5.0), n_folds=4)
    with pytest.raises(InputError):
        rolling_origin_splits(np.arange(100.0), test_fraction=0.2)  # 40 + 15 + 4*20 > 100
    with pytest.raises(InputError):
        rolling_origin_splits(np.zeros(100))  # one time: no cut can separate blocks
