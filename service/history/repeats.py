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
from service.history.match_modes import Match
from service.history.retrieval import Retriever, WideCache
from service.history.view import HistoryView
from service.history.word_repeats import combined, words_above
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
    similarity: Round4 = Field(description="Cosine similarity of the two texts' embeddings")
    words_share: Round4 | None = Field(
        default=None,
        description="With match words or both: the share of the post's words the draft repeats "
        "(BM25 of the draft's words on the post over the post's own); null when the words "
        "rule did not find it",
    )
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
    words_share: float | None = None,
) -> str:
    """The warning line of a near-repeat."""
    ago = _ago(days_before) + (" ago" if planned_is_now else " before the planned time")
    how = _how_it_did(metric, value, not still_gathering)
    snippet = text if len(text) <= 90 else text[:87].rstrip() + "..."
    alike = f"similarity {similarity:.2f}" + (
        "" if words_share is None else f", {words_share:.0%} of its words"
    )
    what = f"{post_id} on {posted_at:%Y-%m-%d}, {how}, {alike}: \u201c{snippet}\u201d"
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
    text: str = "",
    match: Match = Match.MEANING,
) -> list[Repeat]:
    """Posts above ``settings.repeat_similarity`` shortly before ``planned``.

    Same account: within ``repeat_window_days``; other accounts (teammates):
    within ``team_repeat_window_days``. Young posts count too: they are the
    likeliest repeats. Only posts strictly before the planned time are
    searched, so re-checking a published post never finds itself.

    ``match`` says how a post is found alike: by meaning (the cosine), by the
    draft's ``text`` read as words (``service.history.word_repeats``), or
    by either.
    """
    return near_repeats_many(
        retrieval, settings, view, [(account, vector, planned)], now=now, k=k, texts=[text], match=match
    )[0]


def near_repeats_many(
    retrieval: Retriever,
    settings: Settings,
    view: HistoryView,
    items: Sequence[tuple[str, np.ndarray, datetime]],
    *,
    now: datetime,
    k: int = 3,
    wide: WideCache | None = None,
    texts: Sequence[str] | None = None,
    match: Match = Match.MEANING,
) -> list[list[Repeat]]:
    """``near_repeats`` of each (account, vector, planned time), own account's
    repeats first, at most ``k`` of each scope, most similar first.

    Items that share account and text (best hours: one draft at many times)
    share one search per scope over the union of their windows. With
    ``match`` words or both, ``texts`` (one per item) are read as words.
    """
    s = settings
    h = view.history
    out: list[list[Repeat]] = [[] for _ in items]
    if match is not Match.MEANING and (texts is None or len(texts) != len(items)):
        raise ValueError("near-repeats by words need one text per item")
    groups: dict[tuple[str, bytes, str], list[int]] = {}
    for i, (account, vec, _) in enumerate(items):
        said = "" if texts is None or match is Match.MEANING else texts[i]
        groups.setdefault((account, np.asarray(vec, dtype=np.float32).tobytes(), said), []).append(i)
    spans = (("own", s.repeat_window_days * DAY), ("team", s.team_repeat_window_days * DAY))
    for (account, _, said), idx in groups.items():
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
            hits = (
                []
                if match is Match.WORDS
                else retrieval.above(view, vec, rows, s.repeat_similarity, (wide or {}).get(vec.tobytes()))
            )
            by_words = (
                []
                if match is Match.MEANING
                else words_above(retrieval, view, said, rows, s.repeat_words_share)
            )
            sims = dict(hits)
            sims |= _cosines(retrieval, view, vec, [r for r, _ in by_words if r not in sims])
            shares = None if match is Match.MEANING else dict(by_words)
            order = combined(match, hits, by_words)
            for i, t in zip(idx, times, strict=True):
                mine = [r for r in order if t - span <= h.time[r] < t][:k]
                out[i].extend(
                    _repeat(
                        view,
                        scope,
                        r,
                        sims[r],
                        t=t,
                        now=now,
                        maturity=s.maturity_hours * 3600.0,
                        words_share=None if shares is None else shares.get(r),
                    )
                    for r in mine
                )
    return out


def _cosines(retrieval: Retriever, view: HistoryView, vec: np.ndarray, rows: list[int]) -> dict[int, float]:
    """The cosine of History ``rows`` to ``vec``, from the index's vectors."""
    if not rows:
        return {}
    sims = retrieval.similarities(vec, view.history.pk[np.asarray(rows, dtype=np.int64)])[:, 0]
    return {r: float(x) for r, x in zip(rows, sims, strict=True)}


def _repeat(
    view: HistoryView,
    scope: str,
    row: int,
    sim: float,
    *,
    t: float,
    now: datetime,
    maturity: float,
    words_share: float | None = None,
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
        "words_share": words_share,
        "metric": view.metric,
        "value": target_value(_metrics(rec["metrics"]), view.metric, followers=rec.get("followers")),
        "still_gathering": not bool(posted <= now.timestamp() - maturity),
    }
    message = repeat_message(**fields, text=str(rec["text"]), planned_is_now=abs(t - now.timestamp()) < DAY)
    return Repeat(**fields, message=message)


def _metrics(rec: Mapping[str, Any]) -> dict[str, float | None]:
    return {m: (None if rec[m] is None or rec[m] != rec[m] else float(rec[m])) for m in METRIC_COLUMNS}
