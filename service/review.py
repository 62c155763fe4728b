"""Draft review: what to know before pressing publish.

* Near-repeats: posts of the same account (or of a teammate) that say
  nearly the same thing shortly before the planned time. Called from
  ``Forecaster.forecast``, so every forecast carries these warnings.
* Best hours: one draft forecast at every hour of a local day (or of seven
  days), in the account's IANA zone, ranked by median, with an honest
  statement when the intervals do not tell the hours apart.
* Variants: several phrasings of one draft forecast side by side, with the
  precedents each phrasing has that the others do not.

Hours and variants are told apart with one rule (``heavy_overlap``): two
options whose intervals (on the log1p scale the model works on) overlap by
at least half of the narrower width are "about equal". Predictive intervals
include the post-to-post noise, so the rule is cautious: it only calls a
difference when it is large next to what a single post can do anyway.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import date, datetime, time, timedelta
from typing import TYPE_CHECKING, Any

import numpy as np

from models.errors import InputError, LimitExceeded, SoundingError
from models.metrics import METRIC_COLUMNS, target_value
from models.stacking import best_hour_confidence

from .timeparse import UTC, now_utc, zone

if TYPE_CHECKING:  # runtime imports are inside functions: forecasting imports this module
    from .forecasting import Forecast, HistoryView
    from .workspace import Workspace

DAY = 86400.0
MAX_VARIANTS = 10
WEEK_DAYS = 7
FIRST_DAY, LAST_DAY = date(2, 1, 1), date(9999, 12, 20)
RULE = ("two options are about equal when their intervals (log1p scale) overlap by at least "
        "half of the narrower interval's width")


# Near-repeats ----------------------------------------------------------------


@dataclass(frozen=True, slots=True)
class Repeat:
    """A recent post very similar to a draft."""

    scope: str  # "own": the draft's account; "team": another account of the store
    post_id: str
    account: str
    posted_at: datetime
    days_before: float  # before the planned time
    similarity: float
    metric: str
    value: float | None  # the post's metric so far
    mature: bool
    text: str
    planned_is_now: bool = True

    @property
    def message(self) -> str:
        ago = _ago(self.days_before) + (" ago" if self.planned_is_now else " before the planned time")
        how = _how_it_did(self.metric, self.value, self.mature)
        snippet = self.text if len(self.text) <= 90 else self.text[:87].rstrip() + "..."
        what = (f"{self.post_id} on {self.posted_at:%Y-%m-%d}, {how}, similarity "
                f"{self.similarity:.2f}: \u201c{snippet}\u201d")
        if self.scope == "own":
            return f"near-repeat: {self.account} posted something very similar {ago}: {what}"
        return (f"near-repeat on the team: someone on the team ({self.account}) posted something "
                f"very similar {ago}: {what}")

    def to_dict(self) -> dict[str, Any]:
        return {
            "scope": self.scope, "post_id": self.post_id, "account": self.account,
            "posted_at": self.posted_at.isoformat(), "days_before": round(self.days_before, 2),
            "similarity": round(self.similarity, 4), "metric": self.metric, "value": self.value,
            "mature": self.mature, "message": self.message,
        }


def _ago(days: float) -> str:
    if days < 1:
        hours = max(1, int(round(days * 24)))
        return f"{hours} hour{'s' if hours != 1 else ''}"
    n = int(round(days))
    return f"{n} day{'s' if n != 1 else ''}"


def _how_it_did(metric: str, value: float | None, mature: bool) -> str:
    if value is None:
        return f"no {metric} recorded yet"
    shown = f"{value:.1%} {metric}" if metric == "engagement_rate" else f"{value:,.0f} {metric}"
    return shown if mature else f"{shown} so far (still gathering)"


def near_repeats(ws: Workspace, view: HistoryView, *, account: str, vector: np.ndarray,
                 planned: datetime, now: datetime, k: int = 3) -> list[Repeat]:
    """Posts above ``settings.repeat_similarity`` shortly before ``planned``.

    Same account: within ``repeat_window_days``; other accounts (teammates):
    within ``team_repeat_window_days``. Young posts count too: they are the
    likeliest repeats. Only posts strictly before the planned time are
    searched, so re-checking a published post never finds itself.
    """
    return near_repeats_many(ws, view, [(account, vector, planned)], now=now, k=k)[0]


def near_repeats_many(ws: Workspace, view: HistoryView,
                      items: Sequence[tuple[str, np.ndarray, datetime]], *, now: datetime,
                      k: int = 3,
                      wide: dict[bytes, tuple[np.ndarray, np.ndarray]] | None = None,
                      ) -> list[list[Repeat]]:
    """``near_repeats`` of each (account, vector, planned time), own account's
    repeats first, at most ``k`` of each scope, most similar first.

    Items that share account and text (best hours: one draft at many times)
    share one search per scope over the union of their windows.
    """
    s = ws.settings
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
            who = (h.account == code) if scope == "own" else (h.account != code)
            union = who & (h.time < times.max()) & (h.time >= times.min() - span)
            hits = _above(ws, view, vec, union, s.repeat_similarity,
                          (wide or {}).get(vec.tobytes()))
            for i, t in zip(idx, times, strict=True):
                mine = [(r, sim) for r, sim in hits if t - span <= h.time[r] < t][:k]
                out[i].extend(_repeat(view, scope, r, sim, t=t, now=now,
                                      maturity=s.maturity_hours * 3600.0) for r, sim in mine)
    return out


def _above(ws: Workspace, view: HistoryView, vec: np.ndarray, mask: np.ndarray,
           threshold: float, nearest: tuple[np.ndarray, np.ndarray] | None = None,
           ) -> list[tuple[int, float]]:
    """(History row, similarity) of every post in ``mask`` at or above
    ``threshold``, best first.

    ``nearest`` is the draft's unfiltered nearest list (History rows and
    similarities, best first) when the forecast already searched: if it
    reaches below the threshold it holds every post above it, and no second
    pass over the index is needed.
    """
    rows = np.flatnonzero(mask)
    if len(rows) == 0:
        return []
    if nearest is not None and len(nearest[1]) and (
            nearest[1][-1] < threshold or len(nearest[1]) >= len(view.history)):
        near_rows, near_sims = nearest
        keep = mask[near_rows] & (near_sims >= threshold)
        return [(int(r), float(x)) for r, x in zip(near_rows[keep], near_sims[keep], strict=True)]
    pks = view.history.pk[rows]
    k = min(len(pks), 16)
    hits: list[tuple[int, float]] = []
    while True:  # widen the search until it passes below the threshold
        hits = ws.neighbours(vec, k, allowed_pks=pks)[0]
        if len(hits) < k or hits[-1][1] < threshold or k >= len(pks):
            break
        k = min(len(pks), k * 4)
    return [(view.row_of_pk[p], sim) for p, sim in hits
            if sim >= threshold and p in view.row_of_pk]


def _repeat(view: HistoryView, scope: str, row: int, sim: float, *, t: float, now: datetime,
            maturity: float) -> Repeat:
    rec = view.frame.iloc[row]
    posted = view.history.time[row]
    return Repeat(
        scope=scope, post_id=str(rec["post_id"]), account=str(rec["account"]),
        posted_at=rec["posted_at"].to_pydatetime(), days_before=(t - posted) / DAY,
        similarity=float(sim), metric=view.metric,
        value=target_value(_metrics(rec), view.metric),
        mature=bool(posted <= now.timestamp() - maturity), text=str(rec["text"]),
        planned_is_now=abs(t - now.timestamp()) < DAY,
    )


def _metrics(rec: Any) -> dict[str, float | None]:
    return {m: (None if rec[m] != rec[m] else float(rec[m])) for m in METRIC_COLUMNS}


# Telling options apart -------------------------------------------------------


def heavy_overlap(a: tuple[float, float], b: tuple[float, float]) -> bool:
    """Whether intervals ``a`` and ``b`` (low, high) overlap by at least half
    of the narrower one's width (two equal points count as overlapping)."""
    overlap = min(a[1], b[1]) - max(a[0], b[0])
    narrower = min(a[1] - a[0], b[1] - b[0])
    return overlap >= 0.5 * narrower


