"""Posts sharing a post's key terms (models.shared_terms): the count and the
median equal an independent count over a small hand-made history, and no
later post's metric (nor a post still settling) reaches an earlier row."""

from __future__ import annotations

import math
import statistics

import numpy as np
import pytest

from models import features as F
from models.shared_terms import TermIndex, key_terms

DAY = 86400.0
PARAMS = F.FeatureParams(maturity_s=2 * DAY)
# (day posted, log metric or None, tokens)
POSTS = [
    (0.0, 5.0, ["#seedswap", "at", "the", "shed"]),
    (1.0, 6.0, ["#ferns", "return"]),
    (2.0, None, ["#seedswap", "no", "metric"]),  # never counted: no metric
    (3.0, 7.0, ["#seedswap", "#ferns", "both"]),
    (4.0, 4.0, ["plain", "words"]),
    (6.5, 8.0, ["#ferns", "again"]),
    (7.0, 3.0, ["#seedswap", "later"]),
    (7.5, 9.0, ["#seedswap", "#ferns", "last"]),
]


def history(logs: list[float | None] | None = None) -> F.History:
    vals = [p[1] for p in POSTS] if logs is None else logs
    return F.History(
        pk=np.arange(len(POSTS), dtype=np.int64),
        time=np.array([p[0] * DAY for p in POSTS]),
        account=np.zeros(len(POSTS), dtype=np.int64),
        log_target=np.array([math.nan if v is None else v for v in vals]),
        vectors=np.zeros((len(POSTS), 0), dtype=np.float32),
    )


def brute(h: F.History, keys: list[frozenset[str]], i: int) -> tuple[float, float]:
    """Every other post looked at one by one: settled by post i's time (posted
    at least the maturity before it, with a metric) and sharing a key."""
    logs = [
        float(h.log_target[j])
        for j in range(len(h))
        if h.time[j] <= h.time[i] - PARAMS.maturity_s
        and not math.isnan(h.log_target[j])
        and keys[j] & keys[i]
    ]
    return float(len(logs)), (statistics.median(logs) if logs else math.nan)


def test_count_and_median_equal_an_independent_count() -> None:
    h = history()
    keys = key_terms([p[2] for p in POSTS], hashtags_only=True)
    cols = TermIndex(h, keys).columns(keys, PARAMS, np.arange(len(POSTS)))
    for i in range(len(POSTS)):
        n, med = brute(h, keys, i)
        assert cols[i, 0] == n, i
        assert cols[i, 1] == pytest.approx(med, nan_ok=True), i
    # Written out by hand: the last post (day 7.5, #seedswap #ferns) sees the posts
    # of days 0, 1, 3 and 4.0 settled; day 2 has no metric, day 4 shares nothing,
    # days 6.5 and 7 are still settling: 5, 6 and 7, median 6.
    assert tuple(cols[7]) == (3.0, 6.0)
    assert cols[0, 0] == 0 and math.isnan(cols[0, 1])  # NaN when none


def test_rarest_terms_are_words_found_in_two_posts_or_more() -> None:
    keys = key_terms([p[2] for p in POSTS], hashtags_only=False)
    # Post 3's words by document frequency: "both" 1 (dropped), "#ferns" 4, "#seedswap" 5.
    assert keys[3] == frozenset({"#ferns", "#seedswap"})
    assert keys[4] == frozenset()  # "plain" and "words" are in no other post


def test_a_later_post_never_reaches_an_earlier_row() -> None:
    keys = key_terms([p[2] for p in POSTS], hashtags_only=True)
    rows = np.arange(len(POSTS))
    before = TermIndex(history(), keys).columns(keys, PARAMS, rows)
    changed = [p[1] for p in POSTS]
    changed[6] = 100.0  # day 7: settles only after the last post was made
    after = TermIndex(history(changed), keys).columns(keys, PARAMS, rows)
    np.testing.assert_array_equal(before, after)
    changed[3] = 100.0  # day 3: settled before the posts of days 6.5, 7 and 7.5
    moved = TermIndex(history(changed), keys).columns(keys, PARAMS, rows)
    # Rows 5 and 6 move; row 7's median of 5, 6 and 100 is still 6.
    assert [i for i in rows if not np.array_equal(before[i], moved[i], equal_nan=True)] == [5, 6]
    assert tuple(moved[7]) == (3.0, 6.0)
