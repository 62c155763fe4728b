"""test_store.py's tests, run again with every store on PostgreSQL
(SOUNDING_TEST_POSTGRES_URL; skipped without it)."""

from pgmodule import *  # the PostgreSQL fixtures for this module
from test_store import *  # the same tests

# SQLite's online backup; PostgreSQL's backup path is tested in test_postgres.py.
del test_backup_is_a_consistent_copy  # noqa: F821
