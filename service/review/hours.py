"""Best hours: one draft forecast at every hour of a local day (or of seven
days), in the account's IANA zone, ranked by median, with an honest
statement when the intervals do not tell the hours apart (``overlap.RULE``).
"""

from __future__ import annotations

from datetime import date, datetime, time, timedelta
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, Field

from models.constraints import Interval
from models.errors import InputError
from models.hour_confidence import best_hour_confidence
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC, Metric
from service.answers import Coverage, Instant, Round3
from service.clock import UTC, now_utc, zone
from service.forecast.answer import CAUTION
from service.forecast.draft import Draft
from service.forecast.forecaster import Forecaster
from service.history.match_modes import Match
from service.review.hour_support import DEFAULT_MIN_POSTS, FEW_POSTS, few_posts
from service.review.overlap import RULE, ranks, tied_with_best

WEEK_DAYS = 7
FIRST_DAY, LAST_DAY = date(2, 1, 1), date(9999, 12, 20)


def day_slots(day: date, tz: str) -> list[datetime]:
    """Hourly UTC instants from local midnight of ``day`` to the next local
    midnight in zone ``tz``: 23 on a spring-forward day, 25 on a fall-back day.

    Stepping in UTC (not in wall-clock time) is what makes the count right;
    a midnight skipped by a change (fold=0) maps to the instant the day starts.
    """
    z = zone(tz)
    start = datetime.combine(day, time(0), tzinfo=z).astimezone(UTC)
    end = datetime.combine(day + timedelta(days=1), time(0), tzinfo=z).astimezone(UTC)
    out, t = [], start
    while t < end:
        out.append(t)
        t += timedelta(hours=1)
    return out


def parse_day(text: str, *, where: str = "day") -> date:
    """An ISO 8601 calendar date (YYYY-MM-DD)."""
    try:
        if len(text.strip()) != 10:
            raise ValueError
        return date.fromisoformat(text.strip())
    except ValueError:
        raise InputError(
            f"cannot read day {text!r}",
            where=where,
            field=where,
            value=text,
            hint="use an ISO 8601 date such as 2026-12-03",
        ) from None


