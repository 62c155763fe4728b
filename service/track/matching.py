"""Matching published posts to the forecasts they fulfil, and scoring them.

An explicit ``draft_id`` of the import names the forecast; otherwise the same
account, a draft-to-post similarity at or above ``SOUNDING_MATCH_SIMILARITY``
and a posting time within ``SOUNDING_MATCH_WINDOW_HOURS`` of the planned time.
A post fulfils at most one forecast of a metric (the latest given before it was
posted; near ties in similarity go to the latest), a forecast at most one post,
and a forecast given after the post went out never counts. Matches already made
stay, so matching again changes nothing (idempotent).
"""

from __future__ import annotations

import csv
import math
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np

from models.metrics import target_value
from service.clock import now_utc, to_naive_utc
from service.ingest.encodings import codec_of
from service.storage.handles import fold_handle
from service.track.parts import TrackedDir

#: Near ties in similarity (same draft edited and checked again) go to the latest forecast.
SIMILARITY_TIE = 0.01


def link_drafts(
    ws: TrackedDir,
    path: str | Path,
    *,
    mapping: dict[str, str] | None = None,
    account: str | None = None,
    encoding: str | None = None,
) -> int:
    """Store the explicit draft ids of an imported file (its ``draft_id``
    column, or the column ``--map draft_id=...`` names)."""
    mapping = mapping or {}
    col = mapping.get("draft_id", "draft_id")
    acc_col, id_col = mapping.get("account", "account"), mapping.get("post_id", "post_id")
    pairs: dict[tuple[str, str], str] = {}
    with Path(path).open("r", encoding=codec_of(encoding), newline="") as handle:
        reader = csv.DictReader(handle)
        if col not in (reader.fieldnames or []):
            return 0
        for rec in reader:
            draft = (rec.get(col) or "").strip()
            acc = fold_handle(rec.get(acc_col) or "") or account
            pid = (rec.get(id_col) or "").strip()
            if draft and acc and pid:
                pairs[(acc, pid)] = draft
    return ws.store.track.link_drafts(pairs) if pairs else 0


def match(ws: TrackedDir) -> int:
    """Match posts to the forecasts they fulfil; returns new matches."""
    st = ws.settings
    window = timedelta(hours=st.match_window_hours)
    open_fc = ws.store.track.open_forecasts()
    if not open_fc:
        return 0
    posts = ws.store.track.candidate_posts({r.account_id for r in open_fc}, min(r.given_at for r in open_fc))
    taken = ws.store.track.matched_pairs()
    if not posts:
        return 0
    # Which (forecast, post) pairs are near enough in time to need a similarity.
    near = {
        f.id: [
            p
            for p in posts
            if p.account_id == f.account_id
            and p.posted_at > f.given_at
            and abs(p.posted_at - f.planned_at) <= window
        ]
        for f in open_fc
    }
    need = [f for f in open_fc if near[f.id]]
    sims: dict[tuple[int, int], float] = {}
    if need:
        texts = list(dict.fromkeys(f.text for f in need))
        tv = dict(zip(texts, ws.embedder.encode(texts), strict=True))
        keys = list(dict.fromkeys(p.vector_key for f in need for p in near[f.id]))
        pv = dict(zip(keys, ws.store.vectors(keys), strict=True))
        for f in need:
            for p in near[f.id]:
                sims[(f.id, p.id)] = float(np.dot(tv[f.text], pv[p.vector_key]))
    used: set[int] = set()
    new: list[dict[str, Any]] = []
    stamp = to_naive_utc(now_utc())
    named = {f.draft_id for f in open_fc if f.draft_id}
    for p in posts:
        for metric in sorted({f.metric for f in open_fc}):
            if (p.id, metric) in taken:
                continue
            pool = [
                f
                for f in open_fc
                if f.metric == metric
                and f.id not in used
                and f.account_id == p.account_id
                and f.given_at < p.posted_at
            ]
            how, best, sim = "", None, None
            if p.draft_id and p.draft_id in named:
                cands = [f for f in pool if f.draft_id == p.draft_id]
                if cands:
                    best = max(cands, key=lambda f: (f.given_at, f.id))
                    how, sim = "draft_id", sims.get((best.id, p.id))
            else:
                cands = [
                    (sims[(f.id, p.id)], f)
                    for f in pool
                    if (f.id, p.id) in sims and sims[(f.id, p.id)] >= st.match_similarity
                ]
                if cands:
                    top = max(c[0] for c in cands)
                    best = max(
                        (f for sm, f in cands if sm >= top - SIMILARITY_TIE), key=lambda f: (f.given_at, f.id)
                    )
                    how, sim = "text_time", sims[(best.id, p.id)]
            if best is None:
                continue
            used.add(best.id)
            taken.add((p.id, metric))
            new.append(
                {
                    "forecast_id": best.id,
                    "post_pk": p.id,
                    "metric": metric,
                    "how": how,
                    "similarity": sim,
                    "matched_at": stamp,
                    "adapted": False,
                }
            )
    if new:
        ws.store.track.add_matches(new)
    return len(new)


def score(ws: TrackedDir, *, now: datetime | None = None) -> int:
    """Score matched forecasts whose post is settled; refresh changed outcomes.
    Returns how many scores were written or changed."""
    now = now or now_utc()
    cutoff = to_naive_utc(now - timedelta(hours=ws.settings.maturity_hours))
    rows = ws.store.track.matches_posted_by(cutoff)
    details = ws.store.posts_by_pk([pk for _, pk, *_ in rows])
    scores = []
    for mid, pk, metric, outcome, lo, hi in rows:
        value = (
            target_value(details[pk]["metrics"], metric, followers=details[pk].get("followers"))
            if pk in details
            else None
        )
        if value is None or value == outcome:
            continue
        outcome_log = math.log1p(value)
        scores.append((mid, value, outcome_log, bool(lo <= outcome_log <= hi), to_naive_utc(now)))
    ws.store.track.write_scores(scores)
    return len(scores)
