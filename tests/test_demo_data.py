"""Checks on the committed demo data set (demo_data/): format, time zones, and that the
documented effects and planted repeats are really in the data. These read the files
directly and re-derive everything, rather than trusting the generator's own bookkeeping."""

import csv
import difflib
import json
import math
import re
import statistics
import subprocess
import sys
from collections import Counter, defaultdict
from datetime import date, datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pytest

DEMO = Path(__file__).resolve().parent.parent / "demo_data"
OUTPUTS = ["posts.csv", "truth.csv", "planted_repeats.csv", "plan.csv", "effects.json", "sample_draft.txt"]
HEADER = [
    "post_id",
    "account",
    "text",
    "posted_at",
    "impressions",
    "engagements",
    "likes",
    "reposts",
    "replies",
    "link_clicks",
    "profile_clicks",
    "has_media",
]
METRICS = HEADER[4:11]
ZONES = {
    "loomhaven": "Europe/London",
    "loomhaven_events": "Europe/London",
    "loomhaven_lab": "America/New_York",
}


def read_csv(name):
    with open(DEMO / name, newline="", encoding="utf-8") as f:
        return list(csv.reader(f))


def rows(name):
    header, *body = read_csv(name)
    return [dict(zip(header, r, strict=True)) for r in body]


@pytest.fixture(scope="module")
def posts():
    return rows("posts.csv")


@pytest.fixture(scope="module")
def effects():
    return json.loads((DEMO / "effects.json").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def truth():
    return {(r["account"], r["post_id"]): r for r in rows("truth.csv")}


@pytest.fixture(scope="module")
def planted():
    return rows("planted_repeats.csv")


def log_imp(p):
    return math.log(int(p["impressions"]))


def tokens(text):
    return re.findall(r"\w+|[^\w\s]", text.lower())


def char_ratio(a, b):
    return difflib.SequenceMatcher(None, a, b).ratio()


def close_to_any(text, others, cap=0.8):
    """True if some text in `others` has character difflib ratio > cap (cheap bounds first)."""
    sm = difflib.SequenceMatcher(None, b=text)
    for o in others:
        sm.set_seq1(o)
        if sm.real_quick_ratio() > cap and sm.quick_ratio() > cap and sm.ratio() > cap:
            return True
    return False


# ------------------------------------------------------------------ reproducibility
@pytest.mark.slow
def test_committed_files_equal_a_fresh_generation(tmp_path):
    subprocess.run(
        [sys.executable, str(DEMO / "generate.py"), str(tmp_path)], check=True, capture_output=True
    )
    for name in OUTPUTS:
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), (
            f"{name} differs from a fresh run; rerun `python demo_data/generate.py`"
        )


# ------------------------------------------------------------------ format
def test_posts_csv_header_and_values(posts):
    assert read_csv("posts.csv")[0] == HEADER
    raw = (DEMO / "posts.csv").read_bytes()
    assert raw.count(b"\r\n") == len(posts) + 1, "RFC 4180 wants CRLF record ends"
    assert len(raw) < 2_000_000
    assert 2700 <= len(posts) <= 3300
    for p in posts:
        assert p["account"] in ZONES
        assert 40 <= len(p["text"]) <= 260
        assert p["has_media"] in ("true", "false")
        m = {k: int(p[k]) for k in METRICS}  # int() raises on anything but an integer
        assert min(m.values()) >= 0 and m["impressions"] > 0
        parts = m["likes"] + m["reposts"] + m["replies"] + m["link_clicks"] + m["profile_clicks"]
        assert parts <= m["engagements"] <= m["impressions"]
        has_link = "https://" in p["text"]
        if not has_link:
            assert m["link_clicks"] == 0


def test_account_split_is_uneven_main_largest(posts):
    n = Counter(p["account"] for p in posts)
    assert n["loomhaven"] > n["loomhaven_events"] > n["loomhaven_lab"] > 0
    assert abs(n["loomhaven"] / len(posts) - 0.5) < 0.05


def test_post_ids_unique_per_account(posts):
    ids = Counter((p["account"], p["post_id"]) for p in posts)
    assert max(ids.values()) == 1


def test_posted_at_offset_matches_account_zone(posts):
    # Source of truth for offsets: the IANA tz database via zoneinfo (system tzdata or the
    # tzdata package). A right answer here means DST changes were handled per account.
    for p in posts:
        dt = datetime.fromisoformat(p["posted_at"])
        assert dt.utcoffset() is not None, p["posted_at"]
        zoned = dt.astimezone(ZoneInfo(ZONES[p["account"]]))
        assert zoned.utcoffset() == dt.utcoffset(), (p["account"], p["posted_at"])
        assert date(2025, 5, 1) <= dt.date() <= date(2026, 10, 31)
    offsets = {(p["account"], p["posted_at"][-6:]) for p in posts}
    assert {
        ("loomhaven", "+01:00"),
        ("loomhaven", "+00:00"),
        ("loomhaven_lab", "-04:00"),
        ("loomhaven_lab", "-05:00"),
    } <= offsets


