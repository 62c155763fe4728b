"""Explicit wiring: every endpoint and every command the README documents is
served. A router or command module that goes missing fails here (and at import),
rather than silently dropping what it served."""

from __future__ import annotations

from fastapi.testclient import TestClient
from typer.main import get_command

from service.api.app import create_app
from service.cli import app as cli_app

# Source: README.md, "HTTP API" table and "Everyday use" commands (our own docs).
ENDPOINTS = {
    ("GET", "/v1/health"),
    ("GET", "/v1/accounts"),
    ("POST", "/v1/precedents"),
    ("POST", "/v1/forecasts"),
    ("POST", "/v1/hours"),
    ("POST", "/v1/comparisons"),
    ("POST", "/v1/variants"),  # the earlier path, kept for one release
    ("POST", "/v1/account-choices"),
    ("GET", "/v1/team"),
    ("POST", "/v1/segments"),
    ("GET", "/v1/labels"),
    ("GET", "/v1/distribution"),
    ("POST", "/v1/trends"),
    ("GET", "/v1/topics"),
    ("GET", "/v1/map"),
    ("GET", "/v1/surprises"),
    ("POST", "/v1/imports"),
    ("GET", "/v1/mappings"),
    ("POST", "/v1/training"),
    ("DELETE", "/v1/accounts/{handle}"),
    ("PUT", "/v1/accounts/{handle}"),
    ("DELETE", "/v1/posts/{post_id}"),
}
COMMANDS = {
    "account",
    "accounts",
    "import",
    "reindex",
    "precedents",
    "train",
    "backtest",
    "check",
    "hours",
    "compare",
    "segments",
    "distribution",
    "topics",
    "map",
    "surprises",
    "forget",
    "backup",
    "serve",
    "demo",
}


def test_every_documented_endpoint_is_in_the_schema(workspace) -> None:
    doc = create_app(workspace=workspace).openapi()
    served = {(m.upper(), p) for p, item in doc["paths"].items() for m in item}
    assert served >= ENDPOINTS, ENDPOINTS - served


def test_the_page_and_its_files_are_served(workspace) -> None:
    with TestClient(create_app(workspace=workspace)) as client:
        page = client.get("/")
        assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")
        assert "default-src 'self'" in page.headers["content-security-policy"]
        assert '<form id="draft-form"' in page.text and 'id="media"' in page.text
        for name, kind in (("check.js", "javascript"), ("style.css", "text/css")):
            r = client.get(f"/static/{name}")
            assert r.status_code == 200 and kind in r.headers["content-type"], name
            assert f"/static/{name}" in page.text  # the page links the file it is served
        assert client.get("/static/nothing-here.js").status_code == 404


def test_every_documented_command_is_registered() -> None:
    names = set(get_command(cli_app).commands)  # type: ignore[attr-defined]
    assert names >= COMMANDS, COMMANDS - names
