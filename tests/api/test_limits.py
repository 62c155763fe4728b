"""Limits: draft length, drafts per request and upload size are settings;
past them the answer is 413 with a body naming the limit, and nothing is
stored. Uploads are streamed to disk and cut off as soon as the limit is
passed."""

from __future__ import annotations

import asyncio
import shutil
from collections.abc import Iterator
from pathlib import Path

import pytest
from conftest import TOKEN, history_csv
from fastapi.testclient import TestClient

from models.errors import LimitExceeded
from service.api.app import create_app
from service.api.schemas import ErrorBody
from service.ingest.options import ImportOptions
from service.settings import Settings
from service.workspace import Workspace

AUTH = {"Authorization": f"Bearer {TOKEN}"}
MAX_DRAFT, MAX_BATCH, MAX_UPLOAD = 300, 3, 4096
LIMITS = {"max_draft_chars": MAX_DRAFT, "max_batch": MAX_BATCH, "max_upload_bytes": MAX_UPLOAD}


@pytest.fixture(scope="module")
def base_home(tmp_path_factory: pytest.TempPathFactory, embedder) -> Path:
    home = tmp_path_factory.mktemp("limits") / "home"
    ws = Workspace(settings=Settings(home=home), embedder=embedder)
    (home.parent / "h.csv").write_bytes(history_csv(10, prefix="lm", step_hours=3))
    ws.import_csv(home.parent / "h.csv", ImportOptions(new_accounts="UTC"))
    ws.close()
    return home


@pytest.fixture()
def ws(base_home: Path, tmp_path: Path, embedder) -> Iterator[Workspace]:
    shutil.copytree(base_home, tmp_path / "home")
    ws = Workspace(settings=Settings(home=tmp_path / "home", token=TOKEN, **LIMITS), embedder=embedder)
    yield ws
    ws.close()


@pytest.fixture()
def client(ws: Workspace) -> Iterator[TestClient]:
    with TestClient(create_app(workspace=ws)) as c:
        yield c


def limit_error(r, limit: str, maximum: int) -> ErrorBody:
    assert r.status_code == 413, r.text
    body = ErrorBody.model_validate(r.json())
    assert body.error.code == "limit_exceeded"
    assert (body.error.limit, body.error.maximum) == (limit, maximum)
    assert str(maximum) in body.error.message
    return body


def test_draft_at_the_limit_passes_and_one_more_character_is_refused(client: TestClient) -> None:
    draft = ("Late tulips by the lake path, come and see them. " * 10)[:MAX_DRAFT]
    assert len(draft) == MAX_DRAFT
    r = client.post("/v1/precedents", json={"text": draft, "k": 2})
    assert r.status_code == 200, r.text
    r = client.post("/v1/precedents", json={"text": draft + "!", "k": 2})
    body = limit_error(r, "max_draft_chars", MAX_DRAFT)
    assert body.error.field == "text"
    assert f"{MAX_DRAFT + 1} characters" in body.error.message


def test_batch_limit_is_checked_before_any_embedding(ws: Workspace) -> None:
    calls = ws.embedder.calls
    vecs = ws.forecaster.embed(["one draft", "two drafts", "three drafts"])
    assert vecs.shape == (MAX_BATCH, 384)  # all-MiniLM-L6-v2 gives 384 dimensions
    with pytest.raises(LimitExceeded) as info:
        ws.forecaster.embed(["a draft"] * (MAX_BATCH + 1))
    assert (info.value.limit, info.value.maximum) == ("max_batch", MAX_BATCH)
    assert ws.embedder.calls == calls + MAX_BATCH  # the refused batch embedded nothing
    assert ws.forecaster.limits.check_batch(MAX_BATCH) == MAX_BATCH


def test_batch_limit_over_http(client: TestClient, ws: Workspace) -> None:
    """Every endpoint that takes a list of drafts answers 413 past max_batch."""
    doc = client.app.openapi()
    components = doc.get("components", {}).get("schemas", {})

    def takes_drafts(schema: object, depth: int = 0) -> bool:
        # Follow $ref and anyOf/oneOf to find a top-level "drafts" list.
        if depth > 4 or not isinstance(schema, dict):
            return False
        if "$ref" in schema:
            return takes_drafts(components.get(schema["$ref"].rsplit("/", 1)[-1]), depth + 1)
        if "drafts" in schema.get("properties", {}):
            return True
        return any(takes_drafts(s, depth + 1) for s in schema.get("anyOf", []) + schema.get("oneOf", []))

    batch_ops = [
        (method.upper(), path)
        for path, item in doc["paths"].items()
        for method, op in item.items()
        if takes_drafts(
            op.get("requestBody", {}).get("content", {}).get("application/json", {}).get("schema")
        )
    ]
    assert batch_ops, "no endpoint takes a list of drafts"
    drafts = [{"text": f"Draft {i} about the orchard", "account": "loomhaven"} for i in range(MAX_BATCH + 1)]
    for method, path in batch_ops:
        r = client.request(method, path, json={"drafts": drafts}, headers=AUTH)
        limit_error(r, "max_batch", MAX_BATCH)


