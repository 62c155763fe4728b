"""Recording forecasts as they were given, with the simple forecasters as they
stood then (the account's median and the settled precedents' median), so they
can be matched and scored later. Recording never changes the forecast."""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from datetime import datetime

import numpy as np

from models import features as F
from models.artefact import TrainedModel
from models.metrics import target_value
from service.clock import to_naive_utc
from service.forecast.answer import Forecast
from service.forecast.draft import Draft
from service.track.parts import TrackedDir


def record_forecasts(
    ws: TrackedDir,
    drafts: Sequence[Draft],
    found: Sequence[Forecast],
    *,
    model: TrainedModel,
    source: str,
    now: datetime,
) -> None:
    """Add each forecast, as given, to the track record."""
    view = ws.forecaster.view(found[0].metric)
    ids = ws.store.track.account_ids({d.account for d in drafts})
    rows = []
    for d, f in zip(drafts, found, strict=True):
        t = min(f.planned_at, now).timestamp()
        code = view.account_codes.get(d.account)
        acct = F.baseline(view.history, code, t, model.features)[0] if code is not None else math.nan
        prec = [
            math.log1p(v)
            for p in f.precedents
            if p.weight > 0
            and not p.still_gathering
            and (v := target_value(p.metrics, f.metric, followers=p.followers)) is not None
        ]
        lo, med, hi = f.log
        rows.append(
            {
                "given_at": to_naive_utc(now),
                "source": source,
                "draft_id": d.draft_id,
                "account_id": ids[d.account],
                "text": d.text,
                "text_hash": ws.embedder.key(d.text),
                "planned_at": to_naive_utc(f.planned_at),
                "metric": f.metric,
                "coverage": f.coverage,
                "low": f.low,
                "median": f.median,
                "high": f.high,
                "low_log": lo,
                "median_log": med,
                "high_log": hi,
                "model_version": f.model_version,
                "calibration": f.calibration.method if f.calibration else "cqr",
                "alpha_t": f.calibration.alpha_t if f.calibration else 1.0 - f.coverage,
                "account_median_log": None if math.isnan(acct) else float(acct),
                "precedents_median_log": float(np.median(prec)) if prec else None,
                "precedents": json.dumps(
                    [
                        {
                            "post_id": p.post_id,
                            "account": p.account,
                            "text": p.text[:280],
                            "similarity": round(p.similarity, 4),
                            "value": target_value(p.metrics, f.metric, followers=p.followers),
                        }
                        for p in f.precedents[:5]
                    ],
                    ensure_ascii=False,
                ),
            }
        )
    ws.store.track.add_forecasts(rows)
