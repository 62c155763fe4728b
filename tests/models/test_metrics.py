"""Targets read from metric columns (models.metrics.target_values / target_value)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from models.metrics import METRIC_COLUMNS, target_value, target_values

ROWS = [
    {"impressions": 1000.0, "engagements": 50.0, "likes": 30.0},
    {"impressions": 0.0, "engagements": 4.0, "likes": None},  # no reach: no rate
    {"impressions": None, "engagements": 7.0, "likes": 2.0},  # not measured
    {"impressions": 250.0, "engagements": None, "likes": 0.0},
    {"impressions": 3.0, "engagements": 3.0, "likes": 1.0},
]


def frame() -> pd.DataFrame:
    df = pd.DataFrame(ROWS)
    for m in METRIC_COLUMNS:
        if m not in df:
            df[m] = np.nan
    return df


def test_engagement_rate_is_engagements_over_impressions_where_there_were_impressions() -> None:
    # Engagement rate by impressions: engagements / impressions, undefined without
    # impressions (common practice, no source). Written out here row by row.
    want = [
        r["engagements"] / r["impressions"]
        if r["impressions"] is not None and r["impressions"] > 0 and r["engagements"] is not None
        else math.nan
        for r in ROWS
    ]
    got = target_values(frame(), "engagement_rate")
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got[~np.isnan(got)], np.array(want)[~np.isnan(want)], rtol=0, atol=0)


def test_a_count_metric_is_its_column_with_gaps_as_nan() -> None:
    got = target_values(frame(), "likes")
    assert [None if math.isnan(v) else v for v in got] == [r["likes"] for r in ROWS]


def test_one_post_and_many_posts_follow_the_same_rule() -> None:
    df = frame()
    for name in ("impressions", "likes", "engagement_rate"):
        many = target_values(df, name)
        for i, row in enumerate(ROWS):
            one = target_value(row, name)
            assert (one is None) == bool(np.isnan(many[i]))
            if one is not None:
                assert one == many[i]