def test_upload_within_the_limit_is_imported_and_removed(client: TestClient, ws: Workspace) -> None:
    data = history_csv(6, prefix="up", bad_line=4)
    assert len(data) < MAX_UPLOAD
    before = ws.store.counts()["posts"]
    r = client.post("/v1/imports", headers=AUTH, files={"file": ("up.csv", data, "text/csv")})
    assert r.status_code == 200, r.text
    out = r.json()
    assert (out["added"], out["rejected"], out["updated"], out["unchanged"]) == (5, 1, 0, 0)
    assert [{k: p[k] for k in ("line", "column", "reason", "post_id")} for p in out["problems"]] == [
        {"line": 4, "column": "impressions", "reason": "'-5' is negative", "post_id": "up-2"}
    ]
    assert ws.store.counts()["posts"] == before + 5
    assert not list(ws.settings.uploads_dir.iterdir())  # the temporary file is gone


def test_upload_form_fields_account_timezone_and_mapping(client: TestClient, ws: Workspace) -> None:
    # Their export: other column names, no account column, local times.
    data = b"id,body,when,views\nx-1,Bats over the lake at dusk,2025-07-01 21:30,880\n"
    r = client.post(
        "/v1/imports",
        headers=AUTH,
        files={"file": ("theirs.csv", data, "text/csv")},
        data={
            "account": "loomhaven_lab",
            "timezone": "America/New_York",
            "map": ["post_id=id", "text=body", "posted_at=when", "impressions=views"],
        },
    )
    # A new account is made only on purpose: refused, naming the closest handle.
    assert r.status_code == 404 and "did you mean loomhaven?" in r.json()["error"]["message"]
    assert "loomhaven_lab" not in {a.handle for a in ws.store.accounts()}
    r = client.post(
        "/v1/imports",
        headers=AUTH,
        files={"file": ("theirs.csv", data, "text/csv")},
        data={
            "account": "loomhaven_lab",
            "timezone": "America/New_York",
            "new_account": "true",
            "map": ["post_id=id", "text=body", "posted_at=when", "impressions=views"],
        },
    )
    assert r.status_code == 200, r.text
    assert r.json()["added"] == 1
    row = ws.store.posts_frame(account="loomhaven_lab").iloc[0]
    # 21:30 EDT (UTC-4 in July, IANA tz database) is 01:30 UTC the next day.
    assert row["posted_at"].isoformat() == "2025-07-02T01:30:00+00:00"
    assert row["impressions"] == 880


def test_upload_past_the_limit_is_refused_and_stores_nothing(client: TestClient, ws: Workspace) -> None:
    data = history_csv(200, prefix="big")
    assert len(data) > MAX_UPLOAD
    before = ws.store.counts()
    r = client.post("/v1/imports", headers=AUTH, files={"file": ("big.csv", data, "text/csv")})
    body = limit_error(r, "max_upload_bytes", MAX_UPLOAD)
    assert "SOUNDING_MAX_UPLOAD_BYTES" in body.error.message
    assert ws.store.counts() == before
    assert not list(ws.settings.uploads_dir.glob("*"))


@pytest.mark.parametrize(
    ("body", "reason"),
    [
        (b"not a form at all", "multipart"),
        (
            b'--B\r\nContent-Disposition: form-data; name="file"; filename="a.csv"\r\n\r\nx,y\r\n',
            "closing boundary",
        ),
        (b'--B\r\nContent-Disposition: form-data; name="account"\r\n\r\nloomhaven\r\n--B--\r\n', "no file"),
        (
            b'--B\r\nContent-Disposition: form-data; name="colour"\r\n\r\nred\r\n--B--\r\n',
            "unknown form field",
        ),
    ],
)
def test_malformed_uploads_are_422_and_leave_no_file(
    client: TestClient, ws: Workspace, body: bytes, reason: str
) -> None:
    before = ws.store.counts()
    r = client.post(
        "/v1/imports", content=body, headers={**AUTH, "Content-Type": "multipart/form-data; boundary=B"}
    )
    assert r.status_code == 422, r.text
    assert reason in ErrorBody.model_validate(r.json()).error.message
    assert ws.store.counts() == before
    assert not list(ws.settings.uploads_dir.glob("*"))


