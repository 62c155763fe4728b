"""Who should post it: one draft checked for each of the team's accounts at
its planned time (read in each account's own zone), ranked by median, told
apart only by ``overlap.RULE``, each row saying which of the draft's
precedents are that account's own and how they did against its usual level.

The forecasts go through ``checking.check_drafts``, the one forecast path,
and are not recorded: only the account that then posts the draft should
have a forecast in the track record (README, "Who should post it").
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

import numpy as np
from pydantic import BaseModel, Field

from models import features as F
from models.errors import InputError, NotReady
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, Metric, check_coverage
from service.answers import Coverage, Instant, Round4, value_text
from service.checking import check_drafts
from service.clock import now_utc
from service.forecast.answer import CAUTION, Forecast, from_model_scale
from service.forecast.draft import make_draft, planned_time
from service.history.match_modes import Match
from service.history.view import HistoryView
from service.ingest.timestamps import TimeReader
from service.review.overlap import RULE, heavy_overlap, ranks, tied_with_best
from service.storage.handles import fold_handle
from service.track.parts import TrackedDir

#: What ``accounts`` says to mean every account of the store.
EVERY = "all"
NOT_RECORDED = (
    "Not recorded in the track record: check the draft again for the account that posts it "
    "to have its forecast scored."
)
_WORDS = ("no", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine")


class AccountFit(BaseModel):
    """One account's forecast of the draft, its rank and what sets it apart."""

    account: str
    timezone: str = Field(description="IANA zone the planned time is read in")
    planned_at: Instant
    local_time: str = Field(description="The planned time in the account's zone, with its offset")
    rank: int = Field(default=0, description="1 = highest median")
    low: float
    median: float
    high: float
    tied_with_best: bool = Field(
        default=False, description="Interval about equal to the best account's (see rule)"
    )
    tied_with: list[str] = Field(
        default_factory=list, description="Other accounts whose intervals are about equal to this one's"
    )
    own_precedents: int = Field(
        description="The draft's settled precedents posted by this account, at or above the "
        "similarity threshold the features count"
    )
    above_usual: int = Field(description="Of those, how many did better than the account's usual level")
    usual: float | None = Field(
        description="The account's usual level: median of its latest settled posts (the account "
        "baseline feature), on the metric's scale"
    )
    reason: str = Field(description="The precedents that set it apart, in plain words")
    precedents: list[str] = Field(description="Post ids of its own precedents, most similar first")
    warnings: list[str] = Field(default_factory=list)
    log1p_low: Round4 = Field(description="low on the model's log1p scale (the scale the rule reads)")
    log1p_median: Round4
    log1p_high: Round4


class AccountChoice(BaseModel):
    """A draft forecast for each account, best first, and whether they can be told apart."""

    metric: Metric
    coverage: Coverage
    backtested_coverage: float | None
    model_version: str
    similarity_threshold: float = Field(description="Similarity a precedent needs to count as similar")
    told_apart: bool = Field(description="False when the best account is tied with another")
    summary: str
    rule: str = RULE
    accounts: list[AccountFit] = Field(description="Best first")
    left_out: list[str] = Field(default_factory=list, description="Accounts not ranked, each with the reason")
    recorded: bool = Field(
        default=False, description="Always false: these checks stay out of the track record"
    )
    note: str = NOT_RECORDED
    caution: str = CAUTION


def choose_account(
    ws: TrackedDir,
    text: str,
    *,
    accounts: Sequence[str] | str = EVERY,
    planned_at: str | datetime | None = None,
    timezone: str | None = None,
    reader: TimeReader | None = None,
    has_media: bool = False,
    metric: str = DEFAULT_METRIC,
    coverage: float = DEFAULT_COVERAGE,
    now: datetime | None = None,
    where: str = "planned_at",
    match: Match = Match.MEANING,
) -> AccountChoice:
    """Forecast ``text`` for each of ``accounts`` (handles, or ``"all"``) at
    ``planned_at``: a time without an offset is read in each account's own
    zone (or in ``timezone``; ``reader`` reads other layouts). Accounts with too little history are left out
    with the reason; an unknown handle is refused. ``match``: how near-repeats are found."""
    now = now or now_utc()
    handles = _handles(ws, accounts)
    forecaster = ws.forecaster
    forecaster.limits.check_draft(text)
    check_coverage(coverage)
    params = forecaster.model(metric).features  # an unknown metric or no model yet: refused here
    view = forecaster.view(metric)
    least = ws.settings.min_history_posts
    ready, left_out = [], []
    for h in handles:
        n = forecaster.history_posts(view, h)
        if n < least:
            left_out.append(f"{h}: {n} posts with {metric}; a forecast needs at least {least}")
        else:
            ready.append(h)
    if not ready:
        raise NotReady(
            f"no account has the {least} posts with {metric} a forecast needs",
            field="accounts",
            hint="import more history",
        )
    forecaster.limits.check_batch(len(ready))
    drafts = []
    for h in ready:
        when = (
            planned_at
            if isinstance(planned_at, datetime)
            else planned_time(ws.store, h, planned_at, where=where, reader=reader, timezone=timezone)
        )
        drafts.append(make_draft(ws.store, text=text, account=h, planned_at=when, has_media=has_media))
    vectors = np.repeat(forecaster.embed([text]), len(drafts), axis=0)
    found = check_drafts(
        ws, drafts, metric=metric, coverage=coverage, record=False, now=now, vectors=vectors, match=match
    )
    rows = [_fit(view, params, f, now) for f in found]
    _rank(rows)
    f0 = found[0]
    return AccountChoice(
        metric=metric,
        coverage=coverage,
        backtested_coverage=f0.backtested_coverage,
        model_version=f0.model_version,
        similarity_threshold=params.similar_threshold,
        told_apart=sum(r.tied_with_best for r in rows) == 1,
        summary=_summary(rows),
        accounts=rows,
        left_out=left_out,
    )


