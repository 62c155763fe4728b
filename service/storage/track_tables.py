"""The track record's tables behind methods: forecasts given, explicit draft ids,
matches and their scores, and the adaptive calibration state per level.

Every statement the track record runs is here, with the caches that keep a
forecast to one counter read: what a forecast shows of the track record changes
only when the history or the scoring moves (``Store.stamps``).
"""

from __future__ import annotations

import threading
from collections.abc import Iterator, Sequence
from contextlib import AbstractContextManager, contextmanager
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Protocol

from sqlalchemy import CursorResult, Integer, cast, delete, func, insert, select
from sqlalchemy.orm import Session
from sqlalchemy.sql.elements import ColumnElement

from service.storage.tables import (
    Account,
    CalibrationState,
    ForecastGiven,
    ForecastMatch,
    Post,
    PostDraftLink,
)


class Sessions(Protocol):
    """What the track record's tables need of a store (service.storage.store.Store)."""

    def session(self) -> AbstractContextManager[Session]: ...

    def stamp(self) -> int: ...

    def stamps(self) -> tuple[int, int]: ...


#: Scored forecasts behind the staleness check of live coverage.
RECENT_SCORED = 50


def level_key(coverage: float) -> str:
    """A coverage level as the track record files it (two decimals)."""
    return f"{round(float(coverage), 2):g}"


def _at_level(coverage: float) -> ColumnElement[bool]:
    """Forecasts given at this coverage level (two decimals), as a portable
    range rather than round(), which PostgreSQL lacks for double precision."""
    c = round(float(coverage), 2)
    return ForecastGiven.coverage.between(c - 0.005, c + 0.005)


@dataclass(frozen=True, slots=True)
class LevelState:
    """The adaptive calibration state of one metric at one coverage level."""

    alpha_t: float
    gamma: float
    real_updates: int
    pseudo_updates: int
    pseudo_until: datetime | None


@dataclass(frozen=True, slots=True)
class ScoredFacts:
    """What a forecast shows of the track record at one level: the adaptive
    state, how many scored forecasts held, and the last scored ones
    (held?, stated coverage), newest post first."""

    state: LevelState | None
    scored: int
    held: int
    recent: list[tuple[bool, float]]


