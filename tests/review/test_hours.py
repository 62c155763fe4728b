"""Best hours: slots in the account's local time (right across daylight-saving
changes), one forecast call for all slots, and agreement with the demo
generator's documented daily rhythm."""

from __future__ import annotations

import itertools
import json
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from service.api.app import create_app
from service.forecast.answer import CAUTION
from service.review.hours import Slot, best_hours, day_slots, hours_summary
from service.review.overlap import heavy_overlap, tied_with_best

ROOT = Path(__file__).resolve().parents[2]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text(encoding="utf-8"))
DRAFTS = [
    "The magnolias along the Long Border are opening this week 🌸 Come for a slow walk before "
    "the petals drop. #WhatsFlowering",
    "Gift memberships are 10% off this weekend only 🎁 Pop into the shop by the main gate.",
]


def _hours_and_offsets(slots: list[datetime], tz: str) -> list[tuple[int, str]]:
    z = ZoneInfo(tz)
    return [(s.astimezone(z).hour, s.astimezone(z).strftime("%z")) for s in slots]


# Daylight saving --------------------------------------------------------------


# Source: the IANA tz database's "EU" rule (Directive 2000/84/EC): clocks change at
# 01:00 UTC on the last Sunday of March and of October; London is GMT+0 / BST+1.
# 2026-03-29 and 2026-10-25 are those Sundays.
def test_london_spring_forward_has_23_hours() -> None:
    slots = day_slots(date(2026, 3, 29), "Europe/London")
    assert len(slots) == 23
    assert slots[0] == datetime(2026, 3, 29, 0, 0, tzinfo=UTC)  # local midnight is GMT
    assert all(b - a == timedelta(hours=1) for a, b in itertools.pairwise(slots))
    labels = _hours_and_offsets(slots, "Europe/London")
    assert labels[0] == (0, "+0000")
    assert labels[1] == (2, "+0100")  # 01:00 local does not exist that day
    assert [h for h, _ in labels] == [0, *range(2, 24)]
    assert all(off == "+0100" for _, off in labels[1:])


def test_london_fall_back_has_25_hours() -> None:
    slots = day_slots(date(2026, 10, 25), "Europe/London")
    assert len(slots) == 25
    assert slots[0] == datetime(2026, 10, 24, 23, 0, tzinfo=UTC)  # local midnight is BST
    labels = _hours_and_offsets(slots, "Europe/London")
    assert labels[:3] == [(0, "+0100"), (1, "+0100"), (1, "+0000")]  # 01:00 happens twice
    assert [h for h, _ in labels[2:]] == list(range(1, 24))
    assert slots[-1] == datetime(2026, 10, 25, 23, 0, tzinfo=UTC)


# Source: US rule in the IANA tz database (Energy Policy Act of 2005): 02:00 local on the
# second Sunday of March and the first Sunday of November; New York is EST-5 / EDT-4.
@pytest.mark.parametrize(
    ("day", "n", "first_utc"),
    [
        (date(2026, 3, 8), 23, datetime(2026, 3, 8, 5, 0, tzinfo=UTC)),
        (date(2026, 11, 1), 25, datetime(2026, 11, 1, 4, 0, tzinfo=UTC)),
        (date(2026, 12, 3), 24, datetime(2026, 12, 3, 5, 0, tzinfo=UTC)),
    ],
)
def test_new_york_days(day: date, n: int, first_utc: datetime) -> None:
    slots = day_slots(day, "America/New_York")
    assert len(slots) == n and slots[0] == first_utc
    assert all(s.astimezone(ZoneInfo("America/New_York")).date() == day for s in slots)


def test_half_hour_zone_without_dst() -> None:
    # Source: IANA tz database, Asia/Kolkata is UTC+05:30 all year (no DST since 1945).
    slots = day_slots(date(2026, 7, 1), "Asia/Kolkata")
    assert len(slots) == 24
    assert slots[0] == datetime(2026, 6, 30, 18, 30, tzinfo=UTC)
    assert _hours_and_offsets(slots, "Asia/Kolkata") == [(h, "+0530") for h in range(24)]


def test_api_labels_dst_day(demo_workspace) -> None:
    client = TestClient(create_app(workspace=demo_workspace))
    r = client.post("/v1/hours", json={"text": DRAFTS[0], "account": "loomhaven", "day": "2026-10-25"})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["n_slots"] == 25 and len(body["slots"]) == 25
    # Same facts as above (EU rule), now as the API labels them.
    got = [(s["local_hour"], s["utc_offset"]) for s in body["slots"][:4]]
    assert got == [("00:00", "+01:00"), ("01:00", "+01:00"), ("01:00", "+00:00"), ("02:00", "+00:00")]
    assert body["caution"] == CAUTION
    assert sorted(s["rank"] for s in body["slots"]) == list(range(1, 26))
    # Ranks follow the medians (highest first), hours the account's history speaks for
    # before the hours with few of its posts.
    by_rank = sorted(body["slots"], key=lambda s: s["rank"])
    assert [s["few_posts"] for s in by_rank] == sorted(s["few_posts"] for s in by_rank)
    for group in (False, True):
        ranked = [s for s in by_rank if s["few_posts"] == group]
        assert all(a["median"] >= b["median"] for a, b in itertools.pairwise(ranked))


