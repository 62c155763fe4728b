"""The hour-by-hour forecast at full size: three accounts in three IANA zones,
each with its own known curve over the local hour."""

from __future__ import annotations

from datetime import UTC, datetime
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from scipy.stats import spearmanr

from models.stacking import ALL_FEATURES, StackedForecaster

ZONES = ("America/New_York", "Europe/Berlin", "Asia/Tokyo")
#: (amplitude, local peak hour) of each account's true curve on the log scale.
CURVES = ((0.35, 13.0), (0.5, 19.0), (0.3, 9.0))
PER_ACCOUNT = 1500
SMALL = {"max_estimators": 120, "early_stopping_rounds": 15, "num_leaves": 7, "min_child_samples": 20}


def _curve(account: int, hours: np.ndarray) -> np.ndarray:
    amp, peak = CURVES[account]
    return amp * np.cos(2 * np.pi * (hours - peak) / 24)


def _local_hours(utc: np.ndarray, tz: str) -> np.ndarray:
    # The local hour under the zone's rules (IANA tz database via zoneinfo),
    # so summer time moves each post's hour as it does for a real account.
    z = ZoneInfo(tz)
    out = []
    for t in utc:
        d = datetime.fromtimestamp(float(t), tz=UTC).astimezone(z)
        out.append(d.hour + d.minute / 60.0)
    return np.asarray(out)


@pytest.fixture(scope="module")
def fitted() -> tuple[StackedForecaster, np.ndarray]:
    rng = np.random.default_rng(31)
    col = {nm: i for i, nm in enumerate(ALL_FEATURES)}
    start = datetime(2025, 1, 1, tzinfo=UTC).timestamp()
    rows, ys, ts = [], [], []
    for a, tz in enumerate(ZONES):
        t = np.sort(start + rng.uniform(0, 365 * 86400.0, PER_ACCOUNT))
        h = _local_hours(t, tz)
        X = rng.normal(size=(PER_ACCOUNT, len(ALL_FEATURES)))
        X[:, col["hour_sin"]] = np.sin(2 * np.pi * h / 24)
        X[:, col["hour_cos"]] = np.cos(2 * np.pi * h / 24)
        X[:, col["weekday"]] = rng.integers(0, 7, PER_ACCOUNT)
        X[:, col["account_code"]] = a
        level = 5.0 + a + 0.3 * rng.normal(size=PER_ACCOUNT)
        X[:, col["baseline"]] = 5.0 + a + 0.1 * rng.normal(size=PER_ACCOUNT)
        X[:, col["team_median"]] = level + rng.normal(scale=0.5, size=PER_ACCOUNT)
        X[:, col["text_ridge"]] = level + rng.normal(scale=0.7, size=PER_ACCOUNT)
        rows.append(X)
        ys.append(level + _curve(a, h) + rng.normal(scale=0.5, size=PER_ACCOUNT))
        ts.append(t)
    X, y, t = np.vstack(rows), np.concatenate(ys), np.concatenate(ts)
    order = np.argsort(t, kind="stable")
    X, y = X[order], y[order]
    cut = int(0.8 * len(y))
    m = StackedForecaster(levels=(0.8,), timing_bootstrap=0, **SMALL).fit(
        X[:cut], y[:cut], X[cut:], y[cut:], feature_names=ALL_FEATURES
    )
    return m, X


def test_served_hour_curve_has_the_true_range_per_account(fitted) -> None:
    m, X = fitted
    col = {nm: i for i, nm in enumerate(ALL_FEATURES)}
    grid = np.arange(24.0)
    rng = np.random.default_rng(0)
    for a, tz in enumerate(ZONES):
        own = X[X[:, col["account_code"]] == a]
        base = own[rng.choice(len(own), 40, replace=False)]
        served = np.zeros(24)
        for i, hour in enumerate(grid):
            rows = base.copy()
            rows[:, col["hour_sin"]] = np.sin(2 * np.pi * hour / 24)
            rows[:, col["hour_cos"]] = np.cos(2 * np.pi * hour / 24)
            served[i] = float(np.mean(m.predict(rows)[1]))
        truth = _curve(a, grid)
        ratio = float(np.ptp(served) / np.ptp(truth))
        rho = float(spearmanr(served, truth).statistic)  # scipy's Spearman, not ours
        print(f"account {a} ({tz}): peak-to-trough {ratio:.2f}x the true range, rank correlation {rho:.3f}")
        assert 0.75 <= ratio <= 1.25, (tz, ratio)
        assert rho >= 0.9, (tz, rho)
