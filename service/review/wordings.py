"""Wordings compared: several phrasings of one draft forecast side by side,
ranked by median, with the precedents each phrasing has that the others do
not, and told apart only by ``overlap.RULE``.
"""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime

from pydantic import BaseModel, Field

from models.errors import InputError, LimitExceeded, SoundingError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, Metric
from service.answers import Coverage, Instant
from service.clock import now_utc
from service.forecast.answer import CAUTION
from service.forecast.draft import Draft
from service.forecast.forecaster import Forecaster
from service.history.match_modes import Match
from service.review.overlap import RULE, ranks, tied_with_best

MAX_VARIANTS = 10


class Variant(BaseModel):
    """One phrasing of the draft with its forecast, rank and own precedents."""

    index: int = Field(description="Position in the request, from 1")
    text: str
    rank: int = 0
    low: float
    median: float
    high: float
    tied_with_best: bool = False
    precedents: list[str] = Field(description="Post ids of its precedents, most similar first")
    only_here: list[str] = Field(default_factory=list, description="Precedent post ids no other variant has")
    warnings: list[str]
    log: tuple[float, float, float] = Field(default=(0.0, 0.0, 0.0), exclude=True)


class VariantsReport(BaseModel):
    """Wordings of one draft compared at the same account and time."""

    account: str
    planned_at: Instant
    local_time: str
    metric: Metric
    coverage: Coverage
    backtested_coverage: float | None
    model_version: str
    told_apart: bool
    summary: str
    rule: str = RULE
    variants: list[Variant] = Field(description="Best first")
    caution: str = CAUTION


def compare_variants(
    forecaster: Forecaster,
    texts: Sequence[str],
    *,
    account: str,
    planned_at: datetime | None = None,
    metric: str = DEFAULT_METRIC,
    coverage: float = DEFAULT_COVERAGE,
    now: datetime | None = None,
    has_media: bool = False,
    match: Match = Match.MEANING,
) -> VariantsReport:
    """Forecast each phrasing at the same time, rank by median, and list the
    precedents each has that none of the others has (``match``: how
    near-repeats are found)."""
    if len(texts) < 2:
        raise InputError(f"give at least two versions to compare, got {len(texts)}", field="texts")
    if len(texts) > MAX_VARIANTS:
        raise LimitExceeded(
            f"{len(texts)} versions; the limit is {MAX_VARIANTS}",
            limit="max_variants",
            maximum=MAX_VARIANTS,
            field="texts",
        )
    for i, t in enumerate(texts, start=1):
        try:
            forecaster.limits.check_draft(t)
        except SoundingError as exc:  # say which variant is at fault
            exc.where = exc.where or f"version {i}"
            raise
    now = now or now_utc()
    planned = planned_at or now
    drafts = [
        Draft(text=t, account=account, planned_at=planned, draft_id=str(i), has_media=has_media)
        for i, t in enumerate(texts, start=1)
    ]
    found = forecaster.forecast(drafts, metric=metric, coverage=coverage, now=now, match=match)
    variants = [
        Variant(
            index=i,
            text=t,
            low=f.low,
            median=f.median,
            high=f.high,
            precedents=[p.post_id for p in f.precedents],
            warnings=f.warnings,
            log=f.log,
        )
        for i, (t, f) in enumerate(zip(texts, found, strict=True), start=1)
    ]
    ids = [v.precedents for v in variants]
    for i, v in enumerate(variants):
        elsewhere = set().union(*(set(x) for j, x in enumerate(ids) if j != i))
        v.only_here = [p for p in ids[i] if p not in elsewhere]
    _, flags = tied_with_best([v.log for v in variants])
    for v, r, flag in zip(variants, ranks([v.log[1] for v in variants]), flags, strict=True):
        v.rank, v.tied_with_best = r, flag
    variants.sort(key=lambda v: v.rank)
    told_apart = sum(flags) == 1
    equal = [v for v in variants if v.tied_with_best]
    lower = [v for v in variants if not v.tied_with_best]
    if not lower:
        summary = (
            "These versions cannot be told apart with this history: their intervals "
            "overlap the best one's by at least half."
        )
    elif told_apart:
        summary = f"Version #{equal[0].index} looks ahead of the others ({names(lower)})."
    else:
        summary = (
            f"Versions {names(equal)} cannot be told apart with this history; "
            f"{names(lower)} look{'s' if len(lower) == 1 else ''} clearly weaker."
        )
    f0 = found[0]
    return VariantsReport(
        account=account,
        planned_at=planned,
        local_time=f0.local_time,
        metric=metric,
        coverage=coverage,
        backtested_coverage=f0.backtested_coverage,
        model_version=f0.model_version,
        variants=variants,
        told_apart=told_apart,
        summary=summary,
    )


def names(variants: Sequence[Variant]) -> str:
    """Variants by number, e.g. '#1, #3'."""
    return ", ".join(f"#{v.index}" for v in variants)
