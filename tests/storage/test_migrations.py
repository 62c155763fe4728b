"""Schema versions and the change stamp, on SQLite and PostgreSQL.

An older store is the layout sounding wrote before versions existed; it is
made here with that layout's own DDL (as SQLAlchemy emitted it for the four
tables then), not with our current tables, so the test keeps meaning the
same when tables.py grows.
"""

from __future__ import annotations

import threading
from datetime import UTC, datetime

import numpy as np
import pytest
from sqlalchemy import Boolean, Column, String, create_engine, false, inspect, text
from support.pgsupport import raw

from models.errors import StoreError
from service.storage.migrations import SCHEMA_VERSION, STEPS, add_column
from service.storage.post_writes import PostRow
from service.storage.store import Store

V0_SQLITE = [
    """CREATE TABLE accounts (id INTEGER NOT NULL, handle VARCHAR(200) NOT NULL,
        display_name VARCHAR(400), timezone VARCHAR(64) NOT NULL, created_at DATETIME NOT NULL,
        PRIMARY KEY (id), UNIQUE (handle))""",
    """CREATE TABLE vectors ("key" VARCHAR(64) NOT NULL, model_id VARCHAR(200) NOT NULL,
        dim INTEGER NOT NULL, data BLOB NOT NULL, PRIMARY KEY ("key"))""",
    """CREATE TABLE posts (id INTEGER NOT NULL, account_id INTEGER NOT NULL,
        post_id VARCHAR(200) NOT NULL, text TEXT NOT NULL, vector_key VARCHAR(64) NOT NULL,
        posted_at DATETIME NOT NULL, has_link BOOLEAN NOT NULL, has_media BOOLEAN NOT NULL,
        imported_at DATETIME NOT NULL, updated_at DATETIME NOT NULL, PRIMARY KEY (id),
        CONSTRAINT uq_post_per_account UNIQUE (account_id, post_id),
        FOREIGN KEY(account_id) REFERENCES accounts (id) ON DELETE CASCADE)""",
    "CREATE INDEX ix_posts_updated_at ON posts (updated_at)",
    "CREATE INDEX ix_posts_posted_at ON posts (posted_at)",
    "CREATE INDEX ix_posts_vector_key ON posts (vector_key)",
    """CREATE TABLE snapshots (id INTEGER NOT NULL, post_pk INTEGER NOT NULL,
        captured_at DATETIME NOT NULL, impressions INTEGER, engagements INTEGER, likes INTEGER,
        reposts INTEGER, replies INTEGER, link_clicks INTEGER, profile_clicks INTEGER,
        PRIMARY KEY (id), FOREIGN KEY(post_pk) REFERENCES posts (id) ON DELETE CASCADE)""",
    "CREATE INDEX ix_snapshots_post ON snapshots (post_pk, id)",
]


def v0_ddl(url: str) -> list[str]:
    if url.startswith("sqlite"):
        return V0_SQLITE
    # The same layout in PostgreSQL's words: SERIAL ids, TIMESTAMP, BYTEA.
    return [
        s.replace("id INTEGER NOT NULL,", "id SERIAL NOT NULL,", 1)
        .replace("DATETIME", "TIMESTAMP WITHOUT TIME ZONE")
        .replace("BLOB", "BYTEA")
        for s in V0_SQLITE
    ]


VEC = np.full(384, 1 / np.sqrt(384), dtype=np.float32).tobytes()