def like_best(logs: Sequence[tuple[float, float, float]]) -> tuple[int, list[bool]]:
    """Index of the highest median (first on ties) and, per option, whether
    its interval overlaps the best one's heavily (the best itself: True)."""
    best = int(np.argmax([m for _, m, _ in logs]))
    lo_b, _, hi_b = logs[best]
    return best, [heavy_overlap((lo_b, hi_b), (lo, hi)) for lo, _, hi in logs]


def _ranks(medians: Sequence[float]) -> list[int]:
    order = sorted(range(len(medians)), key=lambda i: (-medians[i], i))
    ranks = [0] * len(medians)
    for r, i in enumerate(order, start=1):
        ranks[i] = r
    return ranks


# Best hours ------------------------------------------------------------------


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
        raise InputError(f"cannot read day {text!r}", where=where, field=where, value=text,
                         hint="use an ISO 8601 date such as 2026-12-03") from None


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
    like_best: bool = False

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
            "local_hour": f"{self.local:%H:%M}", "utc_offset": self.offset,
            "low": self.low, "median": self.median, "high": self.high,
            "rank": self.rank, "like_best": self.like_best, "warnings": self.warnings,
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
    share_like_best: float  # of the other slots, the share about equal to the best
    told_apart: bool
    summary: str
    top: int = 3
    warnings: list[str] = field(default_factory=list)
    # issue 10: share of the timing component's bootstrap refits in which
    # the best slot stays best (None: the model has no timing component).
    best_stays_best: float | None = None

    @property
    def best(self) -> list[Slot]:
        """The slots about equal to the best, highest median first, at most ``top``."""
        group = [s for s in self.slots if s.like_best]
        return sorted(group, key=lambda s: s.rank)[: self.top]

    def to_dict(self) -> dict[str, Any]:
        from .forecasting import CAUTION

        return {
            "account": self.account, "timezone": self.timezone, "metric": self.metric,
            "coverage": self.coverage, "backtested_coverage": self.backtested_coverage,
            "model_version": self.model_version, "mode": self.mode,
            "first_day": self.first_day.isoformat(), "last_day": self.last_day.isoformat(),
            "n_slots": len(self.slots), "told_apart": self.told_apart,
            "share_like_best": round(self.share_like_best, 3), "summary": self.summary,
            "best_stays_best": self.best_stays_best,
            "rule": RULE, "best": [s.to_dict() for s in self.best],
            "slots": [s.to_dict() for s in self.slots], "warnings": self.warnings,
            "caution": CAUTION,
        }