def test_only_invented_links_and_own_handles(posts):
    for p in posts:
        for url in re.findall(r"https?://\S+", p["text"]):
            assert url.startswith("https://loomhaven.example/"), url
        for handle in re.findall(r"@(\w+)", p["text"]):
            assert handle in ZONES and handle != p["account"], p["text"]

    def share(ch):
        return sum(ch in p["text"] for p in posts) / len(posts)

    assert 0.1 < share("#") < 0.9 and 0.05 < share("@") < 0.5 and 0.1 < share("https://") < 0.9


# ------------------------------------------------------------------ effects are present
def test_link_lowers_median_impressions(posts):
    with_link = [log_imp(p) for p in posts if "https://" in p["text"]]
    without = [log_imp(p) for p in posts if "https://" not in p["text"]]
    diff = statistics.median(with_link) - statistics.median(without)
    assert -0.5 < diff < -0.2  # documented: -0.35


def test_media_raises_median_impressions(posts):
    yes = [log_imp(p) for p in posts if p["has_media"] == "true"]
    no = [log_imp(p) for p in posts if p["has_media"] == "false"]
    assert 0.1 < statistics.median(yes) - statistics.median(no) < 0.35  # documented: +0.20


def test_midday_beats_night_and_best_hour_is_midday(posts):
    by_hour = defaultdict(list)
    for p in posts:
        by_hour[datetime.fromisoformat(p["posted_at"]).hour].append(log_imp(p))
    assert all(len(by_hour[h]) >= 50 for h in range(7, 23))  # 7-22h well covered
    assert sum(len(by_hour[h]) for h in (23, 0, 1, 2, 3, 4, 5, 6)) >= 100  # night estimable
    mean = {h: statistics.fmean(v) for h, v in by_hour.items()}
    assert max(mean, key=mean.get) in (12, 13)
    night = statistics.fmean(x for h in (0, 1, 2, 3, 4, 5) for x in by_hour[h])
    assert statistics.fmean(by_hour[12] + by_hour[13]) - night > 0.5  # documented: 0.68
    assert mean[19] > mean[16]  # the evening bump exists


def test_topic_order_in_raw_medians(posts, truth, effects):
    by_topic = defaultdict(list)
    for p in posts:
        by_topic[truth[(p["account"], p["post_id"])]["topic"]].append(log_imp(p))
    medians = {t: statistics.median(v) for t, v in by_topic.items()}
    assert sorted(medians, key=medians.get, reverse=True) == effects["topic_order_strongest_first"]
    assert medians["blooms"] - medians["shop_membership"] > 0.6  # documented spread 0.80


def test_regression_recovers_documented_effects(posts, truth, effects):
    """Plain least squares on the documented design recovers each effect size."""
    order, accounts = effects["topic_order_strongest_first"], list(effects["accounts"])
    X, y = [], []
    for p in posts:
        t = truth[(p["account"], p["post_id"])]
        dt = datetime.fromisoformat(p["posted_at"])
        X.append(
            [1.0]
            + [p["account"] == a for a in accounts[1:]]
            + [t["topic"] == k for k in order[1:]]
            + [dt.hour == h for h in range(24) if h != 12]
            + [
                "https://" in p["text"],
                p["has_media"] == "true",
                dt.weekday() >= 5,
                (dt.date() - date(2025, 5, 1)).days / 365.25,
            ]
        )
        y.append(log_imp(p))
    b, *_ = np.linalg.lstsq(np.array(X, dtype=float), np.array(y), rcond=None)
    link, media, weekend, trend = b[-4:]
    assert abs(link - effects["link"]) < 0.08
    assert abs(media - effects["media"]) < 0.08
    assert abs(weekend - effects["weekend"]) < 0.08
    assert abs(trend - effects["trend_per_year"]) < 0.12
    topic = dict(zip(order, [0.0, *b[len(accounts) : len(accounts) + len(order) - 1]], strict=True))
    true = {k: v - effects["topic_effect"][order[0]] for k, v in effects["topic_effect"].items()}
    assert all(abs(topic[k] - true[k]) < 0.15 for k in order)
    assert [topic[k] for k in order] == sorted(topic.values(), reverse=True)
    resid = np.array(y) - np.array(X, dtype=float) @ b
    assert abs(resid.std() - effects["noise_sd"]) < 0.05


def test_expected_log_impressions_track_observed(posts, truth, effects):
    resid = [
        log_imp(p) - float(truth[(p["account"], p["post_id"])]["expected_log_impressions"]) for p in posts
    ]
    assert abs(statistics.fmean(resid)) < 0.05
    assert abs(statistics.pstdev(resid) - effects["noise_sd"]) < 0.03