def test_a_non_form_body_is_422(client: TestClient) -> None:
    r = client.post("/v1/imports", content=b"post_id,text\n", headers={**AUTH, "Content-Type": "text/csv"})
    assert r.status_code == 422
    assert "multipart/form-data" in r.json()["error"]["message"]


# The streaming checks talk ASGI directly (the ASGI 3.0 HTTP message spec:
# "http.request" messages with more_body), because a test client reads the
# whole body before the app sees it and so cannot show when reading stops.

CHUNK = 1024


def asgi_upload(app, chunks: Iterator[bytes], headers: dict[str, str]) -> tuple[int, bytes, int]:
    """POST /v1/imports with the body fed chunk by chunk; returns status,
    body and how many chunks the app asked for."""
    taken = 0
    out: dict[str, object] = {"body": b""}

    async def run() -> None:
        nonlocal taken
        done = asyncio.Event()

        async def receive() -> dict:
            nonlocal taken
            chunk = next(chunks, None)
            if chunk is None:
                await done.wait()
                return {"type": "http.disconnect"}
            taken += 1
            return {"type": "http.request", "body": chunk, "more_body": True}

        async def send(message: dict) -> None:
            if message["type"] == "http.response.start":
                out["status"] = message["status"]
            elif message["type"] == "http.response.body":
                out["body"] = out["body"] + message.get("body", b"")  # type: ignore[operator]
                if not message.get("more_body"):
                    done.set()

        scope = {
            "type": "http",
            "asgi": {"version": "3.0"},
            "http_version": "1.1",
            "method": "POST",
            "scheme": "http",
            "path": "/v1/imports",
            "raw_path": b"/v1/imports",
            "query_string": b"",
            "root_path": "",
            "headers": [(k.lower().encode(), v.encode()) for k, v in headers.items()],
            "client": ("127.0.0.1", 50000),
            "server": ("127.0.0.1", 8000),
        }
        await app(scope, receive, send)

    asyncio.run(run())
    return int(out["status"]), out["body"], taken  # type: ignore[arg-type]


def endless_form() -> Iterator[bytes]:
    """A well-formed start of a form whose file part never ends."""
    yield (
        b'--B\r\nContent-Disposition: form-data; name="file"; filename="h.csv"\r\n'
        b"Content-Type: text/csv\r\n\r\npost_id,account,text,posted_at,impressions\r\n"
    )
    for i in range(10_000):  # 10 MB if anyone read it all
        yield (f"s-{i},loomhaven,Row {i}".ljust(CHUNK - 2, ".") + "\r\n").encode()


def test_streamed_upload_without_length_is_cut_off_at_the_limit(ws: Workspace) -> None:
    app = create_app(workspace=ws)
    before = ws.store.counts()
    status, body, taken = asgi_upload(
        app, endless_form(), {**AUTH, "content-type": "multipart/form-data; boundary=B"}
    )
    assert status == 413
    assert ErrorBody.model_validate_json(body).error.limit == "max_upload_bytes"
    # Reading stopped at the first chunk past the limit, not at the end.
    assert taken == MAX_UPLOAD // CHUNK + 1
    assert ws.store.counts() == before
    assert not list(ws.settings.uploads_dir.glob("*"))


def test_declared_length_past_the_limit_is_refused_before_reading(ws: Workspace) -> None:
    app = create_app(workspace=ws)
    status, body, taken = asgi_upload(
        app,
        endless_form(),
        {**AUTH, "content-type": "multipart/form-data; boundary=B", "content-length": str(10 * 1024 * 1024)},
    )
    assert status == 413
    assert ErrorBody.model_validate_json(body).error.maximum == MAX_UPLOAD
    assert taken == 0


def test_token_is_checked_before_the_body_is_read(ws: Workspace) -> None:
    app = create_app(workspace=ws)
    status, _body, taken = asgi_upload(
        app, endless_form(), {"content-type": "multipart/form-data; boundary=B"}
    )
    assert status == 401
    assert taken == 0
