"""The history store: accounts, posts, metric snapshots and vectors.

A library first: the CLI and the API call these methods and nothing below
them. Every write happens in one transaction, so a failure or a kill never
leaves half a row; the SQLite file runs in WAL mode so readers (forecasts)
go on while an import writes.
"""

from __future__ import annotations

import os
import re
import sqlite3
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy import create_engine, delete, event, func, select, update
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import IntegrityError, OperationalError, SQLAlchemyError
from sqlalchemy.orm import ORMExecuteState, Session, sessionmaker

from models.errors import InputError, NotFound, StoreError
from models.index import fingerprint
from models.metrics import METRIC_COLUMNS
from service.migrations import check_current, upgrade
from service.tables import (
    HISTORY_STAMP,
    SCORING_STAMP,
    STAMP_OF,
    Account,
    ApproximateValue,
    ChangeStamp,
    Post,
    Snapshot,
    Vector,
)
from service.timeparse import as_utc, now_utc, to_naive_utc, zone

_LINK = re.compile(r"(?i)\b(?:https?://|www\.)\S+")


def has_link(text: str) -> bool:
    """Whether a text carries a link (a URL with a scheme, or www.)."""
    return bool(_LINK.search(text))


class AccountInfo(BaseModel):
    """An account of the store (``GET /v1/accounts``, ``sounding accounts``)."""

    model_config = ConfigDict(frozen=True)

    handle: str
    display_name: str | None
    timezone: str = Field(description="IANA zone its local times are read in")
    posts: int = 0


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


@dataclass(slots=True)
class BatchResult:
    added: int = 0
    updated: int = 0
    unchanged: int = 0
    changed_pks: list[int] = field(default_factory=list)


def _sqlite_pragmas(dbapi_conn: Any, _record: Any) -> None:
    if isinstance(dbapi_conn, sqlite3.Connection):
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute("PRAGMA synchronous=NORMAL")
        cur.execute("PRAGMA busy_timeout=30000")
        cur.close()


def _mark(session: Session, table: str) -> None:
    """Note which change counter this transaction must move (tables.STAMP_OF)."""
    counter = STAMP_OF.get(table, HISTORY_STAMP)
    session.info.setdefault("wrote", set())
    if counter is not None:
        session.info["wrote"].add(counter)


def _note_write(state: ORMExecuteState) -> None:
    # INSERT/UPDATE/DELETE statements run through a session (Core or ORM).
    if state.is_insert or state.is_update or state.is_delete:
        table = getattr(state.statement, "table", None)
        _mark(state.session, getattr(table, "name", ""))


def _note_flush(session: Session, _ctx: Any, _instances: Any) -> None:
    # Objects added, changed or deleted through the ORM.
    for obj in (*session.new, *session.dirty, *session.deleted):
        _mark(session, getattr(type(obj), "__tablename__", ""))


_FRAME_CHUNK = 100_000  # rows typed at a time by Store.posts_frame


def _posts_part(rows: Sequence[Any], columns: list[str]) -> pd.DataFrame:
    """One chunk of ``Store.posts_frame``'s rows as a typed frame."""
    df = pd.DataFrame(rows, columns=columns)
    df["posted_at"] = pd.to_datetime(df["posted_at"], utc=True)
    for m in METRIC_COLUMNS:
        df[m] = pd.to_numeric(df[m], errors="coerce").astype("float64")
    df["pk"] = df["pk"].astype("int64")
    df["has_link"] = df["has_link"].astype(bool)
    df["has_media"] = df["has_media"].astype(bool)
    return df


