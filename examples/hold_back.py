#!/usr/bin/env python3
"""Hold back planned drafts that nearly repeat a recent post or look weak.

Reads a plan CSV (draft_id, account, text, planned_at[, has_media]), forecasts every
draft through a running sounding service and prints one decision a line:

    post  q-001  median 2,310 impressions (80% interval 1,020-5,120)
    hold  q-004  near-repeat: loomhaven posted something very similar ...

Usage:
    sounding serve &                       # the service, over your history
    python examples/hold_back.py [demo_data/plan.csv] --threshold 800
        [--metric impressions] [--base-url http://127.0.0.1:8000]

Forecasts are estimates from the team's own history (intervals with a
backtested coverage), so treat a "hold" as a prompt to look again.
"""

from __future__ import annotations

import argparse
import csv
import sys
from collections.abc import Sequence
from pathlib import Path

from models.errors import SoundingError
from service.client import SoundingClient

PLAN = Path(__file__).resolve().parents[1] / "demo_data" / "plan.csv"
TRUE = {"true", "1", "yes", "y", "t"}  # as the import format reads has_media


def read_plan(path: Path) -> list[dict[str, str | bool | None]]:
    with path.open(encoding="utf-8-sig", newline="") as f:  # RFC 4180, as the service writes
        rows = list(csv.DictReader(f))
    return [
        {
            **{k: (row.get(k) or "").strip() or None for k in ("draft_id", "account", "text", "planned_at")},
            "has_media": (row.get("has_media") or "").strip().lower() in TRUE,
        }
        for row in rows
    ]


def decide(
    client: SoundingClient, drafts: list[dict[str, str | bool | None]], *, threshold: float, metric: str
) -> list[tuple[str, str, str]]:
    """(decision, draft_id, reason) per draft: hold on a near-repeat or a
    median below ``threshold``, otherwise post."""
    try:
        forecasts = client.forecast_plan(drafts, metric=metric)
    except SoundingError:
        forecasts = None  # one bad row spoils a batch: go one by one to find it
    out = []
    for i, d in enumerate(drafts):
        did = str(d.get("draft_id") or f"row-{i + 1}")
        try:
            f = (
                forecasts[i]
                if forecasts
                else client.forecast(
                    str(d.get("text") or ""),
                    account=str(d.get("account") or ""),
                    planned_at=str(d["planned_at"]) if d.get("planned_at") else None,
                    metric=metric,
                    has_media=bool(d.get("has_media")),
                )
            )
        except SoundingError as exc:
            out.append(("hold", did, f"cannot forecast: {exc}"))
            continue
        rng = f"{f.coverage:.0%} interval {f.low:,.0f}-{f.high:,.0f}"
        if f.repeats:
            out.append(("hold", did, f.repeats[0].message))
        elif f.median < threshold:
            out.append(("hold", did, f"median {f.median:,.0f} {metric} is below {threshold:,.0f} ({rng})"))
        else:
            out.append(("post", did, f"median {f.median:,.0f} {metric} ({rng})"))
    return out


def main(argv: Sequence[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("plan", nargs="?", type=Path, default=PLAN, help="plan CSV file")
    ap.add_argument(
        "--threshold",
        type=float,
        default=800.0,
        help="hold drafts whose forecast median is below this (default 800)",
    )
    ap.add_argument("--metric", default="impressions", help="metric to forecast")
    ap.add_argument("--base-url", default="http://127.0.0.1:8000", help="the sounding service")
    args = ap.parse_args(argv)
    try:
        drafts = read_plan(args.plan)
        with SoundingClient(base_url=args.base_url) as client:
            decisions = decide(client, drafts, threshold=args.threshold, metric=args.metric)
    except (OSError, SoundingError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    for decision, did, reason in decisions:
        print(f"{decision:<5} {did:<8} {reason}")
    held = sum(d == "hold" for d, _, _ in decisions)
    print(f"{len(decisions) - held} to post, {held} held back")
    return 0


if __name__ == "__main__":
    sys.exit(main())
