"""Writing import batches: posts, metric snapshots and vectors in one transaction."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from datetime import datetime

import numpy as np
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from models import features as F
from models.metrics import METRIC_COLUMNS
from service.clock import now_utc, to_naive_utc
from service.storage import keywords, labels
from service.storage.engine import StoreBase
from service.storage.labels import Asked
from service.storage.tables import (
    Account,
    ApproximateValue,
    FollowerCount,
    Post,
    Snapshot,
    Vector,
)


@dataclass(slots=True)
class PostRow:
    """One validated post of an import, ready to be written."""

    account: str
    post_id: str
    text: str
    posted_at: datetime  # aware UTC
    metrics: dict[str, int | None]
    has_media: bool | None
    vector_key: str
    line: int = 0
    approximate: frozenset[str] = frozenset()  # metrics known only roughly (1.2K)
    #: The labels asked for (service.storage.labels), None for an empty cell;
    #: None when the import asked for no labels, so stored ones stay as they are.
    labels: Asked | None = None
    followers: int | None = None  # the account's follower count at the post's time


@dataclass(slots=True)
class BatchResult:
    added: int = 0
    updated: int = 0
    unchanged: int = 0
    changed_pks: list[int] = field(default_factory=list)


class PostWrites(StoreBase):
    """A store's import writes."""

    def write_batch(
        self, rows: Sequence[PostRow], vectors: dict[str, np.ndarray], *, model_id: str
    ) -> BatchResult:
        """Write one import batch in one transaction.

        A post already stored (same account and post_id) gets a new
        snapshot only if a metric changed; its text, time and media flag
        are updated in place. Metrics a row leaves blank carry over from
        the previous snapshot.
        """
        res = BatchResult()
        now = to_naive_utc(now_utc())
        with self.session() as s:
            # Look-ups for the whole batch up front (vectors, accounts, stored
            # posts and their latest snapshots): two queries and a flush per
            # row made imports ORM-bound, about 2 ms a row.
            keys = list(vectors)
            have: set[str] = set()
            for i in range(0, len(keys), 900):  # SQLite's variable limit
                have.update(s.scalars(select(Vector.key).where(Vector.key.in_(keys[i : i + 900]))))
            for vkey, vec in vectors.items():
                if vkey not in have:
                    v = np.ascontiguousarray(vec, dtype=np.float32)
                    s.add(Vector(key=vkey, model_id=model_id, dim=int(v.shape[0]), data=v.tobytes()))
                    have.add(vkey)
            accounts = {
                a.handle: a
                for a in s.scalars(select(Account).where(Account.handle.in_({r.account for r in rows})))
            }
            for handle in dict.fromkeys(r.account for r in rows):
                if handle not in accounts:
                    accounts[handle] = Account(handle=handle, timezone="UTC", created_at=now)
                    s.add(accounts[handle])
            s.flush()
            stored: dict[tuple[int, str], Post] = {}
            latest: dict[tuple[int, str], Snapshot] = {}
            acc_ids = [a.id for a in accounts.values()]
            pids = list(dict.fromkeys(r.post_id for r in rows))
            for i in range(0, len(pids), 900):
                for got in s.scalars(
                    select(Post).where(Post.account_id.in_(acc_ids), Post.post_id.in_(pids[i : i + 900]))
                ):
                    stored[(got.account_id, got.post_id)] = got
            by_pk = {post.id: k for k, post in stored.items()}
            pks = list(by_pk)
            for i in range(0, len(pks), 900):
                newest = (
                    select(func.max(Snapshot.id))
                    .where(Snapshot.post_pk.in_(pks[i : i + 900]))
                    .group_by(Snapshot.post_pk)
                )
                for snap in s.scalars(select(Snapshot).where(Snapshot.id.in_(newest))):
                    latest[by_pk[snap.post_pk]] = snap
            new_posts: list[Post] = []
            names = {n for r in rows if r.labels is not None for n in r.labels}
            labels_before = labels.held(s, pks, names)
            relabelled: list[tuple[Post, Asked]] = []
            flags_of = self._rough_lookup(s, latest.values())
            rough: dict[int, tuple[Snapshot, frozenset[str]]] = {}

            def rough_of(snap: Snapshot | None) -> frozenset[str]:
                return (
                    flags_of.get(snap.id, frozenset())
                    if snap is not None and snap.id
                    else (rough[id(snap)][1] if snap is not None and id(snap) in rough else frozenset())
                )

            for r in rows:
                key = (accounts[r.account].id, r.post_id)
                post = stored.get(key)
                posted = to_naive_utc(r.posted_at)
                if post is None:
                    post = Post(
                        account_id=key[0],
                        post_id=r.post_id,
                        text=r.text,
                        vector_key=r.vector_key,
                        posted_at=posted,
                        has_link=F.has_link(r.text),
                        has_media=bool(r.has_media),
                        imported_at=now,
                        updated_at=now,
                    )
                    snap = Snapshot(post=post, captured_at=now, **r.metrics)
                    s.add_all([post, snap])
                    rough[id(snap)] = (snap, r.approximate)
                    stored[key], latest[key] = post, snap
                    new_posts.append(post)
                    if r.labels is not None:
                        relabelled.append((post, r.labels))
                    res.added += 1
                    continue
                changed = False
                if post.text != r.text or post.vector_key != r.vector_key:
                    post.text, post.vector_key = r.text, r.vector_key
                    post.has_link = F.has_link(r.text)
                    if post.id is not None:  # a post new in this batch is listed below
                        res.changed_pks.append(post.id)
                    changed = True
                if post.posted_at != posted:
                    post.posted_at = posted
                    changed = True
                if r.has_media is not None and post.has_media != r.has_media:
                    post.has_media = r.has_media
                    changed = True
                last = latest.get(key)
                merged = {
                    m: (r.metrics.get(m) if r.metrics.get(m) is not None else getattr(last, m, None))
                    for m in METRIC_COLUMNS
                }
                # Values carried over keep their flag; values given now bring theirs.
                was = rough_of(last)
                flags = frozenset(m for m in was if r.metrics.get(m) is None) | r.approximate
                if last is None or any(getattr(last, m) != merged[m] for m in METRIC_COLUMNS) or flags != was:
                    latest[key] = Snapshot(post=post, captured_at=now, **merged)
                    s.add(latest[key])
                    rough[id(latest[key])] = (latest[key], flags)
                    changed = True
                if r.labels is not None and labels_before.get(post.id, {}) != labels.given(r.labels):
                    relabelled.append((post, r.labels))
                    changed = True
                if changed:
                    post.updated_at = now
                    res.updated += 1
                else:
                    res.unchanged += 1
            s.flush()
            s.add_all(
                ApproximateValue(snapshot_id=snap.id, metric=m)
                for snap, flags in rough.values()
                for m in sorted(flags)
            )
            labels.replace(s, [(post.id, asked) for post, asked in relabelled])
            res.changed_pks.extend(post.id for post in new_posts)
            self._write_followers(
                s, {(accounts[r.account].id, to_naive_utc(r.posted_at)): r.followers for r in rows}
            )
            reworded = set(res.changed_pks)
            keywords.add(s.connection(), [(p.id, p.text) for p in stored.values() if p.id in reworded])
        return res

    @staticmethod
    def _write_followers(s: Session, given: dict[tuple[int, datetime], int | None]) -> None:
        """A row's follower count, as its account's count from the post's time on."""
        wanted = {k: n for k, n in given.items() if n is not None}
        if not wanted:
            return
        times = list({t for _, t in wanted})
        for i in range(0, len(times), 900):
            for fc in s.scalars(
                select(FollowerCount).where(
                    FollowerCount.account_id.in_({a for a, _ in wanted}),
                    FollowerCount.since.in_(times[i : i + 900]),
                )
            ):
                n = wanted.pop((fc.account_id, fc.since), None)
                if n is not None and fc.followers != n:
                    fc.followers = n
        s.add_all(FollowerCount(account_id=a, since=t, followers=n) for (a, t), n in wanted.items())

    @staticmethod
    def _rough_lookup(s: Session, snapshots: Iterable[Snapshot]) -> dict[int, frozenset[str]]:
        """Approximate metrics of the given snapshots, by snapshot id."""
        ids = [snap.id for snap in snapshots]
        found: dict[int, set[str]] = {}
        for i in range(0, len(ids), 900):
            for sid, metric in s.execute(
                select(ApproximateValue.snapshot_id, ApproximateValue.metric).where(
                    ApproximateValue.snapshot_id.in_(ids[i : i + 900])
                )
            ):
                found.setdefault(sid, set()).add(metric)
        return {k: frozenset(v) for k, v in found.items()}

    def approximate_metrics(self, pks: Sequence[int]) -> dict[int, frozenset[str]]:
        """Metrics known only roughly in each post's current snapshot, by post row id
        (posts with none are left out)."""
        out: dict[int, frozenset[str]] = {}
        with self.session() as s:
            for i in range(0, len(pks), 900):
                newest = (
                    select(func.max(Snapshot.id))
                    .where(Snapshot.post_pk.in_(pks[i : i + 900]))
                    .group_by(Snapshot.post_pk)
                )
                snaps = list(s.scalars(select(Snapshot).where(Snapshot.id.in_(newest))))
                flags = self._rough_lookup(s, snaps)
                out.update({snap.post_pk: flags[snap.id] for snap in snaps if snap.id in flags})
        return out

    # Reading posts ----------------------------------------------------------
