"""Schema versions of the store, and the steps between them.

The store records its version in the one-row ``schema_version`` table; a
store made before versions existed (accounts, posts, snapshots and vectors
only) counts as version 0. Opening a store brings it to ``SCHEMA_VERSION``
in one transaction:

- an empty database gets every table and the current version;
- an older store runs each step from its version up, in order;
- a newer store (made by a later sounding) or a database holding only some
  of sounding's tables is refused with a message saying what to do.

Adding a table needs no step (``create_all`` adds missing tables on every
open). Adding a column, an index or changing data does: bump
``SCHEMA_VERSION`` and add the step to ``STEPS``, written with portable
SQLAlchemy operations so it runs on SQLite and PostgreSQL alike, e.g.

    def _v1_to_v2(conn):
        add_column(conn, "snapshots", Snapshot.__table__.c.approximate)
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from sqlalchemy import (
    Column,
    Connection,
    Engine,
    Table,
    insert,
    inspect,
    select,
    text,
    update,
)
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.exc import IntegrityError, OperationalError, ProgrammingError
from sqlalchemy.schema import CreateColumn

from models.errors import StoreError
from service.clock import now_utc, to_naive_utc
from service.storage import keywords
from service.storage.tables import (
    HISTORY_STAMP,
    SCORING_STAMP,
    Account,
    Base,
    ChangeStamp,
    FollowerCount,
    SchemaVersion,
)

SCHEMA_VERSION = 4

# The tables of version 0, the layout before versions: a database holding
# all of them and no schema_version table is such a store.
V0_TABLES = frozenset({"accounts", "posts", "snapshots", "vectors"})

# Any key for PostgreSQL's advisory lock: two processes opening one new
# database at once (replicas starting together) migrate it one at a time.
_PG_LOCK_KEY = 0x50_756E_6469  # arbitrary, fixed


_VERSION_T: Table = Base.metadata.tables[SchemaVersion.__tablename__]
_STAMP_T: Table = Base.metadata.tables[ChangeStamp.__tablename__]


def _v0_to_v1(conn: Connection) -> None:
    """Version 1 adds schema_version and the change stamp (store_stamp)."""
    Base.metadata.create_all(conn, tables=[_VERSION_T, _STAMP_T])


def add_column(conn: Connection, table: str, column: Column[Any]) -> None:
    """Add ``column`` (as declared in tables.py) to an existing table, unless
    it is there already: the usual body of a step. A NOT NULL column needs a
    server_default so existing rows get a value."""
    if column.name in {c["name"] for c in inspect(conn).get_columns(table)}:
        return
    ddl = CreateColumn(column).compile(dialect=conn.dialect)
    conn.execute(text(f"ALTER TABLE {conn.dialect.identifier_preparer.quote(table)} ADD COLUMN {ddl}"))


def _v1_to_v2(conn: Connection) -> None:
    """Version 2 adds the keyword index of the posts' words (service.storage.keywords)."""
    keywords.rebuild(conn)


def _v2_to_v3(conn: Connection) -> None:
    """Version 3 adds the team's own labels of posts (post_labels, kept with --label)."""
    Base.metadata.create_all(conn, tables=[Base.metadata.tables["post_labels"]])


def _v3_to_v4(conn: Connection) -> None:
    """Version 4 adds reference accounts (accounts.reference) and the accounts'
    follower counts over time (follower_counts)."""
    add_column(conn, "accounts", Base.metadata.tables[Account.__tablename__].c.reference)
    Base.metadata.create_all(conn, tables=[Base.metadata.tables[FollowerCount.__tablename__]])


# STEPS[v] takes a store from version v - 1 to version v.
STEPS: dict[int, Callable[[Connection], None]] = {
    1: _v0_to_v1,
    2: _v1_to_v2,
    3: _v2_to_v3,
    4: _v3_to_v4,
}


