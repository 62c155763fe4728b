"""A generated team history whose truth is known: five accounts, each with
its own level and IANA zone, a local-hour effect and topic effects, for the
tests of who should post a draft."""

from __future__ import annotations

import csv
import math
from datetime import datetime, timedelta
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
from conftest import SUBJECTS

from models.embedding import Embedder
from service.forecast.training import train
from service.settings import Settings
from service.workspace import Workspace

# Each account's true level (median impressions of a post at an average hour)
# and its own zone; levels double from one to the next.
ACCOUNTS = {
    "fernside": ("Europe/London", 300.0),
    "mossbank": ("America/New_York", 600.0),
    "reedmere": ("Asia/Tokyo", 1200.0),
    "oakhollow": ("Australia/Sydney", 2400.0),
    "ivycourt": ("America/Los_Angeles", 4800.0),
}
HOUR_AMPLITUDE = 0.35  # log effect of the local hour: best (13:00) / worst (01:00) = e^0.7, about 2
NOISE = 0.3  # log-normal post-to-post noise
POSTS_PER_ACCOUNT = 110
TOPICS = dict(zip(SUBJECTS, (0.3, -0.2, 0.1, 0.0, -0.1, 0.2, -0.3, 0.05), strict=True))
ACTIONS = ("open early", "need volunteers", "are in full colour", "get a new bench", "host a talk")


def hour_effect(local_hour: float) -> float:
    return HOUR_AMPLITUDE * math.cos(2 * math.pi * (local_hour - 13) / 24)


def true_reach(account: str, subject: str, at: datetime) -> float:
    """Expected impressions: level x hour effect (in the account's zone) x topic effect."""
    tz, level = ACCOUNTS[account]
    local = at.astimezone(ZoneInfo(tz))
    return level * math.exp(hour_effect(local.hour + local.minute / 60) + TOPICS[subject])


def write_history(path: Path, now: datetime) -> pd.DataFrame:
    """The history up to ``now`` as our canonical CSV at ``path``; the frame holds the same posts."""
    rng = np.random.default_rng(26)
    rows = []
    start = now - timedelta(days=200)
    for handle in ACCOUNTS:
        for _ in range(POSTS_PER_ACCOUNT):
            at = start + timedelta(seconds=float(rng.uniform(0, 196 * 86400)))
            subject = SUBJECTS[int(rng.integers(len(SUBJECTS)))]
            text = f"{subject} {ACTIONS[int(rng.integers(len(ACTIONS)))]} (note {len(rows)})"
            value = true_reach(handle, subject, at) * math.exp(float(rng.normal(0, NOISE)))
            rows.append({"post_id": f"p{len(rows)}", "account": handle, "text": text, "at": at, "v": value})
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
        for r in rows:
            w.writerow([r["post_id"], r["account"], r["text"], r["at"].isoformat(), round(r["v"])])
    frame = pd.DataFrame(rows)
    frame["impressions"] = frame["v"].round()
    return frame


def make_team(home: Path, embedder: Embedder, now: datetime) -> tuple[Workspace, pd.DataFrame]:
    """A data directory holding the history, with an impressions model trained at ``now``."""
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    for handle, (tz, _) in ACCOUNTS.items():
        ws.store.set_account(handle, timezone=tz)
    frame = write_history(home.parent / "team.csv", now)
    ws.import_csv(home.parent / "team.csv")
    train(ws, "impressions", now=now, backtest=False)
    return ws, frame
