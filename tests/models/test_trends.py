"""Trends per month and week: the Theil–Sen slope against scipy's, a planted
trend recovered at its known size, and the demo history's answer."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from conftest import NOW
from scipy.stats import theilslopes

from models.trends import PeriodRow, period_label, period_starts, theil_sen, trend_of
from service.analysis.trends import TrendRequest, trends


@pytest.mark.parametrize("n", [4, 12, 30])
def test_slope_and_interval_match_scipy(n: int) -> None:
    rng = np.random.default_rng(n)
    x = np.arange(n, dtype=float)
    y = 0.02 * x + rng.normal(0, 0.1, n)
    y[n // 2] = 5.0  # an outlier Theil-Sen shrugs off
    ours = theil_sen(x, y, confidence=0.9)
    # scipy.stats.theilslopes: the reference implementation of Sen (1968).
    ref = theilslopes(y, x, 0.9)
    assert ours == pytest.approx((ref.slope, ref.intercept, ref.low_slope, ref.high_slope), rel=1e-12)


def test_ties_in_both_axes_match_scipy() -> None:
    x = np.array([0, 1, 1, 2, 3, 3, 4, 5, 6, 6.0])
    y = np.array([1, 2, 2, 3, 2, 4, 5, 5, 7, 7.0])
    ref = theilslopes(y, x, 0.95)
    assert theil_sen(x, y) == pytest.approx((ref.slope, ref.intercept, ref.low_slope, ref.high_slope))


def _rows(medians: list[float]) -> list[PeriodRow]:
    return [
        PeriodRow(period=str(k), n=50, share=1.0, median=m, ci_low=m, ci_high=m, few_posts=False)
        for k, m in enumerate(medians)
    ]


def test_planted_trend_is_recovered_at_its_size() -> None:
    rng = np.random.default_rng(7)
    # 3% a month for 24 months, with noise of about 5% around it.
    medians = [1000 * 1.03**k * math.exp(rng.normal(0, 0.05)) for k in range(24)]
    t = trend_of(_rows(medians), "month", last=24)
    assert t is not None and t.clear
    assert t.change == pytest.approx(0.03, abs=0.01)
    assert t.change_low < 0.03 < t.change_high
    assert t.reading.startswith("rising about 3% a month, clearly")
    flat = trend_of(_rows([1000 * math.exp(rng.normal(0, 0.2)) for _ in range(12)]), "month")
    assert flat is not None and not flat.clear and flat.reading.startswith("no clear trend")


def test_periods_are_months_and_iso_weeks() -> None:
    times = pd.Series(pd.to_datetime(["2026-03-31T23:30:00Z", "2026-01-01T10:00:00Z"], utc=True))
    m = period_starts(times, "month")
    assert [period_label(s, "month") for s in m] == ["2026-03", "2026-01"]
    w = period_starts(times, "week")
    # 1 January 2026 is a Thursday in ISO week 1 (ISO 8601 week dates).
    assert [period_label(s, "week") for s in w] == ["2026-W14", "2026-W01"]
    assert w.iloc[1] == pd.Timestamp("2025-12-29", tz="UTC")


def test_demo_trends_by_month(demo_workspace) -> None:
    a = trends(demo_workspace, TrendRequest(by="month", topics=["flowers in bloom"], min_n=60), now=NOW)
    whole, topic, other = a.series
    assert whole.name == "all posts" and whole.n == a.n_posts == topic.n + other.n
    assert sum(r.n for r in whole.rows) == a.n_posts
    for k, r in enumerate(whole.rows):
        assert r.share == (1.0 if r.n else 0.0)
        assert topic.rows[k].n + other.rows[k].n == r.n
        assert topic.rows[k].share == pytest.approx(topic.rows[k].n / r.n)
    # Periods under min_n are flagged, not hidden.
    assert any(r.few_posts for r in topic.rows) and len(topic.rows) == len(a.periods)
    assert any("fewer than 60 posts" in w for w in a.warnings)
    assert whole.trend is not None and whole.trend.slope_low <= whole.trend.slope <= whole.trend.slope_high
    assert "association" in a.note
