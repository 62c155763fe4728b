"""Reference accounts' posts near a draft: what peers posted lately that a draft
nearly repeats.

A reference account (a peer's, ``sounding account HANDLE --reference``) is
searched but never measured: its posts live in a view of their own
(``build_view(..., reference=True)``), apart from the team's history view,
so they reach no feature, baseline, training row or statistic. Only their
texts, accounts and times are read here.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

import numpy as np

from service.history.repeats import DAY, Repeat, repeat_message
from service.history.retrieval import Retriever
from service.history.view import HistoryView
from service.settings import Settings


def peer_repeats(
    retrieval: Retriever,
    settings: Settings,
    peers: HistoryView,
    items: Sequence[tuple[np.ndarray, datetime]],
    *,
    metric: str,
    now: datetime,
    k: int = 3,
) -> list[list[Repeat]]:
    """For each (vector, planned time), the reference posts above
    ``settings.repeat_similarity`` within ``team_repeat_window_days`` before
    it, most similar first, at most ``k``."""
    out: list[list[Repeat]] = [[] for _ in items]
    h = peers.history
    if len(h) == 0 or not items:
        return out
    span = settings.team_repeat_window_days * DAY
    groups: dict[bytes, list[int]] = {}
    for i, (vec, _) in enumerate(items):
        groups.setdefault(np.asarray(vec, dtype=np.float32).tobytes(), []).append(i)
    for key, idx in groups.items():
        vec = np.frombuffer(key, dtype=np.float32).reshape(1, -1)
        times = np.array([items[i][1].timestamp() for i in idx])
        lo = int(np.searchsorted(h.time, times.min() - span, side="left"))
        hi = int(np.searchsorted(h.time, times.max(), side="left"))
        hits = retrieval.above(peers, vec, np.arange(lo, hi), settings.repeat_similarity)
        if not hits:
            continue
        details = peers.details([r for r, _ in hits])
        for i, t in zip(idx, times, strict=True):
            for r, sim in [(r, sim) for r, sim in hits if t - span <= h.time[r] < t][:k]:
                rec = details[int(h.pk[r])]
                fields = {
                    "scope": "reference",
                    "post_id": str(rec["post_id"]),
                    "account": str(rec["account"]),
                    "posted_at": rec["posted_at"],
                    "days_before": (t - h.time[r]) / DAY,
                    "similarity": float(sim),
                    "metric": metric,
                    "value": None,
                    "still_gathering": False,
                }
                message = repeat_message(
                    **fields, text=str(rec["text"]), planned_is_now=abs(t - now.timestamp()) < DAY
                )
                out[i].append(Repeat(**fields, message=message))
    return out
