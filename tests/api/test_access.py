"""Access: changes over HTTP need the bearer token; reads stay open;
``sounding serve`` refuses a non-loopback address without a token."""

from __future__ import annotations

import base64
import csv
import hmac
import shutil
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest
from conftest import TOKEN
from fastapi.testclient import TestClient
from typer.testing import CliRunner

from models.errors import InputError
from service.api import tokens
from service.api.app import create_app
from service.api.schemas import ErrorBody
from service.cli import app as cli_app
from service.cli.base import use_embedder
from service.cli.history import check_bind
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace


def write_history(path: Path, n: int, *, prefix: str = "ac") -> Path:
    things = ["Magnolias", "Tulips", "The bee hotel", "Fern house", "Rose arbour", "Pond"]
    moods = ["in flower", "closed for repairs", "busy with volunteers", "quiet at dawn"]
    start = datetime(2025, 4, 1, 8, tzinfo=UTC)
    with path.open("w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
        for i in range(n):
            w.writerow(
                [
                    f"{prefix}-{i}",
                    ("loomhaven", "loomhaven_events")[i % 2],
                    f"{things[i % 6]} {moods[i % 4]} today, note {prefix}{i}",
                    (start + timedelta(hours=5 * i)).isoformat(),
                    300 + 11 * i,
                ]
            )
    return path


@pytest.fixture(scope="module")
def base_home(tmp_path_factory: pytest.TempPathFactory, embedder) -> Path:
    """A small imported history, built once; each test works on a copy."""
    home = tmp_path_factory.mktemp("access") / "home"
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    ws.import_csv(write_history(home.parent / "history.csv", 12), ImportOptions(new_accounts="UTC"))
    ws.close()
    return home


@pytest.fixture()
def ws(base_home: Path, tmp_path: Path, embedder):
    shutil.copytree(base_home, tmp_path / "home")
    ws = Workspace(settings=Settings(home=tmp_path / "home", token=TOKEN), embedder=embedder)
    yield ws
    ws.close()


@pytest.fixture()
def client(ws):
    with TestClient(create_app(workspace=ws)) as c:
        yield c


def write_requests(tmp_path: Path) -> list[tuple[str, str, dict]]:
    """One request to every endpoint that changes data, valid but for the token."""
    new = write_history(tmp_path / "new.csv", 3, prefix="new").read_bytes()
    return [
        ("POST", "/v1/imports", {"files": {"file": ("new.csv", new, "text/csv")}}),
        ("DELETE", "/v1/accounts/loomhaven", {}),
        ("DELETE", "/v1/posts/ac-1", {"params": {"account": "loomhaven_events"}}),
    ]


BAD_AUTH = {
    "missing": None,
    "wrong token": f"Bearer {TOKEN}x",
    "token prefix": f"Bearer {TOKEN[:-1]}",
    "empty token": "Bearer ",
    "basic scheme": "Basic " + base64.b64encode(f"user:{TOKEN}".encode()).decode(),
    "bare token": TOKEN,
}


@pytest.mark.parametrize("case", list(BAD_AUTH))
def test_changes_without_the_right_token_are_refused_and_change_nothing(
    case: str, client: TestClient, ws, tmp_path: Path
) -> None:
    before = ws.store.counts()
    header = BAD_AUTH[case]
    for method, url, kw in write_requests(tmp_path):
        headers = {"Authorization": header} if header is not None else {}
        r = client.request(method, url, headers=headers, **kw)
        assert r.status_code == 401, (case, method, url, r.text)
        body = ErrorBody.model_validate(r.json())  # the one error shape
        assert body.error.code == "unauthorized"
        assert "token" in body.error.message.lower() or "bearer" in body.error.message.lower()
        # RFC 6750 section 3: a 401 for a bearer-protected resource carries
        # WWW-Authenticate with the Bearer scheme.
        assert r.headers["www-authenticate"].startswith("Bearer")
    assert ws.store.counts() == before
    assert not list(ws.settings.uploads_dir.glob("*"))


def test_the_right_token_is_accepted(client: TestClient, ws, tmp_path: Path) -> None:
    auth = {"Authorization": f"Bearer {TOKEN}"}
    before = ws.store.counts()["posts"]
    (_imp, url, kw), (_, acc_url, _), (_, post_url, post_kw) = write_requests(tmp_path)
    r = client.post(url, headers=auth, **kw)
    assert r.status_code == 200, r.text
    assert r.json()["added"] == 3
    assert ws.store.counts()["posts"] == before + 3
    r = client.delete(post_url, headers=auth, **post_kw)
    assert r.status_code == 200, r.text
    assert r.json() == {"deleted": 1, "posts": before + 2}
    # The scheme name is case-insensitive (RFC 9110 section 11.1).
    r = client.delete(acc_url, headers={"Authorization": f"bearer {TOKEN}"})
    assert r.status_code == 200, r.text
    assert "loomhaven" not in {a.handle for a in ws.store.accounts()}


def test_a_server_without_token_refuses_every_change(base_home: Path, tmp_path: Path, embedder) -> None:
    shutil.copytree(base_home, tmp_path / "open")
    ws = Workspace(settings=Settings(home=tmp_path / "open", token=None), embedder=embedder)
    before = ws.store.counts()
    with TestClient(create_app(workspace=ws)) as c:
        for method, url, kw in write_requests(tmp_path):
            r = c.request(method, url, headers={"Authorization": "Bearer anything"}, **kw)
            assert r.status_code == 401, (method, url)
            assert "SOUNDING_TOKEN" in r.json()["error"]["message"]
    assert ws.store.counts() == before
    ws.close()


def test_every_changing_route_is_behind_the_token(client: TestClient, ws) -> None:
    paths = client.app.openapi()["paths"]
    ops = {(m.upper(), p) for p, item in paths.items() for m in item}
    guarded = {(m.upper(), p) for p, item in paths.items() for m, op in item.items() if op.get("security")}
    # The endpoints that change data: imports, training, deletion, and any
    # route whose method changes a resource by its meaning (RFC 9110
    # section 9.2.1: PUT/PATCH/DELETE are not safe). The other POSTs take a
    # draft in the body and only read.
    changing = {
        ("POST", "/v1/imports"),
        ("DELETE", "/v1/accounts/{handle}"),
        ("DELETE", "/v1/posts/{post_id}"),
    }
    changing |= {(m, p) for m, p in ops if m in {"PUT", "PATCH", "DELETE"} or "train" in p or "import" in p}
    assert changing <= guarded, changing - guarded
    # Declared is not enough: each one really refuses a request without it.
    before = ws.store.counts()
    for method, path in sorted(guarded):
        url = path.replace("{handle}", "loomhaven").replace("{post_id}", "ac-0")
        r = client.request(method, url)
        assert r.status_code == 401, (method, path, r.text)
    assert ws.store.counts() == before


def test_reads_stay_open(client: TestClient, ws) -> None:
    r = client.get("/v1/health")
    assert r.status_code == 200 and r.json()["posts"] == ws.store.counts()["posts"]
    assert client.get("/v1/accounts").status_code == 200
    r = client.post("/v1/precedents", json={"text": "Magnolias in flower", "k": 3})
    assert r.status_code == 200 and len(r.json()["precedents"]) == 3


def test_token_is_compared_in_constant_time(client: TestClient, monkeypatch) -> None:
    # hmac.compare_digest is the standard library's constant-time comparison
    # (Python docs, hmac module); prove the check goes through it.
    seen: list[tuple[bytes, bytes]] = []
    real = hmac.compare_digest

    def spy(a: bytes, b: bytes) -> bool:
        seen.append((a, b))
        return real(a, b)

    monkeypatch.setattr(tokens.hmac, "compare_digest", spy)
    r = client.delete("/v1/accounts/nobody", headers={"Authorization": "Bearer guess"})
    assert r.status_code == 401
    assert seen == [(b"guess", TOKEN.encode())]


# Loopback per RFC 1122 section 3.2.1.3 (127.0.0.0/8) and RFC 4291 section
# 2.5.3 (::1); "localhost" per RFC 6761 section 6.3.
LOOPBACK = ["127.0.0.1", "127.8.9.10", "::1", "localhost"]
NOT_LOOPBACK = ["0.0.0.0", "::", "192.0.2.10", "2001:db8::1", "sounding.example"]


@pytest.mark.parametrize("host", LOOPBACK)
def test_loopback_bind_needs_no_token(host: str) -> None:
    check_bind(host, Settings(token=None))


@pytest.mark.parametrize("host", NOT_LOOPBACK)
def test_non_loopback_bind_needs_a_token(host: str) -> None:
    with pytest.raises(InputError, match="without SOUNDING_TOKEN"):
        check_bind(host, Settings(token=None))
    check_bind(host, Settings(token=TOKEN))


def test_serve_command_refuses_public_address_without_token(
    tmp_path: Path, embedder, monkeypatch: pytest.MonkeyPatch
) -> None:
    import uvicorn

    started: list[dict] = []
    # Never start a real server here: record what would have been served.
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: started.append(kw))
    monkeypatch.delenv("SOUNDING_TOKEN", raising=False)
    use_embedder(embedder)
    runner = CliRunner()
    env = {"SOUNDING_HOME": str(tmp_path / "home")}
    r = runner.invoke(cli_app, ["serve", "--host", "0.0.0.0", "--port", "8765"], env=env)
    assert r.exit_code == 1
    assert "Error: refusing to listen on 0.0.0.0 without SOUNDING_TOKEN" in r.output
    assert started == []
    use_embedder(embedder)  # drop the CLI's cached workspace, read the settings anew
    r = runner.invoke(
        cli_app, ["serve", "--host", "0.0.0.0", "--port", "8765"], env={**env, "SOUNDING_TOKEN": TOKEN}
    )
    assert r.exit_code == 0, r.output
    assert len(started) == 1
    assert {k: started[0][k] for k in ("host", "port", "log_level")} == {
        "host": "0.0.0.0",
        "port": 8765,
        "log_level": "info",
    }
