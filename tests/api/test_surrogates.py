"""A lone UTF-16 surrogate in any JSON string field is a 422 naming the field."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from conftest import TOKEN
from fastapi.testclient import TestClient

from service.api.app import create_app
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


@pytest.fixture()
def client(make_workspace) -> Iterator[TestClient]:
    # Refused at validation, before any data is read: an empty store suffices.
    ws: Workspace = make_workspace(token=TOKEN)
    with TestClient(create_app(workspace=ws, bound_host="127.0.0.1")) as c:
        yield c


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
    # A body that may be one of two shapes lists each shape's problems; one names the field.
    problems = r.json()["error"]["problems"]
    assert any(field in p["where"] and "surrogate" in p["message"] for p in problems), problems
