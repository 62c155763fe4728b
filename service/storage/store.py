"""The history store: accounts, posts, metric snapshots and vectors.

A library first: the CLI and the API call these methods and nothing below
them. Every write happens in one transaction, so a failure or a kill never
leaves half a row; the SQLite file runs in WAL mode so readers (forecasts)
go on while an import writes.
"""

from __future__ import annotations

import os
import sqlite3
from collections.abc import Callable
from functools import cached_property
from pathlib import Path

from sqlalchemy import delete, func, select
from sqlalchemy.engine import make_url

from models.errors import InputError, NotFound, StoreError
from service.clock import now_utc
from service.storage import keywords, labels
from service.storage.handles import unknown_account
from service.storage.labels import PostLabels
from service.storage.post_reads import PostReads
from service.storage.post_writes import PostWrites
from service.storage.tables import (
    Account,
    FollowerCount,
    Post,
    Snapshot,
    Vector,
)
from service.storage.track_tables import TrackTables


class Store(PostWrites, PostReads, PostLabels):
    """Access to one store, addressed by a SQLAlchemy URL (SQLite or
    PostgreSQL).

    Every write goes through ``session()``: a transaction that wrote
    anything also bumps the store's change stamp before it commits, so
    other processes sharing the store (service replicas, the CLI) see one
    cheap number move (``stamp()``).
    """

    @cached_property
    def track(self) -> TrackTables:
        """The track record's tables (service.storage.track_tables), with their caches."""
        return TrackTables(self)

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

    # Forgetting -----------------------------------------------------------

    def forget(
        self,
        *,
        account: str | None = None,
        post_id: str | None = None,
        also: Callable[..., object] | None = None,
    ) -> list[int]:
        """Delete a post (``post_id``, with ``account`` when ids repeat across
        accounts) or a whole account, with snapshots and now-unused vectors.
        ``also(session, rows, account=...)`` runs in the same transaction
        first, for copies kept elsewhere in the store (service.storage.track_forget);
        ``rows`` are (row id, vector key, post id, handle, account row id),
        ``account`` (row id, handle) when a whole account goes.
        Returns the deleted post row ids, for the index."""
        if account is None and post_id is None:
            raise InputError("say which account or post to forget")
        with self.session() as s:
            q = select(Post.id, Post.vector_key, Post.post_id, Account.handle, Account.id).join(
                Account, Account.id == Post.account_id
            )
            acc = None
            if account is not None:
                acc = s.scalar(select(Account).where(Account.handle == account))
                if acc is None:
                    raise unknown_account(account, s.scalars(select(Account.handle)).all())
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
            if also is not None:
                whole = (acc.id, acc.handle) if acc is not None and post_id is None else None
                also(s, [(int(r[0]), r[1], r[2], r[3], int(r[4])) for r in rows], account=whole)
            for i in range(0, len(pks), 900):
                chunk = pks[i : i + 900]
                s.execute(delete(Snapshot).where(Snapshot.post_pk.in_(chunk)))
                labels.remove(s, chunk)
                keywords.remove(s.connection(), chunk)
                s.execute(delete(Post).where(Post.id.in_(chunk)))
            still_used = set(s.scalars(select(Post.vector_key).where(Post.vector_key.in_(list(keys)))))
            unused = list(keys - still_used)
            for i in range(0, len(unused), 900):
                s.execute(delete(Vector).where(Vector.key.in_(unused[i : i + 900])))
            if account is not None and post_id is None:
                assert acc is not None
                s.execute(delete(FollowerCount).where(FollowerCount.account_id == acc.id))
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