def _handles(ws: TrackedDir, accounts: Sequence[str] | str) -> list[str]:
    """The handles asked for, in the store's folded form, each once."""
    if isinstance(accounts, str):
        accounts = [accounts]
    asked = [a.strip() for a in accounts if a.strip()]
    if not asked:
        raise InputError("say which accounts to compare, or 'all'", field="accounts")
    if EVERY in asked:
        return [a.handle for a in ws.store.accounts() if not a.reference]  # peers are never forecast
    # Unknown handles raise NotFound with the closest matches.
    # (a handle no account could hold is simply unknown, as on every other door).
    return list(dict.fromkeys(ws.store.account(fold_handle(a)).handle for a in asked))


def _fit(view: HistoryView, params: F.FeatureParams, f: Forecast, now: datetime) -> AccountFit:
    h = view.history
    code = view.account_codes[f.account]
    # The usual level as the forecast's account-baseline feature sees it at the same moment.
    t = min(f.planned_at, now).timestamp()
    base, count = F.baseline(h, code, t, params)
    own = [
        p
        for p in f.precedents
        if p.account == f.account and not p.still_gathering and p.similarity >= params.similar_threshold
    ]
    rows, held = view.rows_for(np.array([p.pk for p in own], dtype=np.int64))
    logs = h.log_target[rows]
    own = [p for p, k in zip(own, held, strict=True) if k]
    above = int(np.sum(logs > base)) if count else 0
    usual = from_model_scale(base, f.metric) if count else None
    return AccountFit(
        account=f.account,
        timezone=view.zones[code],
        planned_at=f.planned_at,
        local_time=f.local_time,
        low=f.low,
        median=f.median,
        high=f.high,
        own_precedents=len(own),
        above_usual=above,
        usual=usual,
        reason=_reason(f.account, len(own), above, usual, f.metric),
        precedents=[p.post_id for p in own],
        warnings=f.warnings,
        log1p_low=f.log[0],
        log1p_median=f.log[1],
        log1p_high=f.log[2],
    )


def _count(n: int) -> str:
    return _WORDS[n] if n < len(_WORDS) else f"{n:,}"


def _reason(account: str, n: int, above: int, usual: float | None, metric: str) -> str:
    """What the account's own precedents say, in plain words."""
    if n == 0:
        return (
            f"{account} has no similar posts of its own among the draft's precedents; its forecast "
            "rests on its usual level and the hour"
        )
    posts = "post" if n == 1 else "posts"
    if usual is None:
        return f"{account} posted {_count(n)} similar {posts}"
    level = f"its usual {value_text(usual, metric)}"
    if above == n:
        return f"{account} posted {_count(n)} similar {posts} that did well (above {level})"
    if above == 0:
        return f"{account} posted {_count(n)} similar {posts} that did less well than {level}"
    below = _count(n - above)
    return f"{account} posted {_count(n)} similar {posts}: {_count(above)} above {level}, {below} below"


def _rank(rows: list[AccountFit]) -> None:
    """Ranks by median and the best's ties, then (best first) each row's ties."""
    _, flags = tied_with_best([(r.log1p_low, r.log1p_median, r.log1p_high) for r in rows])
    for r, k, flag in zip(rows, ranks([r.log1p_median for r in rows]), flags, strict=True):
        r.rank, r.tied_with_best = k, flag
    rows.sort(key=lambda r: r.rank)
    for r in rows:
        r.tied_with = [
            o.account
            for o in rows
            if o is not r and heavy_overlap((r.log1p_low, r.log1p_high), (o.log1p_low, o.log1p_high))
        ]


def _summary(rows: list[AccountFit]) -> str:
    if len(rows) == 1:
        return f"Only {rows[0].account} could be forecast."
    equal = [r.account for r in rows if r.tied_with_best]
    lower = [r.account for r in rows if not r.tied_with_best]
    if not lower:
        return (
            "These accounts cannot be told apart with this history: their intervals overlap the "
            "best one's by at least half."
        )
    if len(equal) == 1:
        return f"{equal[0]} looks ahead of the others ({', '.join(lower)})."
    return (
        f"{', '.join(equal)} cannot be told apart with this history; "
        f"{', '.join(lower)} look{'s' if len(lower) == 1 else ''} clearly weaker."
    )