def best_hours(ws: Workspace, text: str, *, account: str, day: date | None = None,
               week: bool = False, metric: str = "impressions", coverage: float = 0.8,
               top: int = 3, now: datetime | None = None) -> HoursReport:
    """Forecast ``text`` at every hour of ``day`` (default: tomorrow in the
    account's zone), or of the seven days from ``day`` with ``week``.

    The draft is embedded once and every slot goes through one
    ``Forecaster.forecast`` call.
    """
    from .forecasting import Draft

    if not 1 <= top <= 24 * WEEK_DAYS:
        raise InputError(f"top must be between 1 and {24 * WEEK_DAYS}, got {top}", field="top")
    tz = ws.store.account(account).timezone
    now = now or now_utc()
    first = day or (now.astimezone(zone(tz)).date() + timedelta(days=1))
    # datetime holds years 1-9999 (Python docs); keep a week and any UTC offset inside it.
    if not FIRST_DAY <= first <= LAST_DAY:
        raise InputError(f"day {first.isoformat()} is outside {FIRST_DAY} to {LAST_DAY}",
                         field="day", value=first.isoformat())
    days = [first + timedelta(days=i) for i in range(WEEK_DAYS if week else 1)]
    instants = [t for d in days for t in day_slots(d, tz)]
    vec = ws.embed_drafts([text])
    drafts = [Draft(text=text, account=account, planned_at=t) for t in instants]
    found = ws.forecaster.forecast(drafts, metric=metric, coverage=coverage, now=now,
                                   vectors=np.repeat(vec, len(drafts), axis=0))
    z = zone(tz)
    slots = [Slot(planned_at=t, local=t.astimezone(z), low=f.low, median=f.median, high=f.high,
                  log=f.log, warnings=f.warnings) for t, f in zip(instants, found, strict=True)]
    best, flags = like_best([s.log for s in slots])
    for s, r, flag in zip(slots, _ranks([s.log[1] for s in slots]), flags, strict=True):
        s.rank, s.like_best = r, flag
    others = len(slots) - 1
    share = (sum(flags) - 1) / others if others else 1.0
    report = HoursReport(
        account=account, timezone=tz, metric=metric, coverage=coverage,
        backtested_coverage=found[0].backtested_coverage, model_version=found[0].model_version,
        mode="week" if week else "day", first_day=days[0], last_day=days[-1], slots=slots,
        best_index=best, share_like_best=share, told_apart=share <= 0.5, summary="", top=top,
        warnings=list(slots[best].warnings),
    )
    report.best_stays_best = best_hour_confidence(  # issue 10
        ws.forecaster.model(metric).quantiles, local_hours=[s.local.hour + s.local.minute / 60
                                                            for s in slots],
        weekdays=[s.local.weekday() for s in slots],
        account=ws.forecaster.view(metric).account_codes[account], medians=[s.log[1] for s in slots])
    report.summary = _hours_summary(report)
    return report