def stored_version(conn: Connection) -> int | None:
    """The store's schema version: None for an empty database, 0 for a
    store from before versions."""
    names = set(inspect(conn).get_table_names())
    if SchemaVersion.__tablename__ in names:
        v = conn.scalar(select(SchemaVersion.version).where(SchemaVersion.id == 1))
        if v is not None:
            return int(v)
    ours = names & V0_TABLES
    if not ours:
        return None
    if ours != V0_TABLES:
        raise StoreError(
            "the database holds some of sounding's tables but not all "
            f"(found {', '.join(sorted(ours))}; missing {', '.join(sorted(V0_TABLES - ours))})",
            hint="point SOUNDING_DATABASE_URL (or SOUNDING_HOME) at an empty database or at "
            "a sounding store, or restore the store from a backup",
        )
    return 0


def upgrade(engine: Engine, *, url: str = "") -> int:
    """Bring the store to SCHEMA_VERSION; returns the version it had (None
    counts as SCHEMA_VERSION: a new store)."""
    where = url or str(engine.url)
    for attempt in range(3):
        try:
            return _upgrade_once(engine)
        except (IntegrityError, OperationalError, ProgrammingError) as exc:
            # Another process created the tables between our look and our
            # create (SQLite has no advisory lock): look again.
            if attempt == 2:
                raise StoreError(f"cannot prepare the store at {where}: {exc.orig}") from None
    raise AssertionError("unreachable")


def check_current(engine: Engine, *, url: str = "") -> None:
    """For a store that may only be read: refuse it unless it is already at
    SCHEMA_VERSION with every table, since it cannot be brought there."""
    with engine.connect() as conn:
        found = stored_version(conn)
        missing = set(Base.metadata.tables) - set(inspect(conn).get_table_names())
    if found != SCHEMA_VERSION or missing:
        raise StoreError(
            f"the read-only store at {url or engine.url} needs an upgrade this sounding cannot "
            f"write (schema version {found}, this sounding uses {SCHEMA_VERSION})",
            hint="open it once from a writable data directory (any command) to upgrade it",
        )


def _upgrade_once(engine: Engine) -> int:
    with engine.begin() as conn:
        if conn.dialect.name == "postgresql":
            conn.exec_driver_sql(f"SELECT pg_advisory_xact_lock({_PG_LOCK_KEY})")
        found = stored_version(conn)
        if found is not None and found > SCHEMA_VERSION:
            raise StoreError(
                f"this store has schema version {found}, newer than this sounding knows "
                f"(up to {SCHEMA_VERSION})",
                hint="upgrade sounding (pip install -U sounding) on every machine that uses "
                "this store; an older sounding never writes to a newer store",
            )
        for v in range((found if found is not None else SCHEMA_VERSION) + 1, SCHEMA_VERSION + 1):
            STEPS[v](conn)
        # Tables added since (a new table needs no step) and, for a new
        # database, every table.
        Base.metadata.create_all(conn)
        keywords.create(conn)  # not a SQLAlchemy table: FTS5 or a tsvector with its GIN index
        if found is None or found < SCHEMA_VERSION:
            now = to_naive_utc(now_utc())
            insert_missing(conn, _VERSION_T, {"id": 1, "version": SCHEMA_VERSION, "migrated_at": now})
            conn.execute(
                update(SchemaVersion)
                .where(SchemaVersion.id == 1)
                .values(version=SCHEMA_VERSION, migrated_at=now)
            )
        for row in (HISTORY_STAMP, SCORING_STAMP):
            insert_missing(conn, _STAMP_T, {"id": row, "counter": 0})
        return SCHEMA_VERSION if found is None else found


def insert_missing(conn: Connection, table: Table, values: dict[str, Any]) -> None:
    """Insert a row unless one with the same key exists, on either backend
    (each dialect's ON CONFLICT DO NOTHING; plain INSERT elsewhere)."""
    name = conn.dialect.name
    if name == "postgresql":
        conn.execute(postgresql.insert(table).values(**values).on_conflict_do_nothing())
    elif name == "sqlite":
        conn.execute(sqlite.insert(table).values(**values).on_conflict_do_nothing())
    elif (
        conn.execute(
            select(table).filter_by(**{c.key: values[c.key] for c in table.primary_key.columns})
        ).first()
        is None
    ):
        conn.execute(insert(table).values(**values))
