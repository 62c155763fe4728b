"""PostgreSQL for the tests: a server named by SOUNDING_TEST_POSTGRES_URL
(`.ci/start-postgres` starts one), fresh databases on it, and a switch that
puts every data directory of a test module on its own PostgreSQL database.

Without the variable, every test that needs PostgreSQL is skipped with the
reason below.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from service.settings import Settings

ENV = "SOUNDING_TEST_POSTGRES_URL"
SERVER = os.environ.get(ENV, "")
needs_postgres = pytest.mark.skipif(
    not SERVER, reason=f"{ENV} is not set (start a server with .ci/start-postgres)"
)


def create_database(prefix: str = "t") -> str:
    """A new, empty database on the test server; returns its URL."""
    name = f"sounding_{prefix}_{uuid.uuid4().hex[:12]}"
    eng = create_engine(SERVER, isolation_level="AUTOCOMMIT")
    try:
        with eng.connect() as c:
            c.execute(text(f'CREATE DATABASE "{name}"'))
    finally:
        eng.dispose()
    return make_url(SERVER).set(database=name).render_as_string(hide_password=False)


def drop_database(url: str) -> None:
    name = make_url(url).database
    eng = create_engine(SERVER, isolation_level="AUTOCOMMIT")
    try:
        with eng.connect() as c:
            c.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    finally:
        eng.dispose()


# Data directory -> its PostgreSQL database, while a test module runs on
# PostgreSQL (module fixtures register theirs; others are made on first use).
HOMES: dict[Path, str] = {}


@contextmanager
def every_home_on_postgres() -> Iterator[None]:
    """While active, each data directory's store is a PostgreSQL database of
    its own instead of its SQLite file: the one registered in HOMES, or a
    new one made on first use and dropped at the end."""
    made: list[Path] = []
    plain = Settings.db_url

    def db_url(self: Settings) -> str:
        if self.database_url:
            return self.database_url
        home = self.resolved_home
        if home not in HOMES:
            HOMES[home] = create_database()
            made.append(home)
        return HOMES[home]

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(Settings, "db_url", property(db_url))
        try:
            yield
        finally:
            mp.setattr(Settings, "db_url", plain)
            for home in made:
                drop_database(HOMES.pop(home))


def copy_home_to_postgres(src_home: Path, dest_home: Path) -> str:
    """Copy a data directory (models, index) and its store's rows into a new
    PostgreSQL database, registered for ``dest_home`` in HOMES; returns the
    database URL (drop it with ``release``)."""
    from service.storage.copying import copy_store
    from service.storage.store import Store

    src_url = HOMES.get(src_home.resolve()) or f"sqlite:///{src_home.resolve() / 'sounding.db'}"
    shutil.copytree(src_home, dest_home, ignore=shutil.ignore_patterns("sounding.db*"))
    url = create_database("demo")
    HOMES[dest_home.resolve()] = url
    src, dst = Store(url=src_url), Store(url=url)
    try:
        copy_store(src, dst)
    finally:
        src.close()
        dst.close()
    return url


def release(home: Path) -> None:
    url = HOMES.pop(home.resolve(), None)
    if url:
        drop_database(url)


def raw(url: str, sql: str, **params: object) -> list[tuple[object, ...]]:
    """Straight SQL on a store's database, not through Store (what a test reads
    to see what is really stored)."""
    from sqlalchemy import create_engine, text

    eng = create_engine(url)
    try:
        with eng.connect() as c:
            return [tuple(r) for r in c.execute(text(sql), params)]
    finally:
        eng.dispose()