def _hours_summary(r: HoursReport) -> str:
    week = r.mode == "week"
    group = sorted((s for s in r.slots if s.like_best), key=lambda s: s.rank)
    lower = [s for s in r.slots if not s.like_best]
    n = len(r.slots)
    if not lower:
        return (f"These hours cannot be told apart with this history: every hour's "
                f"{r.coverage:.0%} interval overlaps the best hour's by at least half its width.")
    weaker = _spans(lower, week)
    if not r.told_apart:
        return (f"These hours cannot be told apart with this history: {len(group) - 1} of the "
                f"other {n - 1} hours have intervals overlapping the best hour's by at least half. "
                f"Only {weaker} look clearly weaker.")
    if len(group) == 1:
        return f"Best hour: {group[0].label(with_day=week)}; every other hour looks clearly weaker."
    shown = ", ".join(s.label(with_day=week) for s in group[: r.top])
    more = f" and {len(group) - r.top} more" if len(group) > r.top else ""
    return (f"Best hours: {shown}{more}, about equal to each other (not ranked among "
            f"themselves); the other {len(lower)} hours look clearly weaker.")


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
    parts = [f"{r[0].local:%H:%M}" if len(r) == 1 else f"{r[0].local:%H:%M}\u2013{r[-1].local:%H:%M}"
             for r in runs]
    return ", ".join(parts)


def _commonest_hours(slots: list[Slot]) -> str:
    counts: dict[int, int] = {}
    for s in slots:
        counts[s.local.hour] = counts.get(s.local.hour, 0) + 1
    hours = sorted(h for h, c in counts.items() if c >= max(counts.values()) / 2)
    return ", ".join(f"{h:02d}:00" for h in hours[:8]) + (" ..." if len(hours) > 8 else "")


# Variants --------------------------------------------------------------------


