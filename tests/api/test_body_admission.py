"""Request bodies are capped by size before any parsing, whatever their
Content-Type, and a write route's token is checked before its body is read."""

from __future__ import annotations

import asyncio
from collections.abc import AsyncIterator

import httpx
import pytest
from conftest import TOKEN

from service.api.app import create_app
from service.workspace import Workspace

CHUNK = 64 * 1024
CAP = 256 * 1024


class Counted:
    """A request body produced chunk by chunk, counting what the server pulled."""

    def __init__(self, total: int) -> None:
        self.total = total
        self.pulled = 0

    async def __aiter__(self) -> AsyncIterator[bytes]:
        head = b'--b\r\nContent-Disposition: form-data; name="text"\r\n\r\n'
        self.pulled += len(head)
        yield head
        while self.pulled < self.total:
            self.pulled += CHUNK
            yield b"x" * CHUNK


@pytest.fixture()
def ws(make_workspace) -> Workspace:
    return make_workspace(token=TOKEN, max_json_bytes=CAP)


def _post(
    ws: Workspace, path: str, body: Counted, headers: dict[str, str], method: str = "POST"
) -> httpx.Response:
    async def go() -> httpx.Response:
        transport = httpx.ASGITransport(app=create_app(workspace=ws, bound_host="127.0.0.1"))
        async with httpx.AsyncClient(transport=transport, base_url="http://127.0.0.1") as c:
            return await c.request(method, path, content=body, headers=headers)  # type: ignore[arg-type]

    return asyncio.run(go())


MULTIPART = {"content-type": "multipart/form-data; boundary=b"}


@pytest.mark.parametrize("path", ["/v1/forecasts", "/v1/precedents", "/v1/segments"])
def test_an_oversized_multipart_body_is_refused_unbuffered(ws: Workspace, path: str) -> None:
    body = Counted(32 * 1024 * 1024)  # 128 times the cap
    r = _post(ws, path, body, {**MULTIPART, "authorization": f"Bearer {TOKEN}"})
    assert r.status_code == 413, r.text
    assert r.json()["error"]["limit"] == "max_json_bytes"
    # Read no further than the cap and the chunk that passed it.
    assert body.pulled <= CAP + 2 * CHUNK


@pytest.mark.parametrize("path", ["/v1/training", "/v1/imports", "/v1/accounts/a"])
@pytest.mark.parametrize("auth", [None, "Bearer wrong", "Basic abc"])
def test_a_write_without_the_token_is_refused_before_its_body_is_read(
    ws: Workspace, path: str, auth: str | None
) -> None:
    body = Counted(8 * 1024 * 1024)
    headers = {**MULTIPART, **({"authorization": auth} if auth else {})}
    r = _post(ws, path, body, headers, method="DELETE" if "accounts" in path else "POST")
    assert r.status_code == 401, r.text
    assert r.json()["error"]["code"] == "unauthorized"
    assert r.headers["www-authenticate"] == "Bearer"
    assert body.pulled == 0


def test_a_json_write_without_the_token_is_refused_unread(ws: Workspace) -> None:
    body = Counted(1024 * 1024)
    r = _post(ws, "/v1/training", body, {"content-type": "application/json"})
    assert r.status_code == 401 and body.pulled == 0


def test_the_right_token_lets_the_body_through(ws: Workspace) -> None:
    async def go() -> httpx.Response:
        transport = httpx.ASGITransport(app=create_app(workspace=ws, bound_host="127.0.0.1"))
        async with httpx.AsyncClient(transport=transport, base_url="http://127.0.0.1") as c:
            return await c.post(
                "/v1/training", json={"metric": "nonsense"}, headers={"authorization": f"Bearer {TOKEN}"}
            )

    r = asyncio.run(go())
    assert r.status_code == 422, r.text  # read and validated, not refused at the door


def test_an_upload_declared_past_its_limit_is_refused_unread(make_workspace) -> None:
    ws = make_workspace(token=TOKEN, max_upload_bytes=1000)
    body = Counted(1024 * 1024)
    headers = {**MULTIPART, "authorization": f"Bearer {TOKEN}", "content-length": str(1024 * 1024)}
    r = _post(ws, "/v1/imports", body, headers)
    assert r.status_code == 413 and body.pulled == 0


def test_blank_server_token_switches_writes_off(make_workspace) -> None:
    ws = make_workspace(token=" " * 32)
    r = _post(ws, "/v1/training", Counted(10), {"authorization": "Bearer " + " " * 32})
    assert r.status_code == 401 and "switched off" in r.json()["error"]["message"]