def test_week_across_the_change_has_169_slots(demo_workspace) -> None:
    r = best_hours(
        demo_workspace.forecaster, DRAFTS[1], account="loomhaven", day=date(2026, 10, 22), week=True, top=5
    )
    # 7 days x 24 hours + the repeated hour of 2026-10-25 (EU rule, as above).
    assert len(r.slots) == 7 * 24 + 1
    assert r.first_day == date(2026, 10, 22) and r.last_day == date(2026, 10, 28)
    assert len(r.best) <= 5 and all(s.tied_with_best for s in r.best)


# The generator's daily rhythm ---------------------------------------------------

HOUR_EFFECT = [EFFECTS["hour_effect"][str(h)] for h in range(24)]
RHYTHM_DRAFTS = [
    *DRAFTS,
    "Volunteer call 🙌 Weekend guides needed once a month. It's a lovely way to meet people.",
    "Lab update 🔬 the pollinator survey shows bees prefer open-faced flowers by a wide margin.",
]


def _documented_peaks() -> list[int]:
    """Local maxima of the documented hour effect (circular): 12, 13 and 19."""
    e = HOUR_EFFECT
    return [h for h in range(24) if e[h] >= e[(h - 1) % 24] and e[h] >= e[(h + 1) % 24] and e[h] > min(e)]


def _near(hour: int, peaks: list[int], within: int) -> bool:
    return any(min(abs(hour - p), 24 - abs(hour - p)) <= within for p in peaks)


@pytest.fixture(scope="module")
def rhythm(demo_workspace) -> list[list[float]]:
    """Median log forecasts of each rhythm draft at each hour of Thu 3 Dec 2026, loomhaven."""
    out = []
    for text in RHYTHM_DRAFTS:
        r = best_hours(demo_workspace.forecaster, text, account="loomhaven", day=date(2026, 12, 3))
        assert len(r.slots) == 24  # no DST change in December (EU rule, as above)
        assert [s.local.hour for s in r.slots] == list(range(24))
        assert r.summary and r.warnings == r.best[0].warnings
        out.append([s.log[1] for s in r.slots])
    return out


def test_best_hours_follow_the_documented_rhythm(rhythm: list[list[float]]) -> None:
    from scipy.stats import spearmanr

    # Source: demo_data/effects.json hour_effect (the generator's planted daily rhythm,
    # two bumps with maxima at 12-13h and 19h; night 0-5h is 0.68 below).
    peaks = _documented_peaks()
    assert peaks == [12, 13, 19]
    strict = {h for h in range(24) if HOUR_EFFECT[h] >= max(HOUR_EFFECT) - 0.2}
    for medians in rhythm:
        top3 = sorted(range(24), key=lambda h: -medians[h])[:3]
        # Rough location: each of the top 3 within 2 hours of a documented maximum.
        assert all(_near(h, peaks, 2) for h in top3), top3
        # Direction: the noon slot beats 03:00 and every night hour, and the whole curve
        # rises and falls with the documented one (Spearman via scipy).
        assert medians[3] < medians[12]
        assert max(medians[:6]) < min(medians[12], medians[13])
        assert spearmanr(medians, HOUR_EFFECT)[0] >= 0.6
    # Averaged over the drafts (the planted hour effect is the same for every post), the
    # top 3 hours lie within 0.2 of the best documented effect: 11-14h or 18-20h.
    mean = np.mean(rhythm, axis=0)
    assert set(np.argsort(-mean)[:3].tolist()) <= strict


# Telling hours apart ---------------------------------------------------------------


def test_overlap_rule() -> None:
    # Plain interval arithmetic (common practice, no source).
    assert heavy_overlap((0.0, 2.0), (1.0, 3.0))  # overlap 1.0 = half of width 2
    assert not heavy_overlap((0.0, 2.0), (1.2, 3.2))  # overlap 0.8 < 1.0
    assert heavy_overlap((0.0, 10.0), (4.0, 5.0))  # the narrower one lies inside
    assert not heavy_overlap((0.0, 1.0), (2.0, 3.0))
    assert heavy_overlap((1.0, 1.0), (1.0, 1.0))
    best, flags = tied_with_best([(0.0, 1.0, 2.0), (0.5, 1.6, 2.5), (3.0, 3.5, 4.0)])
    assert best == 2 and flags == [False, False, True]


