"""Surprises: every settled post forecast out of sample in time order, and
those far outside their interval, with precedents from before their time."""

from __future__ import annotations

import math
from datetime import datetime, timedelta

import numpy as np
from conftest import NOW

from models.surprises import beyond_interval, pick
from service.analysis.surprises import surprises


def test_beyond_interval_and_pick() -> None:
    y = np.array([1.0, 5.0, -2.0, 0.5, 9.0])
    b = beyond_interval(y, np.zeros(5), np.ones(5))
    assert b.tolist() == [0.0, 4.0, -2.0, 0.0, 8.0]
    up, down = pick(b, 1)
    assert up.tolist() == [4] and down.tolist() == [2]


def test_demo_surprises(demo_workspace) -> None:
    a = surprises(demo_workspace, top=3, now=NOW)
    # CQR's guarantee (Romano et al. 2019): about 1 - coverage of outcomes fall outside,
    # here 20%; a wide band since the folds' calibration blocks are small.
    assert 0.08 <= a.outside / a.n_forecast <= 0.35
    assert len(a.better) == 3 and len(a.worse) == 3
    for s in a.better:
        assert s.outcome > s.high and s.factor > 1 and s.direction == "better"
    for s in a.worse:
        assert s.outcome < s.low and s.factor < 1
    assert a.better[0].factor >= a.better[-1].factor
    maturity = timedelta(hours=float(demo_workspace.settings.maturity_hours))
    frame = demo_workspace.store.posts_frame()
    when = dict(zip(frame["post_id"], frame["posted_at"], strict=True))
    for s in [*a.better, *a.worse]:
        assert isinstance(s.posted_at, datetime)
        assert s.precedents and len(s.moved) == 4
        for p in s.precedents:
            # Only posts settled before this one went out could have informed its forecast.
            assert when[p.post_id] <= s.posted_at - maturity
        assert math.isclose(
            s.factor, (1 + s.outcome) / (1 + (s.high if s.factor > 1 else s.low)), rel_tol=1e-3
        )
    assert "association" in a.note
