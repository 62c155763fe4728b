"""A connection to one store: transactions that move the change counters,
the counters themselves, and a whole request pinned to one reading of them.

SQLite runs in WAL mode, so readers (forecasts) go on while an import writes.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from pathlib import Path
from typing import Any

from sqlalchemy import create_engine, event, select, update
from sqlalchemy.engine import Engine, make_url
from sqlalchemy.exc import IntegrityError, OperationalError, SQLAlchemyError
from sqlalchemy.orm import ORMExecuteState, Session, sessionmaker

from models.errors import StoreError
from service.storage.migrations import check_current, upgrade
from service.storage.tables import (
    HISTORY_STAMP,
    SCORING_STAMP,
    STAMP_OF,
    ChangeStamp,
)


def _sqlite_pragmas(dbapi_conn: Any, _record: Any) -> None:
    if isinstance(dbapi_conn, sqlite3.Connection):
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute("PRAGMA foreign_keys=ON")
        # Deleted rows are overwritten, not left in free pages: a forgotten
        # post's text must not stay readable in the file (sqlite.org/pragma.html).
        cur.execute("PRAGMA secure_delete=ON")
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


class StoreBase:
    """A connection to one store, addressed by a SQLAlchemy URL (SQLite or
    PostgreSQL): its sessions and change counters (``Store`` adds the rest).

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
            # Only a writer outside the write lock (service.storage.locking) gets here.
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
