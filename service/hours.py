"""Best hours: one draft forecast at every hour of a local day (or of seven
days), in the account's IANA zone, ranked by median, with an honest
statement when the intervals do not tell the hours apart (``overlap.RULE``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime, time, timedelta
from typing import Any

import numpy as np

from models.errors import InputError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC
from models.stacking import best_hour_confidence

from .forecasting import CAUTION, Draft, Forecaster
from .overlap import RULE, ranks, tied_with_best
from .timeparse import UTC, now_utc, zone

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


@dataclass(slots=True)
class Slot:
    planned_at: datetime  # UTC
    local: datetime  # in the account's zone
    low: float
    median: float
    high: float
    log: tuple[float, float, float]
    warnings: list[str]
    rank: int = 0
    tied_with_best: bool = False

    @property
    def offset(self) -> str:
        """UTC offset as ISO 8601 ±HH:MM (seconds of old local mean times dropped)."""
        minutes = int((self.local.utcoffset() or timedelta(0)).total_seconds() // 60)
        sign = "-" if minutes < 0 else "+"
        return f"{sign}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"

    def label(self, *, with_day: bool = False) -> str:
        day = f"{self.local:%a %d %b} " if with_day else ""
        return f"{day}{self.local:%H:%M} (UTC{self.offset})"

    def to_dict(self) -> dict[str, Any]:
        return {
            "planned_at": self.planned_at.isoformat(),
            "local_time": self.local.isoformat(timespec="minutes"),
            "local_date": self.local.date().isoformat(),
            "local_hour": f"{self.local:%H:%M}",
            "utc_offset": self.offset,
            "low": self.low,
            "median": self.median,
            "high": self.high,
            "rank": self.rank,
            "tied_with_best": self.tied_with_best,
            "warnings": self.warnings,
        }


@dataclass(slots=True)
class HoursReport:
    account: str
    timezone: str
    metric: str
    coverage: float
    backtested_coverage: float | None
    model_version: str
    mode: str  # "day" or "week"
    first_day: date
    last_day: date
    slots: list[Slot]  # chronological
    best_index: int
    fraction_tied_with_best: float  # of the other slots, the share about equal to the best
    told_apart: bool
    summary: str
    top: int = 3
    warnings: list[str] = field(default_factory=list)
    # Share of the timing component's bootstrap refits in which the best slot
    # stays best (None: the model has no timing component).
    best_stays_best: float | None = None

    @property
    def best(self) -> list[Slot]:
        """The slots about equal to the best, highest median first, at most ``top``."""
        group = [s for s in self.slots if s.tied_with_best]
        return sorted(group, key=lambda s: s.rank)[: self.top]

    def to_dict(self) -> dict[str, Any]:
        return {
            "account": self.account,
            "timezone": self.timezone,
            "metric": self.metric,
            "coverage": self.coverage,
            "backtested_coverage": self.backtested_coverage,
            "model_version": self.model_version,
            "mode": self.mode,
            "first_day": self.first_day.isoformat(),
            "last_day": self.last_day.isoformat(),
            "n_slots": len(self.slots),
            "told_apart": self.told_apart,
            "fraction_tied_with_best": round(self.fraction_tied_with_best, 3),
            "summary": self.summary,
            "best_stays_best": self.best_stays_best,
            "rule": RULE,
            "best": [s.to_dict() for s in self.best],
            "slots": [s.to_dict() for s in self.slots],
            "warnings": self.warnings,
            "caution": CAUTION,
        }


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
) -> HoursReport:
    """Forecast ``text`` at every hour of ``day`` (default: tomorrow in the
    account's zone), or of the seven days from ``day`` with ``week``.

    The draft is embedded once and every slot goes through one
    ``Forecaster.forecast`` call.
    """
    if not 1 <= top <= 24 * WEEK_DAYS:
        raise InputError(f"top must be between 1 and {24 * WEEK_DAYS}, got {top}", field="top")
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
    found = forecaster.forecast(
        drafts, metric=metric, coverage=coverage, now=now, vectors=np.repeat(vec, len(drafts), axis=0)
    )
    z = zone(tz)
    slots = [
        Slot(
            planned_at=t,
            local=t.astimezone(z),
            low=f.low,
            median=f.median,
            high=f.high,
            log=f.log,
            warnings=f.warnings,
        )
        for t, f in zip(instants, found, strict=True)
    ]
    best, flags = tied_with_best([s.log for s in slots])
    for s, r, flag in zip(slots, ranks([s.log[1] for s in slots]), flags, strict=True):
        s.rank, s.tied_with_best = r, flag
    others = len(slots) - 1
    share = (sum(flags) - 1) / others if others else 1.0
    report = HoursReport(
        account=account,
        timezone=tz,
        metric=metric,
        coverage=coverage,
        backtested_coverage=found[0].backtested_coverage,
        model_version=found[0].model_version,
        mode="week" if week else "day",
        first_day=days[0],
        last_day=days[-1],
        slots=slots,
        best_index=best,
        fraction_tied_with_best=share,
        told_apart=share <= 0.5,
        summary="",
        top=top,
        warnings=list(slots[best].warnings),
    )
    report.best_stays_best = best_hour_confidence(
        forecaster.model(metric).quantiles,
        local_hours=[s.local.hour + s.local.minute / 60 for s in slots],
        weekdays=[s.local.weekday() for s in slots],
        account=forecaster.view(metric).account_codes[account],
        medians=[s.log[1] for s in slots],
    )
    report.summary = _hours_summary(report)
    return report


def _hours_summary(r: HoursReport) -> str:
    week = r.mode == "week"
    group = sorted((s for s in r.slots if s.tied_with_best), key=lambda s: s.rank)
    lower = [s for s in r.slots if not s.tied_with_best]
    n = len(r.slots)
    if not lower:
        return (
            f"These hours cannot be told apart with this history: every hour's "
            f"{r.coverage:.0%} interval overlaps the best hour's by at least half its width."
        )
    weaker = _spans(lower, week)
    if not r.told_apart:
        return (
            f"These hours cannot be told apart with this history: {len(group) - 1} of the "
            f"other {n - 1} hours have intervals overlapping the best hour's by at least half. "
            f"Only {weaker} look clearly weaker."
        )
    if len(group) == 1:
        return f"Best hour: {group[0].label(with_day=week)}; every other hour looks clearly weaker."
    shown = ", ".join(s.label(with_day=week) for s in group[: r.top])
    more = f" and {len(group) - r.top} more" if len(group) > r.top else ""
    return (
        f"Best hours: {shown}{more}, about equal to each other (not ranked among "
        f"themselves); the other {len(lower)} hours look clearly weaker."
    )


def _spans(slots: list[Slot], week: bool) -> str:
    """Consecutive slots as ranges, e.g. '00:00–07:00, 23:00'."""
    if week:
        return f"{len(slots)} hours (mostly {_commonest_hours(slots)})"
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
