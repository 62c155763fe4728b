"""A lone UTF-16 surrogate in any JSON string field is a 422 naming the field."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from conftest import TOKEN
from fastapi.testclient import TestClient

from service.api.app import create_app
from service.settings import Settings
from service.workspace import Workspace

# RFC 8259 section 8.2: "\ud800" is valid JSON syntax but not a Unicode string;
# written here as raw JSON text so the escape reaches the server unchanged.
LONE = "\\ud800"
CASES = [
    ("/v1/forecasts", '{"text": "Magnolias", "account": "a%s"}', "account"),
    ("/v1/forecasts", '{"text": "Magnolias", "account": "loomhaven", "draft_id": "%s"}', "draft_id"),
    ("/v1/forecasts", '{"text": "Magnolias %s", "account": "loomhaven"}', "text"),
    ("/v1/forecasts", '{"drafts": [{"text": "x", "account": "loomhaven", "draft_id": "%s"}]}', "draft_id"),
    ("/v1/segments", '{"topics": ["flowers", "x%s"]}', "topics"),
    ("/v1/variants", '{"texts": ["Magnolias", "Tulips%s"], "account": "loomhaven"}', "texts"),
    ("/v1/precedents", '{"text": "%s", "k": 3}', "text"),
    ("/v1/hours", '{"text": "Roses", "account": "%s"}', "account"),
]


@pytest.fixture(scope="module")
def client(demo_home) -> Iterator[TestClient]:
    ws = Workspace(settings=Settings(home=demo_home, token=TOKEN))
    with TestClient(create_app(workspace=ws, bound_host="127.0.0.1")) as c:
        yield c
    ws.close()


@pytest.mark.parametrize(("path", "body", "field"), CASES)
def test_a_lone_surrogate_is_refused_naming_the_field(
    client: TestClient, path: str, body: str, field: str
) -> None:
    r = client.post(
        path,
        content=(body % LONE).encode(),
        headers={"content-type": "application/json", "authorization": f"Bearer {TOKEN}"},
    )
    assert r.status_code == 422, r.text
    error = r.json()["error"]
    assert field in error["message"] and "surrogate" in error["message"]
