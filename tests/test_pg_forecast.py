"""test_forecast.py's tests, run again with every store on PostgreSQL
(SOUNDING_TEST_POSTGRES_URL; skipped without it)."""

from pgmodule import *  # the PostgreSQL fixtures for this module
from test_forecast import *  # the same tests
