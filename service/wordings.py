"""Wordings compared: several phrasings of one draft forecast side by side,
ranked by median, with the precedents each phrasing has that the others do
not, and told apart only by ``overlap.RULE``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from models.errors import InputError, LimitExceeded, SoundingError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC

from .forecasting import CAUTION, Draft, Forecast, Forecaster
from .overlap import RULE, ranks, tied_with_best
from .timeparse import now_utc

MAX_VARIANTS = 10


@dataclass(slots=True)
class Variant:
    index: int  # 1-based, in the order given
    text: str
    forecast: Forecast
    rank: int = 0
    tied_with_best: bool = False
    only_here: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        f = self.forecast
        return {
            "index": self.index,
            "text": self.text,
            "rank": self.rank,
            "low": f.low,
            "median": f.median,
            "high": f.high,
            "tied_with_best": self.tied_with_best,
            "precedents": [p["post_id"] for p in f.precedents],
            "only_here": self.only_here,
            "warnings": f.warnings,
        }


@dataclass(slots=True)
class VariantsReport:
    account: str
    planned_at: datetime
    local_time: str
    metric: str
    coverage: float
    backtested_coverage: float | None
    model_version: str
    variants: list[Variant]  # best first
    told_apart: bool
    summary: str

    def to_dict(self) -> dict[str, Any]:
        return {
            "account": self.account,
            "planned_at": self.planned_at.isoformat(),
            "local_time": self.local_time,
            "metric": self.metric,
            "coverage": self.coverage,
            "backtested_coverage": self.backtested_coverage,
            "model_version": self.model_version,
            "told_apart": self.told_apart,
            "summary": self.summary,
            "rule": RULE,
            "variants": [v.to_dict() for v in self.variants],
            "caution": CAUTION,
        }


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
) -> VariantsReport:
    """Forecast each phrasing at the same time, rank by median, and list the
    precedents each has that none of the others has."""
    if len(texts) < 2:
        raise InputError(f"give at least two variants to compare, got {len(texts)}", field="texts")
    if len(texts) > MAX_VARIANTS:
        raise LimitExceeded(
            f"{len(texts)} variants; the limit is {MAX_VARIANTS}",
            limit="max_variants",
            maximum=MAX_VARIANTS,
            field="texts",
        )
    for i, t in enumerate(texts, start=1):
        try:
            forecaster.limits.check_draft(t)
        except SoundingError as exc:  # say which variant is at fault
            exc.where = exc.where or f"variant {i}"
            raise
    now = now or now_utc()
    planned = planned_at or now
    drafts = [
        Draft(text=t, account=account, planned_at=planned, draft_id=str(i), has_media=has_media)
        for i, t in enumerate(texts, start=1)
    ]
    found = forecaster.forecast(drafts, metric=metric, coverage=coverage, now=now)
    variants = [
        Variant(index=i, text=t, forecast=f)
        for i, (t, f) in enumerate(zip(texts, found, strict=True), start=1)
    ]
    ids = [[p["post_id"] for p in v.forecast.precedents] for v in variants]
    for i, v in enumerate(variants):
        elsewhere = set().union(*(set(x) for j, x in enumerate(ids) if j != i))
        v.only_here = [p for p in ids[i] if p not in elsewhere]
    _, flags = tied_with_best([v.forecast.log for v in variants])
    for v, r, flag in zip(variants, ranks([v.forecast.log[1] for v in variants]), flags, strict=True):
        v.rank, v.tied_with_best = r, flag
    variants.sort(key=lambda v: v.rank)
    told_apart = sum(flags) == 1
    equal = [v for v in variants if v.tied_with_best]
    lower = [v for v in variants if not v.tied_with_best]
    if not lower:
        summary = (
            "These variants cannot be told apart with this history: their intervals "
            "overlap the best one's by at least half."
        )
    elif told_apart:
        summary = f"Variant #{equal[0].index} looks ahead of the others ({names(lower)})."
    else:
        summary = (
            f"Variants {names(equal)} cannot be told apart with this history; "
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
