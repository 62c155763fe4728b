"""HTTP API: /v1/precedents, /v1/health, /v1/accounts and the docs."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient

from models.embedding import Embedder
from models.metrics import METRIC_COLUMNS
from service.api.app import create_app
from service.workspace import Workspace

DRAFT = "Our magnolias are coming into flower by the lake this week, come and see them."
FIELDS = {"post_id", "account", "posted_at", "text", "similarity", "metrics"}


@pytest.fixture(scope="module")
def client(demo_workspace: Workspace) -> Iterator[TestClient]:
    with TestClient(create_app(workspace=demo_workspace)) as c:  # runs the lifespan
        yield c


@pytest.fixture(scope="module")
def frame(demo_workspace: Workspace) -> pd.DataFrame:
    return demo_workspace.store.posts_frame().set_index(["account", "post_id"])


def assert_error(resp, status: int, code: str) -> dict:
    assert resp.status_code == status, resp.text
    body = resp.json()
    assert set(body) == {"error"}
    assert body["error"]["code"] == code
    assert isinstance(body["error"]["message"], str) and body["error"]["message"]
    return body["error"]


def test_precedents_are_the_nearest_posts_with_their_metrics(
    client: TestClient, demo_workspace: Workspace, frame: pd.DataFrame, embedder: Embedder
) -> None:
    resp = client.post("/v1/precedents", json={"text": DRAFT, "k": 7})
    assert resp.status_code == 200, resp.text
    found = resp.json()["precedents"]
    assert len(found) == 7
    for p in found:
        assert set(p) >= FIELDS
        assert set(p["metrics"]) == set(METRIC_COLUMNS)
    sims = [p["similarity"] for p in found]
    assert sims == sorted(sims, reverse=True)
    # Brute force with numpy as the reference: cosine of unit vectors is their dot product.
    vecs = demo_workspace.store.vectors(demo_workspace.store.posts_frame()["vector_key"].tolist())
    q = embedder.encode([DRAFT])[0]
    all_sims = np.sort(vecs @ q)[::-1]
    np.testing.assert_allclose(sims, all_sims[:7], atol=1e-4)
    for p in found:
        row = frame.loc[(p["account"], p["post_id"])]
        assert p["text"] == row["text"]
        assert pd.Timestamp(datetime.fromisoformat(p["posted_at"])) == row["posted_at"]
        assert {m: p["metrics"][m] for m in METRIC_COLUMNS} == {m: int(row[m]) for m in METRIC_COLUMNS}
        assert p["similarity"] == pytest.approx(
            float(demo_workspace.store.vectors([row["vector_key"]])[0] @ q), abs=1e-4
        )


def test_account_filter(client: TestClient) -> None:
    for account in ("loomhaven_lab", "loomhaven_events"):
        found = client.post("/v1/precedents", json={"text": DRAFT, "k": 5, "account": account}).json()
        assert len(found["precedents"]) == 5
        assert {p["account"] for p in found["precedents"]} == {account}


def test_date_range_filter(client: TestClient) -> None:
    body = {"text": DRAFT, "k": 10, "since": "2026-01-01T00:00:00Z", "until": "2026-02-01T00:00:00Z"}
    found = client.post("/v1/precedents", json=body).json()["precedents"]
    assert len(found) == 10
    for p in found:
        t = datetime.fromisoformat(p["posted_at"])
        assert datetime.fromisoformat("2026-01-01T00:00:00+00:00") <= t
        assert t <= datetime.fromisoformat("2026-02-01T00:00:00+00:00")


def test_unknown_account_is_404(client: TestClient) -> None:
    err = assert_error(
        client.post("/v1/precedents", json={"text": DRAFT, "account": "nobody"}), 404, "not_found"
    )
    assert "nobody" in err["message"]


@pytest.mark.parametrize(
    ("body", "status", "code"),
    [
        ({"text": ""}, 422, "invalid_request"),  # schema: min_length=1
        ({"text": "   \n "}, 422, "invalid_input"),  # only whitespace: the library says so
        ({}, 422, "invalid_request"),
        ({"text": DRAFT, "k": 0}, 422, "invalid_request"),
        ({"text": DRAFT, "k": 101}, 422, "invalid_request"),
        ({"text": DRAFT, "colour": "red"}, 422, "invalid_request"),  # unknown fields refused
        (
            {"text": DRAFT, "since": "2026-02-01T00:00:00Z", "until": "2026-01-01T00:00:00Z"},
            422,
            "invalid_input",
        ),
        ({"text": "x" * 5001}, 413, "limit_exceeded"),
    ],
)
def test_bad_requests(client: TestClient, body: dict, status: int, code: str) -> None:
    assert_error(client.post("/v1/precedents", json=body), status, code)


def test_not_json_is_422(client: TestClient) -> None:
    resp = client.post("/v1/precedents", content=b"\x89PNG", headers={"content-type": "application/json"})
    assert_error(resp, 422, "invalid_request")


def test_unknown_path_is_404_in_the_common_shape(client: TestClient) -> None:
    assert_error(client.get("/v1/no-such-thing"), 404, "not_found")


def test_health(client: TestClient, demo_workspace: Workspace, embedder: Embedder) -> None:
    h = client.get("/v1/health").json()
    counts = demo_workspace.store.counts()
    assert h["posts"] == counts["posts"] > 0
    assert h["accounts"] == counts["accounts"] == 3
    assert h["model_id"] == embedder.model_id == "sentence-transformers/all-MiniLM-L6-v2"
    assert h["index"] == {"state": "ready", "count": counts["posts"]}


def test_accounts(client: TestClient, demo_workspace: Workspace) -> None:
    got = client.get("/v1/accounts").json()
    assert [a["handle"] for a in got] == ["loomhaven", "loomhaven_events", "loomhaven_lab"]
    assert sum(a["posts"] for a in got) == demo_workspace.store.counts()["posts"]


def test_empty_store(make_workspace) -> None:
    ws = make_workspace("empty")
    with TestClient(create_app(workspace=ws)) as c:
        h = c.get("/v1/health").json()
        assert (h["posts"], h["accounts"]) == (0, 0)
        assert h["index"] == {"state": "ready", "count": 0}
        assert c.post("/v1/precedents", json={"text": DRAFT}).json() == {"precedents": []}


def test_health_reports_a_stale_index(demo_copy: Workspace, tmp_path: Path) -> None:
    with TestClient(create_app(workspace=demo_copy)) as c:
        assert c.get("/v1/health").json()["index"]["state"] == "ready"
        # Change the store behind the service's back (as another process would).
        from service.storage.store import Store

        other = Store(url=demo_copy.settings.db_url)
        other.forget(account="loomhaven_lab")
        other.close()
        h = c.get("/v1/health").json()
        assert h["index"]["state"] == "stale"
        # The next search rebuilds the index; health is ready again.
        found = c.post("/v1/precedents", json={"text": DRAFT, "k": 50}).json()["precedents"]
        assert "loomhaven_lab" not in {p["account"] for p in found}
        h = c.get("/v1/health").json()
        assert h["index"] == {"state": "ready", "count": h["posts"]}


def test_docs_and_openapi(client: TestClient) -> None:
    docs = client.get("/docs")
    assert docs.status_code == 200 and "swagger" in docs.text.lower()
    spec = client.get("/openapi.json")
    assert spec.status_code == 200
    doc = spec.json()
    # OpenAPI 3.x document (OpenAPI Specification: the "openapi" field holds the version).
    assert doc["openapi"].startswith("3.")
    op = doc["paths"]["/v1/precedents"]["post"]
    assert {"200", "404", "413", "422"} <= set(op["responses"])
    assert "get" in doc["paths"]["/v1/health"]
