"""The track record of one metric: per month (of the forecast) and overall,
live against stated coverage, and against the simple forecasters."""

from __future__ import annotations

import json
import typing
from collections.abc import Sequence
from datetime import datetime
from typing import Any

import numpy as np

from models.metrics import DEFAULT_METRIC, check_target
from service.clock import as_utc, now_utc, to_naive_utc
from service.storage.tables import ForecastGiven, ForecastMatch
from service.track.answers import TrackRecord
from service.track.facts import wilson
from service.track.parts import TrackedDir

WORST = 5
BASELINES = ("account_median", "precedents_median")


def report(
    ws: TrackedDir,
    *,
    since: datetime | None = None,
    account: str | None = None,
    metric: str = DEFAULT_METRIC,
    now: datetime | None = None,
) -> TrackRecord:
    """The track record of ``metric``: per month (of the forecast) and overall."""
    check_target(metric)
    if account is not None:
        ws.store.account(account)
    given = ws.store.track.given(
        metric, since=None if since is None else to_naive_utc(since), account=account
    )
    rows = [_row(f, handle, m, pid, posted) for f, handle, m, pid, posted in given]
    states = [
        {
            "level": level,
            "alpha_t": c.alpha_t,
            "gamma": c.gamma,
            "outcomes": c.real_updates,
            "pseudo_outcomes": c.pseudo_updates,
        }
        for level, c in ws.store.track.levels(metric)
    ]
    months: dict[str, list[dict[str, Any]]] = {}
    for r in rows:
        months.setdefault(r["given_at"][:7], []).append(r)
    settled = [r for r in rows if r["inside"] is not None]
    worst = sorted(settled, key=lambda r: -r["error_log"])[:WORST]
    # Rows carry working columns (baseline logs, match kind) the answer leaves out.
    return TrackRecord.model_validate(
        {
            "metric": metric,
            "as_of": (now or now_utc()).isoformat(),
            "filters": {"since": since.isoformat() if since else None, "account": account},
            "overall": summarise(rows),
            "months": [{"month": k, **summarise(v)} for k, v in sorted(months.items())],
            "worst": worst,
            "calibration": states,
            "points": settled,
        }
    )


def _row(
    f: ForecastGiven, handle: str, m: ForecastMatch | None, pid: str | None, posted: datetime | None
) -> dict[str, Any]:
    scored = m is not None and m.inside is not None
    return {
        "forecast_id": f.id,
        "given_at": as_utc(f.given_at).isoformat(),
        "source": f.source,
        "draft_id": f.draft_id,
        "account": handle,
        "text": f.text,
        "planned_at": as_utc(f.planned_at).isoformat(),
        "coverage": f.coverage,
        "low": f.low,
        "median": f.median,
        "high": f.high,
        "model_version": f.model_version,
        "calibration": f.calibration,
        "matched": m is not None,
        "match": None if m is None else m.how,
        "post_id": pid,
        "posted_at": as_utc(posted).isoformat() if posted else None,
        "outcome": m.outcome if m is not None and scored else None,
        "inside": bool(m.inside) if m is not None and scored else None,
        "error_log": abs(f.median_log - typing.cast(float, m.outcome_log))
        if m is not None and scored
        else None,
        "baseline_logs": {
            "account_median": f.account_median_log,
            "precedents_median": f.precedents_median_log,
        },
        "outcome_log": m.outcome_log if m is not None and scored else None,
        "precedents": json.loads(f.precedents or "[]"),
    }


def summarise(rows: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """Counts, live against stated coverage (Wilson 95% interval) and MAE(log)
    of sounding and of the simple forecasters on the same settled posts."""
    settled = [r for r in rows if r["inside"] is not None]
    n, k = len(settled), sum(r["inside"] for r in settled)
    out: dict[str, Any] = {
        "given": len(rows),
        "matched": sum(r["matched"] for r in rows),
        "settled": n,
        "stated_coverage": float(np.mean([r["coverage"] for r in settled])) if n else None,
        "live_coverage": k / n if n else None,
        "live_coverage_ci": list(wilson(k, n)) if n else None,
        "mae_log": float(np.mean([r["error_log"] for r in settled])) if n else None,
        "baselines": {},
    }
    for name in BASELINES:
        errs = []
        for r in settled:
            b = r["baseline_logs"][name]
            if b is None:  # no precedents settled then: the account's median stands in
                b = r["baseline_logs"]["account_median"]
            if b is not None:
                errs.append(abs(b - r["outcome_log"]))
        out["baselines"][name] = {"mae_log": float(np.mean(errs)) if errs else None, "posts": len(errs)}
    return out