class TrackTables:
    """The track record's reads and writes on one store."""

    def __init__(self, store: Sessions) -> None:
        self.store = store
        self._lock = threading.Lock()
        # (metric, level) -> (the store's counters when read, the facts)
        self._scored: dict[tuple[str, str], tuple[tuple[int, int], ScoredFacts]] = {}
        self._ids: tuple[int, dict[str, int]] | None = None

    # What a forecast reads ------------------------------------------------

    def scored(self, metric: str, coverage: float) -> ScoredFacts:
        """The facts of one level, read again only when a counter moved."""
        key = (metric, level_key(coverage))
        stamps = self.store.stamps()  # before the reads: a write meanwhile shows as a newer stamp
        with self._lock:
            hit = self._scored.get(key)
        if hit is not None and hit[0] == stamps:
            return hit[1]
        with self.store.session() as s:
            row = s.get(CalibrationState, key)
            state = None if row is None else _state_of(row)
            n, k = s.execute(
                select(func.count(ForecastMatch.id), func.sum(cast(ForecastMatch.inside, Integer)))
                .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
                .where(ForecastGiven.metric == metric, ForecastMatch.inside.is_not(None), _at_level(coverage))
            ).one()
            recent = s.execute(
                select(ForecastMatch.inside, ForecastGiven.coverage)
                .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
                .join(Post, Post.id == ForecastMatch.post_pk)
                .where(ForecastGiven.metric == metric, ForecastMatch.inside.is_not(None), _at_level(coverage))
                .order_by(Post.posted_at.desc())
                .limit(RECENT_SCORED)
            ).all()
        facts = ScoredFacts(
            state=state,
            scored=int(n or 0),
            held=int(k or 0),
            recent=[(bool(r[0]), float(r[1])) for r in recent],
        )
        with self._lock:
            self._scored[key] = (stamps, facts)
        return facts

    def account_ids(self, handles: set[str]) -> dict[str, int]:
        """Accounts' row ids, read again only when the history's counter moved."""
        stamp = self.store.stamp()
        with self._lock:
            hit = self._ids
        if hit is not None and hit[0] == stamp and handles <= hit[1].keys():
            return hit[1]
        with self.store.session() as s:
            ids = {h: int(i) for h, i in s.execute(select(Account.handle, Account.id))}
        with self._lock:
            self._ids = (stamp, ids)
        return ids

    # Recording ------------------------------------------------------------

    def add_forecasts(self, rows: Sequence[dict[str, Any]]) -> None:
        """Record forecasts as given (columns of ``forecasts_given``)."""
        if not rows:
            return
        # One executemany, without mapped objects: a served forecast records
        # itself on every request.
        with self.store.session() as s:
            s.execute(insert(ForecastGiven), list(rows))

    # Matching -------------------------------------------------------------

    def link_drafts(self, pairs: dict[tuple[str, str], str]) -> int:
        """Store explicit draft ids by (account, post_id); rows not stored are skipped."""
        n = 0
        with self.store.session() as s:
            for (acc, pid), draft in pairs.items():
                pk = s.scalar(
                    select(Post.id)
                    .join(Account, Account.id == Post.account_id)
                    .where(Account.handle == acc, Post.post_id == pid)
                )
                if pk is None:  # a rejected row
                    continue
                s.merge(PostDraftLink(post_pk=pk, draft_id=draft))
                n += 1
        return n

    def open_forecasts(self) -> list[Any]:
        """Forecasts not yet matched to a post."""
        with self.store.session() as s:
            return list(
                s.execute(
                    select(
                        ForecastGiven.id,
                        ForecastGiven.account_id,
                        ForecastGiven.draft_id,
                        ForecastGiven.given_at,
                        ForecastGiven.planned_at,
                        ForecastGiven.metric,
                        ForecastGiven.text,
                    ).where(ForecastGiven.id.not_in(select(ForecastMatch.forecast_id)))
                ).all()
            )

    def candidate_posts(self, accounts: set[int], after: datetime) -> list[Any]:
        """Posts of these accounts after a time, with their explicit draft id, in time order."""
        with self.store.session() as s:
            return list(
                s.execute(
                    select(Post.id, Post.account_id, Post.posted_at, Post.vector_key, PostDraftLink.draft_id)
                    .outerjoin(PostDraftLink, PostDraftLink.post_pk == Post.id)
                    .where(Post.account_id.in_(accounts), Post.posted_at > after)
                    .order_by(Post.posted_at, Post.id)
                ).all()
            )

    def matched_pairs(self) -> set[tuple[int, str]]:
        """(post row id, metric) of every match made."""
        with self.store.session() as s:
            return {
                (int(m[0]), str(m[1])) for m in s.execute(select(ForecastMatch.post_pk, ForecastMatch.metric))
            }

    def add_matches(self, rows: Sequence[dict[str, Any]]) -> None:
        with self.store.session() as s:
            s.add_all([ForecastMatch(**r) for r in rows])

    # Scoring --------------------------------------------------------------

    def matches_posted_by(self, cutoff: datetime) -> list[tuple[int, int, str, float | None, float, float]]:
        """(match id, post row id, metric, outcome, band low, band high) of the
        matches whose post went out by ``cutoff`` (naive UTC)."""
        with self.store.session() as s:
            rows = s.execute(
                select(
                    ForecastMatch.id,
                    ForecastMatch.post_pk,
                    ForecastMatch.metric,
                    ForecastMatch.outcome,
                    ForecastGiven.low_log,
                    ForecastGiven.high_log,
                )
                .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
                .join(Post, Post.id == ForecastMatch.post_pk)
                .where(Post.posted_at <= cutoff)
            ).all()
        return [(int(r[0]), int(r[1]), str(r[2]), r[3], float(r[4]), float(r[5])) for r in rows]

    def write_scores(self, scores: Sequence[tuple[int, float, float, bool, datetime]]) -> None:
        """(match id, outcome, outcome on the log scale, inside?, scored at)."""
        if not scores:
            return
        with self.store.session() as s:
            for mid, outcome, outcome_log, inside, at in scores:
                m = s.get(ForecastMatch, mid)
                if m is None:  # forgotten meanwhile
                    continue
                m.outcome, m.outcome_log, m.inside, m.scored_at = outcome, outcome_log, inside, at

    # Adaptation -----------------------------------------------------------

    def levels_used(self, metric: str) -> set[str]:
        """Coverage levels forecast or adapted so far for ``metric``."""
        with self.store.session() as s:
            levels = {
                level_key(c)
                for c in s.scalars(
                    select(ForecastGiven.coverage).where(ForecastGiven.metric == metric).distinct()
                )
            }
            levels |= set(s.scalars(select(CalibrationState.level).where(CalibrationState.metric == metric)))
        return levels

    def metrics_in_use(self) -> set[str]:
        with self.store.session() as s:
            metrics = set(s.scalars(select(ForecastGiven.metric).distinct()))
            metrics |= set(s.scalars(select(CalibrationState.metric).distinct()))
        return metrics

    @contextmanager
    def adapting(
        self, metric: str, coverage: float, *, gamma: float, now: datetime
    ) -> Iterator[tuple[CalibrationState, list[ForecastMatch]]]:
        """In one transaction: the level's state (made at alpha when new) and its
        scored matches not yet fed to it, in posting order. Changes to both are
        written when the block ends."""
        key = level_key(coverage)
        with self.store.session() as s:
            state = s.get(CalibrationState, (metric, key))
            if state is None:
                state = CalibrationState(
                    metric=metric,
                    level=key,
                    alpha_t=1.0 - coverage,
                    gamma=gamma,
                    real_updates=0,
                    pseudo_updates=0,
                    updated_at=now,
                )
                s.add(state)
            real = list(
                s.execute(
                    select(ForecastMatch)
                    .join(ForecastGiven, ForecastGiven.id == ForecastMatch.forecast_id)
                    .join(Post, Post.id == ForecastMatch.post_pk)
                    .where(
                        ForecastGiven.metric == metric,
                        ForecastMatch.inside.is_not(None),
                        ForecastMatch.adapted.is_(False),
                        _at_level(coverage),
                    )
                    .order_by(Post.posted_at, Post.id)
                ).scalars()
            )
            yield state, real

    def add_pseudo_outcomes(
        self, metric: str, coverage: float, *, alpha_t: float, updates: int, until: datetime
    ) -> None:
        with self.store.session() as s:
            state = s.get(CalibrationState, (metric, level_key(coverage)))
            if state is None:
                return
            state.alpha_t = alpha_t
            state.pseudo_updates += updates
            state.pseudo_until = until

    def matched_posts(self, metric: str) -> set[int]:
        """Row ids of posts matched to a forecast of ``metric``."""
        with self.store.session() as s:
            return set(s.scalars(select(ForecastMatch.post_pk).where(ForecastMatch.metric == metric)))

    def reset(self, metric: str | None = None) -> int:
        """Forget what the adaptive calibration learnt (all metrics, or one)."""
        with self.store.session() as s:
            q = delete(CalibrationState)
            if metric is not None:
                q = q.where(CalibrationState.metric == metric)
            done: CursorResult[Any] = s.execute(q)  # type: ignore[assignment]
            return int(done.rowcount or 0)

    # Report ---------------------------------------------------------------

    def given(
        self, metric: str, *, since: datetime | None = None, account: str | None = None
    ) -> list[tuple[ForecastGiven, str, ForecastMatch | None, str | None, datetime | None]]:
        """Forecasts given of ``metric`` (since a naive UTC time, of one
        account), with their match and post, in the order given."""
        q = (
            select(ForecastGiven, Account.handle, ForecastMatch, Post.post_id, Post.posted_at)
            .join(Account, Account.id == ForecastGiven.account_id)
            .outerjoin(ForecastMatch, ForecastMatch.forecast_id == ForecastGiven.id)
            .outerjoin(Post, Post.id == ForecastMatch.post_pk)
            .where(ForecastGiven.metric == metric)
            .order_by(ForecastGiven.given_at, ForecastGiven.id)
        )
        if since is not None:
            q = q.where(ForecastGiven.given_at >= since)
        if account is not None:
            q = q.where(Account.handle == account)
        with self.store.session() as s:
            return [(f, str(h), m, pid, posted) for f, h, m, pid, posted in s.execute(q)]

    def levels(self, metric: str) -> list[tuple[str, LevelState]]:
        """The adaptive state of every level of ``metric``, by level."""
        with self.store.session() as s:
            return [
                (c.level, _state_of(c))
                for c in s.scalars(
                    select(CalibrationState)
                    .where(CalibrationState.metric == metric)
                    .order_by(CalibrationState.level)
                )
            ]


def _state_of(row: CalibrationState) -> LevelState:
    return LevelState(
        alpha_t=float(row.alpha_t),
        gamma=float(row.gamma),
        real_updates=int(row.real_updates),
        pseudo_updates=int(row.pseudo_updates),
        pseudo_until=row.pseudo_until,
    )
