"""Helpers the tests share: a PostgreSQL test server, a loopback service and Chromium."""