@dataclass(slots=True)
class Variant:
    index: int  # 1-based, in the order given
    text: str
    forecast: Forecast
    rank: int = 0
    like_best: bool = False
    only_here: list[str] = field(default_factory=list)

    def to_dict(self) -> dict[str, Any]:
        f = self.forecast
        return {
            "index": self.index, "text": self.text, "rank": self.rank,
            "low": f.low, "median": f.median, "high": f.high, "like_best": self.like_best,
            "precedents": [p["post_id"] for p in f.precedents],
            "only_here": self.only_here, "warnings": f.warnings,
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
        from .forecasting import CAUTION

        return {
            "account": self.account, "planned_at": self.planned_at.isoformat(),
            "local_time": self.local_time, "metric": self.metric, "coverage": self.coverage,
            "backtested_coverage": self.backtested_coverage, "model_version": self.model_version,
            "told_apart": self.told_apart, "summary": self.summary, "rule": RULE,
            "variants": [v.to_dict() for v in self.variants], "caution": CAUTION,
        }


def compare_variants(ws: Workspace, texts: Sequence[str], *, account: str,
                     planned_at: datetime | None = None, metric: str = "impressions",
                     coverage: float = 0.8, now: datetime | None = None) -> VariantsReport:
    """Forecast each phrasing at the same time, rank by median, and list the
    precedents each has that none of the others has."""
    from .forecasting import Draft

    if len(texts) < 2:
        raise InputError(f"give at least two variants to compare, got {len(texts)}",
                         field="texts")
    if len(texts) > MAX_VARIANTS:
        raise LimitExceeded(f"{len(texts)} variants; the limit is {MAX_VARIANTS}",
                            limit="max_variants", maximum=MAX_VARIANTS, field="texts")
    for i, t in enumerate(texts, start=1):
        try:
            ws.check_draft(t)
        except SoundingError as exc:  # say which variant is at fault
            exc.where = exc.where or f"variant {i}"
            raise
    now = now or now_utc()
    planned = planned_at or now
    drafts = [Draft(text=t, account=account, planned_at=planned, draft_id=str(i))
              for i, t in enumerate(texts, start=1)]
    found = ws.forecaster.forecast(drafts, metric=metric, coverage=coverage, now=now)
    variants = [Variant(index=i, text=t, forecast=f)
                for i, (t, f) in enumerate(zip(texts, found, strict=True), start=1)]
    ids = [[p["post_id"] for p in v.forecast.precedents] for v in variants]
    for i, v in enumerate(variants):
        elsewhere = set().union(*(set(x) for j, x in enumerate(ids) if j != i))
        v.only_here = [p for p in ids[i] if p not in elsewhere]
    best, flags = like_best([v.forecast.log for v in variants])
    for v, r, flag in zip(variants, _ranks([v.forecast.log[1] for v in variants]), flags,
                          strict=True):
        v.rank, v.like_best = r, flag
    variants.sort(key=lambda v: v.rank)
    told_apart = sum(flags) == 1
    equal = [v for v in variants if v.like_best]
    lower = [v for v in variants if not v.like_best]
    names = lambda vs: ", ".join(f"#{v.index}" for v in vs)  # noqa: E731
    if not lower:
        summary = ("These variants cannot be told apart with this history: their intervals "
                   "overlap the best one's by at least half.")
    elif told_apart:
        summary = f"Variant #{equal[0].index} looks ahead of the others ({names(lower)})."
    else:
        summary = (f"Variants {names(equal)} cannot be told apart with this history; "
                   f"{names(lower)} look{'s' if len(lower) == 1 else ''} clearly weaker.")
    f0 = found[0]
    return VariantsReport(
        account=account, planned_at=planned, local_time=f0.local_time, metric=metric,
        coverage=coverage, backtested_coverage=f0.backtested_coverage,
        model_version=f0.model_version, variants=variants, told_apart=told_apart,
        summary=summary,
    )