def _offset_text(local: datetime) -> str:
    """UTC offset as ISO 8601 ±HH:MM (seconds of old local mean times dropped)."""
    minutes = int((local.utcoffset() or timedelta(0)).total_seconds() // 60)
    sign = "-" if minutes < 0 else "+"
    return f"{sign}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"


class Slot(BaseModel):
    """One hour of the day (or week): the draft's forecast if posted then."""

    planned_at: Instant = Field(description="The slot's start, UTC")
    local_time: str = Field(description="The slot's start in the account's zone, with its offset")
    local_date: date
    local_hour: str = Field(description="Local wall-clock hour, HH:MM")
    utc_offset: str = Field(description="UTC offset at that instant, e.g. +01:00")
    low: float
    median: float
    high: float
    rank: int = Field(default=0, description="1 = highest median")
    tied_with_best: bool = Field(
        default=False, description="Interval about equal to the best slot's (see rule)"
    )
    few_posts: bool = Field(
        default=False,
        description="The account has fewer than min_posts posts at this hour (or weekday): "
        "never best, never tied with the best",
    )
    warnings: list[str]
    log: tuple[float, float, float] = Field(default=(0.0, 0.0, 0.0), exclude=True)

    @classmethod
    def at(cls, planned_at: datetime, local: datetime, **forecast: Any) -> Slot:
        """The slot starting at ``planned_at`` (UTC), ``local`` in the account's zone."""
        return cls(
            planned_at=planned_at,
            local_time=local.isoformat(timespec="minutes"),
            local_date=local.date(),
            local_hour=f"{local:%H:%M}",
            utc_offset=_offset_text(local),
            **forecast,
        )

    @property
    def local(self) -> datetime:
        """The slot's start in the account's zone (at its UTC offset)."""
        return datetime.fromisoformat(self.local_time)

    def label(self, *, with_day: bool = False) -> str:
        day = f"{self.local:%a %d %b} " if with_day else ""
        return f"{day}{self.local_hour} (UTC{self.utc_offset})"


class HoursReport(BaseModel):
    """Best hours of one draft: every slot forecast, ranked, and whether they can be told apart."""

    account: str
    timezone: str
    metric: Metric
    coverage: Coverage
    backtested_coverage: float | None
    model_version: str
    mode: Literal["day", "week"] = Field(description="day or week")
    first_day: date
    last_day: date
    n_slots: int
    told_apart: bool = Field(description="False when most hours cannot be told apart")
    fraction_tied_with_best: Round3 = Field(description="Share of the other slots about equal to the best")
    best_stays_best: float | None = Field(
        default=None,
        description="Share of bootstrap refits of the timing effect in which the "
        "best slot stays best (null for models without a timing component)",
    )
    summary: str
    rule: str = RULE
    min_posts: int = Field(
        default=DEFAULT_MIN_POSTS, description="Posts an hour needs not to be marked few_posts"
    )
    best: list[Slot] = Field(description="Slots about equal to the best, highest median first")
    slots: list[Slot] = Field(description="Every slot, in time order")
    warnings: list[str] = Field(default_factory=list)
    caution: str = CAUTION


def best_hours(
    forecaster: Forecaster,
    text: str,
    *,
    account: str,
    day: date | None = None,
    week: bool = False,
    metric: str = DEFAULT_METRIC,
    coverage: float = DEFAULT_COVERAGE,
    top: int = 3,
    now: datetime | None = None,
    has_media: bool = False,
    min_posts: int = DEFAULT_MIN_POSTS,
    match: Match = Match.MEANING,
) -> HoursReport:
    """Forecast ``text`` at every hour of ``day`` (default: tomorrow in the
    account's zone), or of the seven days from ``day`` with ``week``.

    The draft is embedded once and every slot goes through one
    ``Forecaster.forecast`` call; ``match`` says how near-repeats are found.
    """
    Interval(int, 1, 24 * WEEK_DAYS).check(top, "top")
    tz = forecaster.store.account(account).timezone
    now = now or now_utc()
    first = day or (now.astimezone(zone(tz)).date() + timedelta(days=1))
    # datetime holds years 1-9999 (Python docs); keep a week and any UTC offset inside it.
    if not FIRST_DAY <= first <= LAST_DAY:
        raise InputError(
            f"day {first.isoformat()} is outside {FIRST_DAY} to {LAST_DAY}",
            field="day",
            value=first.isoformat(),
        )
    days = [first + timedelta(days=i) for i in range(WEEK_DAYS if week else 1)]
    instants = [t for d in days for t in day_slots(d, tz)]
    vec = forecaster.embed([text])
    drafts = [Draft(text=text, account=account, planned_at=t, has_media=has_media) for t in instants]
    # Only the intervals: no slot shows precedents or contributions.
    found = forecaster.bands(
        drafts,
        metric=metric,
        coverage=coverage,
        now=now,
        vectors=np.repeat(vec, len(drafts), axis=0),
        match=match,
    )
    z = zone(tz)
    slots = [
        Slot.at(t, t.astimezone(z), low=f.low, median=f.median, high=f.high, log=f.log, warnings=f.warnings)
        for t, f in zip(instants, found, strict=True)
    ]
    thin = few_posts(
        forecaster.view(metric), account, [s.local for s in slots], min_posts=min_posts, by_weekday=week
    )
    # Only hours the account's history speaks for can be best or tied with it.
    backed = [i for i, t in enumerate(thin) if not t]
    flags = [False] * len(slots)
    if backed:
        at, sub = tied_with_best([slots[i].log for i in backed])
        best = backed[at]
        for i, flag in zip(backed, sub, strict=True):
            flags[i] = flag
    else:
        best = int(np.argmax([s.log[1] for s in slots]))
    # Marked hours rank after every backed one, whatever their medians.
    order = ranks([s.log[1] - (1e9 if t else 0.0) for s, t in zip(slots, thin, strict=True)])
    for s, r, flag, t in zip(slots, order, flags, thin, strict=True):
        s.rank, s.tied_with_best, s.few_posts = r, flag, t
    others = len(backed) - 1
    share = (sum(flags) - 1) / others if others > 0 else 1.0
    told_apart = share <= 0.5
    return HoursReport(
        account=account,
        timezone=tz,
        metric=metric,
        coverage=coverage,
        backtested_coverage=found[0].backtested_coverage,
        model_version=found[0].model_version,
        mode="week" if week else "day",
        first_day=days[0],
        last_day=days[-1],
        n_slots=len(slots),
        told_apart=told_apart,
        fraction_tied_with_best=share,
        best_stays_best=best_hour_confidence(
            forecaster.model(metric).forecaster,
            local_hours=[s.local.hour + s.local.minute / 60 for s in slots],
            weekdays=[s.local.weekday() for s in slots],
            account=forecaster.view(metric).account_codes[account],
            medians=[s.log[1] for s in slots],
        ),
        summary=hours_summary(slots, coverage=coverage, told_apart=told_apart, top=top, week=week),
        best=sorted((s for s in slots if s.tied_with_best), key=lambda s: s.rank)[:top],
        slots=slots,
        min_posts=min_posts,
        warnings=list(slots[best].warnings),
    )


def hours_summary(slots: list[Slot], *, coverage: float, told_apart: bool, top: int, week: bool) -> str:
    """One plain sentence on the best hours, or on why they cannot be told apart."""
    thin = [s for s in slots if s.few_posts]
    # FEW_POSTS is the mark of one hour; the sentence speaks of all of them.
    note = (
        f" {_spans(thin, week)}: few or no posts at these hours, so the forecast there leans on other hours."
        if thin
        else ""
    )
    if len(thin) == len(slots):
        return f"No hour can be called best: {FEW_POSTS}, at every hour of this span."
    return _backed_summary([s for s in slots if not s.few_posts], coverage, told_apart, top, week) + note


def _backed_summary(slots: list[Slot], coverage: float, told_apart: bool, top: int, week: bool) -> str:
    group = sorted((s for s in slots if s.tied_with_best), key=lambda s: s.rank)
    lower = [s for s in slots if not s.tied_with_best]
    n = len(slots)
    if not lower:
        return (
            f"These hours cannot be told apart with this history: every hour's "
            f"{coverage:.0%} interval overlaps the best hour's by at least half its width."
        )
    weaker = _spans(lower, week)
    if not told_apart:
        return (
            f"These hours cannot be told apart with this history: {len(group) - 1} of the "
            f"other {n - 1} hours have intervals overlapping the best hour's by at least half. "
            f"Only {weaker} look clearly weaker."
        )
    if len(group) == 1:
        return f"Best hour: {group[0].label(with_day=week)}; every other hour looks clearly weaker."
    shown = ", ".join(s.label(with_day=week) for s in group[:top])
    more = f" and {len(group) - top} more" if len(group) > top else ""
    return (
        f"Best hours: {shown}{more}, about equal to each other (not ranked among "
        f"themselves); the other {len(lower)} hours look clearly weaker."
    )


def _spans(slots: list[Slot], week: bool) -> str:
    """Consecutive slots as ranges, e.g. '00:00–07:00, 23:00'."""
    if week:
        return f"{len(slots)} {'hour' if len(slots) == 1 else 'hours'} (mostly {_commonest_hours(slots)})"
    runs: list[list[Slot]] = []
    for s in slots:
        if runs and s.planned_at - runs[-1][-1].planned_at == timedelta(hours=1):
            runs[-1].append(s)
        else:
            runs.append([s])
    parts = [
        f"{r[0].local:%H:%M}" if len(r) == 1 else f"{r[0].local:%H:%M}\u2013{r[-1].local:%H:%M}" for r in runs
    ]
    return ", ".join(parts)


def _commonest_hours(slots: list[Slot]) -> str:
    counts: dict[int, int] = {}
    for s in slots:
        counts[s.local.hour] = counts.get(s.local.hour, 0) + 1
    hours = sorted(h for h, c in counts.items() if c >= max(counts.values()) / 2)
    return ", ".join(f"{h:02d}:00" for h in hours[:8]) + (" ..." if len(hours) > 8 else "")