def make_v0_store(url: str) -> None:
    """A store as sounding wrote it before versions: one account, one post
    with one snapshot, and its vector."""
    eng = create_engine(url)
    with eng.begin() as c:
        for stmt in v0_ddl(url):
            c.execute(text(stmt))
        t = datetime(2026, 3, 1, 9, 30)
        c.execute(
            text(
                "INSERT INTO accounts (handle, timezone, created_at) "
                "VALUES ('loomhaven', 'Europe/London', :t)"
            ),
            {"t": t},
        )
        c.execute(
            text("INSERT INTO vectors (key, model_id, dim, data) VALUES ('k1', 'm', 384, :d)"), {"d": VEC}
        )
        c.execute(
            text(
                "INSERT INTO posts (account_id, post_id, text, vector_key, posted_at, has_link, "
                "has_media, imported_at, updated_at) VALUES (1, 'p1', 'Snowdrops by the lake', "
                "'k1', :t, false, true, :t, :t)"
            ),
            {"t": t},
        )
        c.execute(
            text("INSERT INTO snapshots (post_pk, captured_at, impressions) VALUES (1, :t, 1234)"), {"t": t}
        )
    eng.dispose()


def test_new_store_starts_at_the_current_version(database_url: str) -> None:
    store = Store(url=database_url)
    try:
        assert raw(database_url, "SELECT id, version FROM schema_version") == [(1, SCHEMA_VERSION)]
        # Row 1 counts history writes, row 2 the track record's scoring.
        assert raw(database_url, "SELECT id, counter FROM store_stamp ORDER BY id") == [(1, 0), (2, 0)]
        assert store.stamp() == 0 and store.stamps() == (0, 0)
    finally:
        store.close()


def test_an_unversioned_store_is_migrated_and_keeps_its_rows(database_url: str) -> None:
    make_v0_store(database_url)
    store = Store(url=database_url)
    try:
        assert raw(database_url, "SELECT version FROM schema_version") == [(SCHEMA_VERSION,)]
        df = store.posts_frame()
        assert list(df["post_id"]) == ["p1"]
        assert df["impressions"].tolist() == [1234.0]
        assert bool(df["has_media"].iloc[0]) is True
        assert store.account("loomhaven").timezone == "Europe/London"
        assert store.vectors(["k1"]).tobytes() == VEC
        # New rows get new ids after the old ones (PostgreSQL's sequences kept up).
        s0 = store.stamp()
        store.set_account("loomhaven_lab", timezone="UTC")
        assert raw(database_url, "SELECT id FROM accounts ORDER BY id") == [(1,), (2,)]
        assert store.stamp() == s0 + 1
    finally:
        store.close()
    # Opening it again changes nothing.
    Store(url=database_url).close()
    assert raw(database_url, "SELECT version FROM schema_version") == [(SCHEMA_VERSION,)]
    assert raw(database_url, "SELECT COUNT(*) FROM posts") == [(1,)]


def test_a_newer_store_is_refused_with_what_to_do(database_url: str) -> None:
    Store(url=database_url).close()
    eng = create_engine(database_url)
    with eng.begin() as c:
        c.execute(text("UPDATE schema_version SET version = :v"), {"v": SCHEMA_VERSION + 5})
    eng.dispose()
    with pytest.raises(StoreError, match=r"newer than this sounding.*upgrade sounding"):
        Store(url=database_url)
    # Refusing wrote nothing.
    assert raw(database_url, "SELECT version FROM schema_version") == [(SCHEMA_VERSION + 5,)]


def test_a_partial_layout_is_refused(database_url: str) -> None:
    eng = create_engine(database_url)
    with eng.begin() as c:
        for stmt in v0_ddl(database_url)[:1]:  # accounts only
            c.execute(text(stmt))
    eng.dispose()
    with pytest.raises(StoreError, match=r"missing posts, snapshots, vectors.*empty database"):
        Store(url=database_url)


def test_other_tables_in_the_database_are_left_alone(database_url: str) -> None:
    eng = create_engine(database_url)
    with eng.begin() as c:
        c.execute(text("CREATE TABLE garden_rota (name VARCHAR(40))"))
        c.execute(text("INSERT INTO garden_rota VALUES ('Ada')"))
    eng.dispose()
    Store(url=database_url).close()
    assert raw(database_url, "SELECT name FROM garden_rota") == [("Ada",)]
    assert raw(database_url, "SELECT version FROM schema_version") == [(SCHEMA_VERSION,)]