class Store:
    """Access to one store, addressed by a SQLAlchemy URL (SQLite or
    PostgreSQL).

    Every write goes through ``session()``: a transaction that wrote
    anything also bumps the store's change stamp before it commits, so
    other processes sharing the store (service replicas, the CLI) see one
    cheap number move (``stamp()``).
    """

    def __init__(self, *, url: str, read_only: bool = False) -> None:
        self.url = url
        # Write transactions this object committed: with stamp(), it tells
        # a process whether changes came only from itself.
        self.own_writes = 0
        self._counts: tuple[tuple[int, int], dict[str, int]] | None = None  # ((counter, own), counts)
        self.read_only = read_only
        if read_only and url.startswith("sqlite:///"):
            # A WAL database on a read-only file system cannot make its
            # shared-memory file; "immutable" lets SQLite read it without one.
            url = f"sqlite:///file:{url.removeprefix('sqlite:///')}?mode=ro&immutable=1&uri=true"
        elif url.startswith("sqlite:///"):
            Path(url.removeprefix("sqlite:///")).parent.mkdir(parents=True, exist_ok=True)
        try:
            self.engine: Engine = create_engine(
                url,
                connect_args={"check_same_thread": False, "timeout": 30} if url.startswith("sqlite") else {},
                # A shared server may restart or drop idle connections.
                pool_pre_ping=not url.startswith("sqlite"),
            )
            if url.startswith("sqlite"):
                event.listen(self.engine, "connect", _sqlite_pragmas)
            if read_only:
                check_current(self.engine, url=self.safe_url)
            else:
                upgrade(self.engine, url=self.safe_url)
        except SQLAlchemyError as exc:
            raise StoreError(f"cannot open the store at {self.safe_url}: {exc}") from None
        self._sessions = sessionmaker(self.engine, expire_on_commit=False)
        self._stamps_q = select(ChangeStamp.id, ChangeStamp.counter)
        self._pinned: ContextVar[tuple[int, int] | None] = ContextVar(f"stamps-{id(self)}", default=None)
        event.listen(self._sessions, "do_orm_execute", _note_write)
        event.listen(self._sessions, "before_flush", _note_flush)

    @property
    def safe_url(self) -> str:
        """The URL with any password hidden, for messages."""
        try:
            return make_url(self.url).render_as_string(hide_password=True)
        except SQLAlchemyError:
            return "the configured database"

    @property
    def backend(self) -> str:
        """'sqlite' or 'postgresql'."""
        return self.engine.dialect.name

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A transaction: committed on success, rolled back on any error."""
        s = self._sessions()
        try:
            yield s
            s.flush()
            moved = sorted(s.info.get("wrote") or ())
            if moved:
                s.execute(
                    update(ChangeStamp)
                    .where(ChangeStamp.id.in_(moved))
                    .values(counter=ChangeStamp.counter + 1)
                )
            s.commit()
            if HISTORY_STAMP in moved:
                self.own_writes += 1
        except OperationalError as exc:
            s.rollback()
            raise StoreError(f"the store is unavailable: {exc.orig}") from None
        except IntegrityError as exc:
            # Only a writer outside the write lock (service.locking) gets here.
            s.rollback()
            raise StoreError(
                f"another writer changed the same rows at the same time ({exc.orig})",
                hint="run it again: rows already stored are not added twice",
            ) from None
        except BaseException:
            s.rollback()
            raise
        finally:
            s.close()

    def close(self) -> None:
        self.engine.dispose()

    # Accounts -------------------------------------------------------------

    def set_account(
        self, handle: str, *, display_name: str | None = None, timezone: str | None = None
    ) -> AccountInfo:
        """Create or update an account. A new account starts in UTC."""
        handle = _check_handle(handle)
        if timezone is not None:
            zone(timezone)  # refuse unknown names before touching the store
        with self.session() as s:
            acc = s.scalar(select(Account).where(Account.handle == handle))
            if acc is None:
                acc = Account(handle=handle, timezone=timezone or "UTC", created_at=_now())
                s.add(acc)
            if display_name is not None:
                acc.display_name = display_name
            if timezone is not None:
                acc.timezone = timezone
            s.flush()
            n = s.scalar(select(func.count(Post.id)).where(Post.account_id == acc.id)) or 0
            return AccountInfo(
                handle=acc.handle, display_name=acc.display_name, timezone=acc.timezone, posts=int(n)
            )

    def account(self, handle: str) -> AccountInfo:
        with self.session() as s:
            acc = s.scalar(select(Account).where(Account.handle == handle))
            if acc is None:
                raise NotFound(f"unknown account {handle!r}", field="account", value=handle)
            n = s.scalar(select(func.count(Post.id)).where(Post.account_id == acc.id)) or 0
            return AccountInfo(
                handle=acc.handle, display_name=acc.display_name, timezone=acc.timezone, posts=int(n)
            )

    def accounts(self) -> list[AccountInfo]:
        with self.session() as s:
            rows = s.execute(
                select(Account, func.count(Post.id))
                .outerjoin(Post, Post.account_id == Account.id)
                .group_by(Account.id)
                .order_by(Account.handle)
            ).all()
            return [
                AccountInfo(handle=a.handle, display_name=a.display_name, timezone=a.timezone, posts=int(n))
                for a, n in rows
            ]

    def counts(self) -> dict[str, int]:
        """Rows of accounts, posts, snapshots and vectors. Kept per history
        counter, which every write to these tables moves: counting them is
        12 ms at 100,000 posts, and the health check asks on every call.
        This object's own writes count too, so a write inside ``pinned()``
        is never hidden by the counter read before it."""
        stamp = (self.stamp(), self.own_writes)
        known = self._counts
        if known is not None and known[0] == stamp:
            return dict(known[1])
        with self.session() as s:
            got = {
                "accounts": s.scalar(select(func.count(Account.id))) or 0,
                "posts": s.scalar(select(func.count(Post.id))) or 0,
                "snapshots": s.scalar(select(func.count(Snapshot.id))) or 0,
                "vectors": s.scalar(select(func.count()).select_from(Vector)) or 0,
            }
        self._counts = (stamp, got)
        return dict(got)

    # Vectors --------------------------------------------------------------

    def missing_vectors(self, keys: Iterable[str]) -> set[str]:
        wanted = set(keys)
        found: set[str] = set()
        with self.session() as s:
            ks = list(wanted)
            for i in range(0, len(ks), 900):  # SQLite's variable limit
                found.update(s.scalars(select(Vector.key).where(Vector.key.in_(ks[i : i + 900]))))
        return wanted - found

    def vectors(self, keys: Sequence[str]) -> np.ndarray:
        """Vectors for ``keys`` in the given order.

        Rows are written into one array as they are read, so a million
        vectors (1.5 GB) are held once, not once as fetched bytes and again
        when stacked."""
        uniq = list(dict.fromkeys(keys))
        at = {k: i for i, k in enumerate(uniq)}
        result: np.ndarray | None = None
        got = np.zeros(len(uniq), dtype=bool)
        with self.session() as s:
            if not uniq:
                # No rows; their width is that of the stored vectors (0 in an empty store).
                width = s.execute(select(Vector.dim).limit(1)).scalar()
                return np.zeros((0, int(width or 0)), dtype=np.float32)
            for i in range(0, len(uniq), 900):
                for k, dim, data in s.execute(
                    select(Vector.key, Vector.dim, Vector.data).where(Vector.key.in_(uniq[i : i + 900]))
                ):
                    if result is None:
                        result = np.empty((len(uniq), dim), dtype=np.float32)
                    j = at[k]
                    result[j] = np.frombuffer(data, dtype=np.float32, count=dim)
                    got[j] = True
        if result is None or not got.all():
            raise StoreError(f"{len(uniq) - int(got.sum())} vectors are missing from the store")
        if len(uniq) == len(keys):
            return result
        return result[[at[k] for k in keys]]

    def index_pairs(self) -> list[tuple[int, str]]:
        """(post row id, vector key) of every post: what the index must hold."""
        with self.session() as s:
            return [(int(a), b) for a, b in s.execute(select(Post.id, Post.vector_key))]

    def index_data(self) -> tuple[np.ndarray, np.ndarray, str]:
        """Post row ids, their vectors and the fingerprint, for a rebuild."""
        pairs = self.index_pairs()
        ids = np.array([p for p, _ in pairs], dtype=np.int64)
        vecs = self.vectors([k for _, k in pairs])
        return ids, vecs, fingerprint(pairs)

    def fingerprint(self) -> str:
        return fingerprint(self.index_pairs())

    def stamp(self) -> int:
        """The post history's change counter: it moves with every committed
        write to the history (import batches, snapshots, forget, account
        changes), by this process or another one. One one-row read."""
        return self.stamps()[0]

    def stamps(self) -> tuple[int, int]:
        """(history, scoring) change counters in one read: the scoring one
        moves when the track record scores forecasts or adapts. Inside
        :meth:`pinned`, the counters read when it began."""
        held = self._pinned.get()
        if held is not None:
            return held
        with self.engine.connect() as conn:
            got = dict(conn.execute(self._stamps_q).all())
        return int(got.get(HISTORY_STAMP) or 0), int(got.get(SCORING_STAMP) or 0)

    @contextmanager
    def pinned(self) -> Iterator[tuple[int, int]]:
        """Read the change counters once for a whole read-only request (a
        forecast checks the index, the history view, the account cache and
        the track record against them): one query instead of one per cache.
        Writes inside still move the counters; later reads see them."""
        held = self._pinned.get()
        if held is not None:  # already pinned by the caller: one read per request
            yield held
            return
        now = self.stamps()
        token = self._pinned.set(now)
        try:
            yield now
        finally:
            self._pinned.reset(token)

    # Import ---------------------------------------------------------------

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
        now = _now()
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
                        has_link=has_link(r.text),
                        has_media=bool(r.has_media),
                        imported_at=now,
                        updated_at=now,
                    )
                    snap = Snapshot(post=post, captured_at=now, **r.metrics)
                    s.add_all([post, snap])
                    rough[id(snap)] = (snap, r.approximate)
                    stored[key], latest[key] = post, snap
                    new_posts.append(post)
                    res.added += 1
                    continue
                changed = False
                if post.text != r.text or post.vector_key != r.vector_key:
                    post.text, post.vector_key = r.text, r.vector_key
                    post.has_link = has_link(r.text)
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
            res.changed_pks.extend(post.id for post in new_posts)
        return res

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

    def posts_frame(self, *, account: str | None = None) -> pd.DataFrame:
        """Every post with its current metrics, one row a post, oldest first.

        Columns: pk, account, timezone, post_id, text, posted_at (aware UTC),
        has_link, has_media, vector_key and one column per metric.
        """
        latest = (
            select(Snapshot.post_pk, func.max(Snapshot.id).label("sid")).group_by(Snapshot.post_pk).subquery()
        )
        q = (
            select(
                Post.id.label("pk"),
                Account.handle.label("account"),
                Account.timezone,
                Post.post_id,
                Post.text,
                Post.posted_at,
                Post.has_link,
                Post.has_media,
                Post.vector_key,
                *[getattr(Snapshot, m) for m in METRIC_COLUMNS],
            )
            .join(Account, Account.id == Post.account_id)
            .outerjoin(latest, latest.c.post_pk == Post.id)
            .outerjoin(Snapshot, Snapshot.id == latest.c.sid)
            .order_by(Post.posted_at, Post.id)
        )
        if account is not None:
            self.account(account)
            q = q.where(Account.handle == account)
        # Rows are read and typed a chunk at a time: a million rows fetched at
        # once as Python objects hold about 2 GB for a frame of 360 MB.
        with self.session() as s:
            result = s.execute(q.execution_options(yield_per=_FRAME_CHUNK))
            columns = list(result.keys())  # the labels of the select above
            parts = [_posts_part(chunk, columns) for chunk in result.partitions()]
        if not parts:
            return _posts_part([], columns)
        if len(parts) == 1:
            return parts[0]
        df = pd.concat(parts, ignore_index=True)
        # concat keeps each chunk's strings as a piece of their own, and every
        # later row look-up visits all pieces (10 ms a column at a million
        # rows, on each forecast's precedents): one piece per column.
        # (Arrow-backed strings only, through the Arrow interchange protocol;
        # strings held as Python objects have no pieces.)
        for c in df.columns:
            to_arrow = getattr(df[c].array, "__arrow_array__", None)
            if isinstance(df[c].dtype, pd.StringDtype) and to_arrow is not None:
                df[c] = pd.array(to_arrow().combine_chunks(), dtype=df[c].dtype)
        return df

    def posts_by_pk(self, pks: Sequence[int]) -> dict[int, dict[str, Any]]:
        """Posts with current metrics for the given row ids (precedent details)."""
        if not len(pks):
            return {}
        latest = (
            select(Snapshot.post_pk, func.max(Snapshot.id).label("sid"))
            .where(Snapshot.post_pk.in_(list(pks)))
            .group_by(Snapshot.post_pk)
            .subquery()
        )
        q = (
            select(Post, Account.handle, Snapshot)
            .join(Account, Account.id == Post.account_id)
            .outerjoin(latest, latest.c.post_pk == Post.id)
            .outerjoin(Snapshot, Snapshot.id == latest.c.sid)
            .where(Post.id.in_(list(pks)))
        )
        out: dict[int, dict[str, Any]] = {}
        with self.session() as s:
            for post, handle, snap in s.execute(q):
                out[post.id] = {
                    "pk": post.id,
                    "post_id": post.post_id,
                    "account": handle,
                    "text": post.text,
                    "posted_at": as_utc(post.posted_at),
                    "has_link": post.has_link,
                    "has_media": post.has_media,
                    "metrics": {m: getattr(snap, m) if snap else None for m in METRIC_COLUMNS},
                }
        return out

    def pks_where(
        self,
        *,
        account: str | None = None,
        since: datetime | None = None,
        until: datetime | None = None,
    ) -> np.ndarray:
        """Row ids of posts of one account and/or inside a date range."""
        q = select(Post.id)
        if account is not None:
            self.account(account)
            q = q.join(Account, Account.id == Post.account_id).where(Account.handle == account)
        if since is not None:
            q = q.where(Post.posted_at >= to_naive_utc(since))
        if until is not None:
            q = q.where(Post.posted_at <= to_naive_utc(until))
        with self.session() as s:
            return np.array(list(s.scalars(q)), dtype=np.int64)

    # Forgetting -----------------------------------------------------------

    def forget(self, *, account: str | None = None, post_id: str | None = None) -> list[int]:
        """Delete a post (``post_id``, with ``account`` when ids repeat across
        accounts) or a whole account, with snapshots and now-unused vectors.
        Returns the deleted post row ids, for the index."""
        if account is None and post_id is None:
            raise InputError("say which account or post to forget")
        with self.session() as s:
            q = select(Post.id, Post.vector_key).join(Account, Account.id == Post.account_id)
            if account is not None:
                acc = s.scalar(select(Account).where(Account.handle == account))
                if acc is None:
                    raise NotFound(f"unknown account {account!r}", field="account", value=account)
                q = q.where(Account.id == acc.id)
            if post_id is not None:
                q = q.where(Post.post_id == post_id)
            rows = s.execute(q).all()
            if post_id is not None:
                if not rows:
                    raise NotFound(f"no post {post_id!r}", field="post_id", value=post_id)
                if len(rows) > 1:
                    raise InputError(
                        f"post id {post_id!r} exists in several accounts; say which with --account",
                        field="account",
                    )
            pks = [int(r[0]) for r in rows]
            keys = {r[1] for r in rows}
            for i in range(0, len(pks), 900):
                chunk = pks[i : i + 900]
                s.execute(delete(Snapshot).where(Snapshot.post_pk.in_(chunk)))
                s.execute(delete(Post).where(Post.id.in_(chunk)))
            still_used = set(s.scalars(select(Post.vector_key).where(Post.vector_key.in_(list(keys)))))
            unused = list(keys - still_used)
            for i in range(0, len(unused), 900):
                s.execute(delete(Vector).where(Vector.key.in_(unused[i : i + 900])))
            if account is not None and post_id is None:
                s.execute(delete(Account).where(Account.handle == account))
        return pks

    def backup(self, dest: str | Path) -> Path:
        """A consistent copy of a SQLite store while others use it
        (SQLite's online backup API), checked before it gets its name.

        ``dest`` is a new file, or a directory (one that exists, or any path
        ending in "/", created if missing) that receives
        ``sounding-backup-<UTC time>.db``. The copy is written under a
        temporary name beside it and renamed only once it is complete and
        passes SQLite's integrity check, so a killed backup never leaves a
        plausible-looking file.
        """
        if self.backend == "postgresql":
            u = make_url(self.url)
            raise StoreError(
                f"this store is the PostgreSQL database {u.database!r} on {u.host or 'localhost'}; "
                "`sounding backup` copies SQLite files only",
                hint=f"back it up with pg_dump -Fc -f sounding.dump {pg_dump_target(self.url)} "
                "(restore into an empty database with pg_restore -d URL sounding.dump)",
            )
        if not self.url.startswith("sqlite:///"):
            raise StoreError("backup is available for SQLite stores only")
        text = str(dest)
        dest = Path(dest)
        if text.endswith(("/", os.sep)) or dest.is_dir():
            dest = dest / f"sounding-backup-{now_utc():%Y%m%dT%H%M%S%fZ}.db"
        if dest.exists():
            raise InputError(f"{dest} already exists; choose a new file name", where=str(dest))
        try:
            dest.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise StoreError(f"cannot create {dest.parent}: {exc.strerror}") from None
        tmp = dest.with_name(f".tmp-{dest.name}-{os.getpid()}")
        try:
            src = sqlite3.connect(self.url.removeprefix("sqlite:///"))
            dst = sqlite3.connect(str(tmp))
            try:
                with dst:
                    src.backup(dst)
                # One self-contained file: no -wal/-shm companions beside the copy.
                dst.execute("PRAGMA journal_mode=DELETE")
                check = dst.execute("PRAGMA integrity_check").fetchone()[0]
            finally:
                dst.close()
                src.close()
            if check != "ok":
                raise StoreError(f"the copy failed its integrity check: {check}")
            os.replace(tmp, dest)
        except (OSError, sqlite3.Error) as exc:
            raise StoreError(
                f"the backup to {dest} failed ({getattr(exc, 'strerror', None) or exc}); nothing was written",
                hint="check the free space and permissions there",
            ) from None
        finally:
            tmp.unlink(missing_ok=True)
        return dest


def pg_dump_target(url: str) -> str:
    """A libpq connection URL for pg_dump from a SQLAlchemy one (driver
    name dropped, password hidden)."""
    u = make_url(url).set(drivername="postgresql")
    return u.render_as_string(hide_password=True)


def _check_handle(handle: str) -> str:
    h = (handle or "").strip()
    if not h or len(h) > 200 or any(c.isspace() for c in h):
        raise InputError(
            f"account handle {handle!r} must be 1-200 characters without spaces",
            field="account",
            value=handle,
        )
    return h


def _now() -> datetime:
    return to_naive_utc(now_utc())