def test_effects_json_is_complete(effects):
    assert set(effects["hour_effect"]) == {str(h) for h in range(24)}
    curve = [effects["hour_effect"][str(h)] for h in range(24)]
    assert max(curve) == 0 and -0.8 < min(curve) < -0.6
    assert set(effects["best_hours"]) <= {12, 13}
    topic = effects["topic_effect"]
    assert list(topic) == effects["topic_order_strongest_first"]
    assert abs(max(topic.values()) - min(topic.values()) - 0.8) < 0.05
    assert set(effects["topic_phrases"]) == set(topic)
    assert all(len(v) >= 3 for v in effects["topic_phrases"].values())
    for key in ("link", "media", "weekend", "trend_per_year", "noise_sd", "seed", "account_base"):
        assert key in effects
    base = effects["account_base"]
    assert max(base, key=base.get) == "loomhaven"


# ------------------------------------------------------------------ repeats
def test_planted_repeats_are_close_copies_at_the_stated_delay(posts, planted):
    index = {(p["account"], p["post_id"]): p for p in posts}
    kinds = Counter(r["kind"] for r in planted)
    assert 35 <= kinds["same_account"] <= 45 and 12 <= kinds["teammate"] <= 18
    assert set(kinds) == {"same_account", "teammate"}
    for r in planted:
        rep, orig = index[(r["account"], r["post_id"])], index[(r["original_account"], r["original_post_id"])]
        delay = (
            datetime.fromisoformat(rep["posted_at"]) - datetime.fromisoformat(orig["posted_at"])
        ).total_seconds() / 86400
        assert abs(delay - float(r["days_after"])) < 0.01
        if r["kind"] == "same_account":
            assert r["account"] == r["original_account"] and 1 <= delay <= 20
        else:
            assert r["account"] != r["original_account"] and 1 <= delay <= 6
        assert rep["text"] != orig["text"]
        assert char_ratio(orig["text"], rep["text"]) > 0.8


@pytest.mark.slow
def test_ordinary_posts_are_not_near_repeats(posts, truth, planted):
    """Outside the planted list nothing looks like a repeat: no identical texts in an account,
    same-topic token ratio <= 0.60 within 30 days (any account), <= 0.85 ever (same account)."""
    skip = {(r["account"], r["post_id"]) for r in planted}
    ordinary = [p for p in posts if (p["account"], p["post_id"]) not in skip]
    for acct in ZONES:
        texts = [p["text"] for p in ordinary if p["account"] == acct]
        assert len(texts) == len(set(texts))
    groups = defaultdict(list)
    for p in ordinary:
        groups[truth[(p["account"], p["post_id"])]["topic"]].append(
            (datetime.fromisoformat(p["posted_at"]), p["account"], tokens(p["text"]))
        )
    for items in groups.values():
        items.sort(key=lambda x: x[0])
        for i, (t, acct, tok) in enumerate(items):
            sm = difflib.SequenceMatcher(None, b=tok)
            for t0, acct0, tok0 in items[:i]:
                recent = t - t0 < timedelta(days=30)
                if not recent and acct0 != acct:
                    continue
                cap = 0.60 if recent else 0.85
                sm.set_seq1(tok0)
                if sm.real_quick_ratio() > cap and sm.quick_ratio() > cap:
                    assert sm.ratio() <= cap, (" ".join(tok0), " ".join(tok))


# ------------------------------------------------------------------ plan and sample draft
def test_plan_drafts(posts, effects):
    header, *body = read_csv("plan.csv")
    assert header == ["draft_id", "account", "text", "planned_at"]
    drafts = [dict(zip(header, r, strict=True)) for r in body]
    assert len(drafts) == 8 and len({d["draft_id"] for d in drafts}) == 8
    for d in drafts:
        dt = datetime.fromisoformat(d["planned_at"])
        assert (dt.year, dt.month) == (2026, 12)
        assert dt.astimezone(ZoneInfo(ZONES[d["account"]])).utcoffset() == dt.utcoffset()
        assert 40 <= len(d["text"]) <= 260
    notes = effects["plan"]
    near = notes["near_repeat"]
    original = next(p for p in posts if (p["account"], p["post_id"]) == (near["account"], near["post_id"]))
    draft = next(d for d in drafts if d["draft_id"] == near["draft_id"])
    assert draft["text"] != original["text"] and char_ratio(original["text"], draft["text"]) > 0.8
    assert original["posted_at"] >= "2026-10"  # a recent post
    assert notes["topics"][notes["weak_topic"]["draft_id"]] == effects["topic_order_strongest_first"][-1]
    # Every other draft is new: nothing in the history is close to it.
    history = [p["text"] for p in posts]
    for d in drafts:
        if d["draft_id"] != near["draft_id"]:
            assert not close_to_any(d["text"], history), d["draft_id"]


def test_sample_draft_is_a_new_blooms_text(posts, effects):
    text = (DEMO / "sample_draft.txt").read_text(encoding="utf-8").strip()
    assert 40 <= len(text) <= 260
    assert any(w in text.lower() for w in ("magnolia", "bloom", "flower"))
    assert not close_to_any(text, [p["text"] for p in posts])