def _slots(logs: list[tuple[float, float, float]]) -> list[Slot]:
    t0 = datetime(2026, 12, 3, 0, 0, tzinfo=UTC)
    out = []
    _best, flags = tied_with_best(logs)
    order = sorted(range(len(logs)), key=lambda i: -logs[i][1])
    for i, lg in enumerate(logs):
        t = t0 + timedelta(hours=i)
        out.append(
            Slot.at(
                t,
                t,
                low=lg[0],
                median=lg[1],
                high=lg[2],
                log=lg,
                warnings=[],
                rank=order.index(i) + 1,
                tied_with_best=flags[i],
            )
        )
    return out


@pytest.mark.parametrize(
    ("logs", "expect"),
    [
        ([(6.0, 7.0, 8.0)] * 24, "cannot be told apart"),  # identical intervals
        ([(6.0 + 0.01 * i, 7.0 + 0.01 * i, 8.0 + 0.01 * i) for i in range(24)], "cannot be told apart"),
        ([(1.0, 2.0, 3.0)] * 23 + [(6.0, 7.0, 8.0)], "Best hour: 23:00"),
        ([(1.0, 2.0, 3.0)] * 20 + [(6.0, 7.0, 8.0)] * 4, "Best hours: 20:00"),
    ],
)
def test_summary_says_when_hours_cannot_be_told_apart(logs, expect: str) -> None:
    slots = _slots(logs)
    _best, flags = tied_with_best([s.log for s in slots])
    told_apart = (sum(flags) - 1) / (len(slots) - 1) <= 0.5
    text = hours_summary(slots, coverage=0.8, told_apart=told_apart, top=3, week=False)
    assert expect in text
    assert ("cannot be told apart" in text) == (not told_apart)


# CLI -----------------------------------------------------------------------------------


def test_cli_hours(demo_home, embedder, monkeypatch) -> None:
    from service.cli import app
    from service.cli.base import use_embedder

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))
    runner = CliRunner()
    res = runner.invoke(app, ["hours", DRAFTS[0], "--account", "loomhaven", "--day", "3 Dec"])
    assert res.exit_code == 1 and "cannot read day '3 Dec'" in res.output
    res = runner.invoke(app, ["hours", DRAFTS[0], "--account", "loomhaven", "--day", "2026-03-29"])
    assert res.exit_code == 0, res.output
    # The EU spring-forward day again (IANA tz "EU" rule): 01:00 local is skipped.
    assert "23 hours" in res.output and "every hour" in res.output
    assert "00:00 (UTC+00:00)" in res.output and "02:00 (UTC+01:00)" in res.output
    assert "01:00 (UTC" not in res.output
    assert "not a certainty" in res.output


# Hours with few of the account's posts ----------------------------------------------


def _demo_posts_per_local_hour(account: str) -> list[int]:
    """Counted straight from the demo CSV, each time converted with zoneinfo (IANA rules)."""
    import csv
    from zoneinfo import ZoneInfo

    tz = ZoneInfo(EFFECTS["accounts"][account]["zone"])
    counts = [0] * 24
    with (ROOT / "demo_data" / "posts.csv").open(encoding="utf-8", newline="") as f:
        for row in csv.DictReader(f):
            if row["account"] == account:
                counts[datetime.fromisoformat(row["posted_at"]).astimezone(tz).hour] += 1
    return counts


@pytest.mark.parametrize("account", ["loomhaven", "loomhaven_lab"])
def test_hours_with_few_posts_are_marked_and_never_best(demo_workspace, account: str) -> None:
    from service.review.hour_support import DEFAULT_MIN_POSTS, EVEN_SHARE, FEW_POSTS

    counts = _demo_posts_per_local_hour(account)
    floor = max(DEFAULT_MIN_POSTS, EVEN_SHARE * sum(counts) / 24)
    want = {h for h in range(24) if counts[h] < floor}
    # The demo's nights are thin: the marked hours are night hours, and there are some.
    assert want and want <= set(range(8)), (counts, want)
    r = best_hours(demo_workspace.forecaster, DRAFTS[0], account=account, day=date(2026, 12, 3))
    assert {s.local.hour for s in r.slots if s.few_posts} == want
    for s in r.slots:
        if s.few_posts:
            assert not s.tied_with_best and s.rank > len(r.slots) - len(want)
    assert all(not s.few_posts for s in r.best)
    assert "few or no posts at these hours" in r.summary
    # A floor above every hour's count marks them all: then no hour is called best.
    thin = best_hours(
        demo_workspace.forecaster,
        DRAFTS[0],
        account=account,
        day=date(2026, 12, 3),
        min_posts=max(counts) + 1,
    )
    assert all(s.few_posts and not s.tied_with_best for s in thin.slots) and thin.best == []
    assert thin.summary.startswith("No hour can be called best")
    assert FEW_POSTS == "few or no posts at this hour: the forecast leans on other hours"


def test_every_hour_thin_names_no_best() -> None:
    slots = _slots([(6.0, 7.0, 8.0)] * 24)
    for s in slots:
        s.few_posts, s.tied_with_best = True, False
    text = hours_summary(slots, coverage=0.8, told_apart=False, top=3, week=False)
    assert text.startswith("No hour can be called best")
