"""Copy a whole store into another, empty one: how a team moves the history
it kept in a SQLite file onto a shared PostgreSQL server.

Rows are copied table by table in dependency order, with their ids, in one
transaction on the destination; PostgreSQL's id sequences are then moved
past the copied ids so later imports do not collide with them.
"""

from __future__ import annotations

from sqlalchemy import func, insert, select, text

from models.errors import StoreError
from service.store import Store
from service.tables import Base, ChangeStamp, SchemaVersion

_BATCH = 1000
# Each store keeps its own version and change stamp.
_OWN = {SchemaVersion.__tablename__, ChangeStamp.__tablename__}


def copy_store(source: Store, dest: Store) -> dict[str, int]:
    """Copy every row of ``source`` into the empty store ``dest``; returns
    the rows copied per table."""
    if any(dest.counts().values()):
        raise StoreError(
            f"the destination store {dest.safe_url} is not empty",
            hint="copy into a new, empty database",
        )
    copied: dict[str, int] = {}
    tables = [t for t in Base.metadata.sorted_tables if t.name not in _OWN]
    with source.engine.connect() as src, dest.session() as s:
        for table in tables:
            n = 0
            rows = src.execute(select(table)).mappings()
            while batch := rows.fetchmany(_BATCH):
                s.execute(insert(table), [dict(r) for r in batch])
                n += len(batch)
            copied[table.name] = n
        if dest.backend == "postgresql":
            for table in tables:
                pk = list(table.primary_key.columns)
                if len(pk) == 1 and pk[0].autoincrement is not False and pk[0].type.python_type is int:
                    top = s.scalar(select(func.max(pk[0])))
                    if top is not None:
                        s.execute(
                            text("SELECT setval(pg_get_serial_sequence(:t, :c), :v)"),
                            {"t": table.name, "c": pk[0].name, "v": int(top)},
                        )
    return copied
