"""Near-repeats: recent posts of the same account (or of a teammate) that say
nearly the same thing shortly before a draft's planned time. Every forecast
carries them as warnings.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, Field

from models.metrics import METRIC_COLUMNS, Metric, target_value
from service.answers import Instant, Round2, Round4
from service.history.retrieval import Retriever, WideCache
from service.history.view import HistoryView
from service.settings import Settings

DAY = 86400.0


class Repeat(BaseModel):
    """A recent post that a draft nearly repeats."""

    scope: Literal["own", "team", "reference"] = Field(
        description="own: the draft's account; team: another of the team's accounts; "
        "reference: a reference account's post (a peer's, shown without metrics)"
    )
    post_id: str
    account: str
    posted_at: Instant
    days_before: Round2 = Field(description="Days before the planned time")
    similarity: Round4
    metric: Metric
    value: float | None = Field(description="The post's metric so far")
    still_gathering: bool = Field(description="True while the post's metrics are not final yet")
    message: str = Field(description="The warning as one line")


def repeat_message(
    *,
    scope: str,
    post_id: str,
    account: str,
    posted_at: datetime,
    days_before: float,
    similarity: float,
    metric: str,
    value: float | None,
    still_gathering: bool,
    text: str,
    planned_is_now: bool,
) -> str:
    """The warning line of a near-repeat."""
    ago = _ago(days_before) + (" ago" if planned_is_now else " before the planned time")
    how = _how_it_did(metric, value, not still_gathering)
    snippet = text if len(text) <= 90 else text[:87].rstrip() + "..."
    what = f"{post_id} on {posted_at:%Y-%m-%d}, {how}, similarity {similarity:.2f}: \u201c{snippet}\u201d"
    if scope == "own":
        return f"near-repeat: {account} posted something very similar {ago}: {what}"
    if scope == "reference":
        snippet_only = (
            f"{post_id} on {posted_at:%Y-%m-%d}, similarity {similarity:.2f}: \u201c{snippet}\u201d"
        )
        return f"near-repeat of a peer: {account} posted something like this {ago}: {snippet_only}"
    return (
        f"near-repeat on the team: someone on the team ({account}) posted something "
        f"very similar {ago}: {what}"
    )


def _ago(days: float) -> str:
    if days < 1:
        hours = max(1, round(days * 24))
        return f"{hours} hour{'s' if hours != 1 else ''}"
    n = round(days)
    return f"{n} day{'s' if n != 1 else ''}"


def _how_it_did(metric: str, value: float | None, mature: bool) -> str:
    if value is None:
        return f"no {metric} recorded yet"
    shown = f"{value:.1%} {metric}" if metric == Metric.ENGAGEMENT_RATE else f"{value:,.0f} {metric}"
    return shown if mature else f"{shown} so far (still gathering)"


def near_repeats(
    retrieval: Retriever,
    settings: Settings,
    view: HistoryView,
    *,
    account: str,
    vector: np.ndarray,
    planned: datetime,
    now: datetime,
    k: int = 3,
) -> list[Repeat]:
    """Posts above ``settings.repeat_similarity`` shortly before ``planned``.

    Same account: within ``repeat_window_days``; other accounts (teammates):
    within ``team_repeat_window_days``. Young posts count too: they are the
    likeliest repeats. Only posts strictly before the planned time are
    searched, so re-checking a published post never finds itself.
    """
    return near_repeats_many(retrieval, settings, view, [(account, vector, planned)], now=now, k=k)[0]


def near_repeats_many(
    retrieval: Retriever,
    settings: Settings,
    view: HistoryView,
    items: Sequence[tuple[str, np.ndarray, datetime]],
    *,
    now: datetime,
    k: int = 3,
    wide: WideCache | None = None,
) -> list[list[Repeat]]:
    """``near_repeats`` of each (account, vector, planned time), own account's
    repeats first, at most ``k`` of each scope, most similar first.

    Items that share account and text (best hours: one draft at many times)
    share one search per scope over the union of their windows.
    """
    s = settings
    h = view.history
    out: list[list[Repeat]] = [[] for _ in items]
    groups: dict[tuple[str, bytes], list[int]] = {}
    for i, (account, vec, _) in enumerate(items):
        groups.setdefault((account, np.asarray(vec, dtype=np.float32).tobytes()), []).append(i)
    spans = (("own", s.repeat_window_days * DAY), ("team", s.team_repeat_window_days * DAY))
    for (account, _), idx in groups.items():
        code = view.account_codes.get(account)
        if code is None or len(h) == 0:
            continue
        vec = np.asarray(items[idx[0]][1], dtype=np.float32).reshape(1, -1)
        times = np.array([items[i][2].timestamp() for i in idx])
        for scope, span in spans:
            # The windows' union is one slice of the time-sorted history: only
            # its rows are looked at, never the whole history.
            lo = int(np.searchsorted(h.time, times.min() - span, side="left"))
            hi = int(np.searchsorted(h.time, times.max(), side="left"))
            acc = h.account[lo:hi]
            rows = lo + np.flatnonzero((acc == code) if scope == "own" else (acc != code))
            hits = retrieval.above(view, vec, rows, s.repeat_similarity, (wide or {}).get(vec.tobytes()))
            for i, t in zip(idx, times, strict=True):
                mine = [(r, sim) for r, sim in hits if t - span <= h.time[r] < t][:k]
                out[i].extend(
                    _repeat(view, scope, r, sim, t=t, now=now, maturity=s.maturity_hours * 3600.0)
                    for r, sim in mine
                )
    return out


def _repeat(
    view: HistoryView, scope: str, row: int, sim: float, *, t: float, now: datetime, maturity: float
) -> Repeat:
    rec = view.details([row])[int(view.history.pk[row])]
    posted = view.history.time[row]
    fields: dict[str, Any] = {
        "scope": scope,
        "post_id": str(rec["post_id"]),
        "account": str(rec["account"]),
        "posted_at": rec["posted_at"],
        "days_before": (t - posted) / DAY,
        "similarity": float(sim),
        "metric": view.metric,
        "value": target_value(_metrics(rec["metrics"]), view.metric, followers=rec.get("followers")),
        "still_gathering": not bool(posted <= now.timestamp() - maturity),
    }
    message = repeat_message(**fields, text=str(rec["text"]), planned_is_now=abs(t - now.timestamp()) < DAY)
    return Repeat(**fields, message=message)


def _metrics(rec: Mapping[str, Any]) -> dict[str, float | None]:
    return {m: (None if rec[m] is None or rec[m] != rec[m] else float(rec[m])) for m in METRIC_COLUMNS}
