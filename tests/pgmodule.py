"""Fixtures that run a whole test module against PostgreSQL: import them
with ``from pgmodule import *`` next to the module's tests.

They replace the conftest fixtures of the same names for that module only:
every data directory gets its own PostgreSQL database, and the demo history
is the conftest one (built once, on SQLite) copied row for row.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from pgsupport import (
    HOMES,
    copy_home_to_postgres,
    every_home_on_postgres,
    needs_postgres,
    release,
)

from models.embedding import Embedder
from service.settings import Settings
from service.workspace import Workspace

pytestmark = [needs_postgres]


@pytest.fixture(autouse=True)
def on_postgres() -> Iterator[None]:
    """Every data directory a test makes is on PostgreSQL."""
    with every_home_on_postgres():
        yield


@pytest.fixture(scope="module")
def demo_home(demo_home: Path, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    home = tmp_path_factory.mktemp("pgdemo") / "home"
    copy_home_to_postgres(demo_home, home)
    yield home
    release(home)


@pytest.fixture(scope="module")
def demo_workspace(demo_home: Path, embedder: Embedder) -> Iterator[Workspace]:
    ws = Workspace(
        settings=Settings(home=demo_home, database_url=HOMES[demo_home.resolve()]), embedder=embedder
    )
    assert ws.store.backend == "postgresql"
    yield ws
    ws.close()


@pytest.fixture()
def demo_copy(demo_home: Path, tmp_path: Path, embedder: Embedder) -> Iterator[Workspace]:
    home = tmp_path / "demo-copy"
    url = copy_home_to_postgres(demo_home, home)
    ws = Workspace(settings=Settings(home=home, database_url=url), embedder=embedder)
    yield ws
    ws.close()
    release(home)


__all__ = ["demo_copy", "demo_home", "demo_workspace", "on_postgres", "pytestmark"]