def test_stamp_counts_every_write_from_every_process(database_url: str) -> None:
    """Two Store objects stand for two processes; their concurrent writes
    each move the shared counter once: no increment is lost."""
    one, two = Store(url=database_url), Store(url=database_url)
    try:
        start = two.stamp()
        n = 15

        def writer(store: Store, name: str) -> None:
            for i in range(n):
                store.set_account(f"{name}{i}", timezone="UTC")

        threads = [threading.Thread(target=writer, args=(s, w)) for s, w in ((one, "a"), (two, "b"))]
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        assert one.stamp() == two.stamp() == start + 2 * n
        assert one.own_writes == two.own_writes == n
        # Reads never move it.
        one.accounts()
        two.counts()
        assert one.stamp() == start + 2 * n
    finally:
        one.close()
        two.close()


def test_backup_on_postgres_says_to_use_pg_dump(database_url: str, tmp_path) -> None:
    store = Store(url=database_url)
    try:
        if store.backend == "sqlite":
            assert store.backup(tmp_path / "copy.db").is_file()
            return
        with pytest.raises(StoreError, match=r"pg_dump -Fc .*postgresql://") as info:
            store.backup(tmp_path / "copy.db")
        assert "+psycopg" not in str(info.value)  # pg_dump takes a libpq URL
        assert not (tmp_path / "copy.db").exists()
    finally:
        store.close()


def test_add_column_step_helper(database_url: str) -> None:
    """The helper a future step uses: adds a column to stored rows, once."""
    make_v0_store(database_url)
    eng = create_engine(database_url)
    try:
        with eng.begin() as c:
            add_column(c, "snapshots", Column("approximate", Boolean, nullable=False, server_default=false()))
            add_column(c, "snapshots", Column("note", String(40)))
            add_column(c, "snapshots", Column("note", String(40)))  # already there: nothing
    finally:
        eng.dispose()
    assert raw(database_url, "SELECT impressions, approximate, note FROM snapshots") == [(1234, False, None)]


def make_v2_store(url: str) -> None:
    """A store at version 2: the unversioned layout above taken through the
    steps of versions 1 and 2 only, before labels existed."""
    make_v0_store(url)
    eng = create_engine(url)
    try:
        with eng.begin() as c:
            STEPS[1](c)
            STEPS[2](c)
            c.execute(
                text("INSERT INTO schema_version (id, version, migrated_at) VALUES (1, 2, :t)"),
                {"t": datetime(2026, 3, 2)},
            )
            c.execute(text("INSERT INTO store_stamp (id, counter) VALUES (1, 4), (2, 0)"))
    finally:
        eng.dispose()


def test_a_version_2_store_gains_labels_and_keeps_its_rows(database_url: str) -> None:
    make_v2_store(database_url)
    eng = create_engine(database_url)
    try:
        assert "post_labels" not in inspect(eng).get_table_names()
    finally:
        eng.dispose()
    store = Store(url=database_url)
    try:
        assert raw(database_url, "SELECT version FROM schema_version") == [(SCHEMA_VERSION,)]
        assert raw(database_url, "SELECT COUNT(*) FROM post_labels") == [(0,)]
        df = store.posts_frame()
        assert list(df["post_id"]) == ["p1"] and df["impressions"].tolist() == [1234.0]
        assert store.vectors(["k1"]).tobytes() == VEC
        # The post takes a label on its next import, and keeps its row id.
        row = PostRow(
            account="loomhaven",
            post_id="p1",
            text="Snowdrops by the lake",
            posted_at=datetime(2026, 3, 1, 9, 30, tzinfo=UTC),
            metrics={"impressions": 1234},
            has_media=True,
            vector_key="k1",
            labels={"campaign": "winter walks"},
        )
        res = store.write_batch([row], {}, model_id="m")
        assert (res.added, res.updated) == (0, 1)
        assert raw(database_url, "SELECT post_pk, name, value FROM post_labels") == [
            (1, "campaign", "winter walks")
        ]
    finally:
        store.close()
