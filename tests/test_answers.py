"""Each answer's shape is defined once.

The result types of the service layer are the pydantic models the API
declares and the CLI's ``--json`` prints: these tests fail when a response
schema is copied by hand beside them, when the API and the CLI write one
answer differently, or when a hand-written ``to_dict`` comes back.
"""

from __future__ import annotations

import importlib
import inspect
import json
import pkgutil
import re
from collections.abc import Iterator
from typing import Any

import pytest
from fastapi.testclient import TestClient
from pydantic import BaseModel
from typer.testing import CliRunner

import models
import service
from service.account_choice import AccountChoice
from service.analysis.team import TeamOverview
from service.api.app import create_app
from service.forecast.answer import Forecast, Forecasts
from service.health import Health
from service.history.precedents import Precedents
from service.ingest.answers import ImportPreview, ImportSummary
from service.review.hours import HoursReport
from service.review.wordings import VariantsReport
from service.storage.accounts import AccountInfo
from service.track.answers import TrackRecord
from service.workspace import Workspace

NOW = "2026-12-01T09:00:00+00:00"
DRAFT = {
    "text": "Our magnolias are coming into flower by the lake this week",
    "account": "loomhaven",
    "planned_at": "2026-12-02T10:00:00+00:00",
    "record": False,
}
# RFC 3339 section 5.6, date-time (full-date "T" full-time, time-offset "Z" or +-HH:MM),
# written out from the grammar.
RFC3339 = re.compile(r"^\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d+)?([Zz]|[+-]\d{2}:\d{2})$")

# (method, path, the service-layer model its 200 answer is)
ANSWERS: list[tuple[str, str, type[BaseModel]]] = [
    ("post", "/v1/precedents", Precedents),
    ("post", "/v1/hours", HoursReport),
    ("post", "/v1/variants", VariantsReport),
    ("get", "/v1/health", Health),
    ("get", "/v1/track-record", TrackRecord),
    ("post", "/v1/account-choices", AccountChoice),
    ("get", "/v1/team", TeamOverview),
]


@pytest.fixture(scope="module")
def client(demo_workspace: Workspace) -> Iterator[TestClient]:
    with TestClient(create_app(workspace=demo_workspace)) as c:
        yield c


@pytest.fixture(scope="module")
def openapi(client: TestClient) -> dict[str, Any]:
    return client.get("/openapi.json").json()


def published(model: type[BaseModel]) -> set[str]:
    """The keys a model writes: its fields not excluded, and computed fields."""
    names = {n for n, f in model.model_fields.items() if not f.exclude}
    return names | set(model.model_computed_fields)


def component(openapi: dict[str, Any], ref_or_schema: dict[str, Any]) -> dict[str, Any]:
    ref = ref_or_schema["$ref"]
    return openapi["components"]["schemas"][ref.rsplit("/", 1)[1]]


def answer_schema(openapi: dict[str, Any], method: str, path: str) -> dict[str, Any]:
    return openapi["paths"][path][method]["responses"]["200"]["content"]["application/json"]["schema"]


@pytest.mark.parametrize(("method", "path", "model"), ANSWERS)
def test_declared_answer_is_the_service_model(
    openapi, method: str, path: str, model: type[BaseModel]
) -> None:
    declared = component(openapi, answer_schema(openapi, method, path))
    assert declared["title"] == model.__name__
    assert set(declared["properties"]) == published(model)


def test_forecast_answer_is_the_forecast_model(openapi) -> None:
    refs = answer_schema(openapi, "post", "/v1/forecasts")["anyOf"]
    declared = {component(openapi, r)["title"]: component(openapi, r) for r in refs}
    assert set(declared) == {"Forecast", "Forecasts"}
    assert set(declared["Forecast"]["properties"]) == published(Forecast)
    assert set(declared["Forecasts"]["properties"]) == published(Forecasts)
    # Internal fields (the log-scale triple, a precedent's row id) are never published.
    assert "log" not in declared["Forecast"]["properties"]
    precedent = component(openapi, declared["Forecast"]["properties"]["precedents"]["items"])
    assert "pk" not in precedent["properties"] and "weight" in precedent["properties"]


def test_accounts_answer_is_the_store_model(openapi) -> None:
    declared = component(openapi, answer_schema(openapi, "get", "/v1/accounts")["items"])
    assert declared["title"] == "AccountInfo"
    assert set(declared["properties"]) == published(AccountInfo)


def test_import_answer_is_the_importer_models(openapi) -> None:
    refs = answer_schema(openapi, "post", "/v1/imports")["anyOf"]
    titles = {component(openapi, r)["title"]: component(openapi, r) for r in refs}
    assert set(titles) == {"ImportSummary", "ImportPreview"}
    assert set(titles["ImportSummary"]["properties"]) == published(ImportSummary)
    assert set(titles["ImportPreview"]["properties"]) == published(ImportPreview)


def test_no_answer_is_copied_by_hand(openapi) -> None:
    """Two components with the same properties would be one answer written twice."""
    seen: dict[frozenset[str], str] = {}
    for name, schema in openapi["components"]["schemas"].items():
        props = frozenset(schema.get("properties", {}))
        if not props:
            continue
        assert props not in seen, f"{name} repeats {seen[props]}"
        seen[props] = name


def test_served_forecast_is_the_model_and_the_cli_writes_the_same(
    client: TestClient, demo_home, embedder, monkeypatch
) -> None:
    from service.cli import app
    from service.cli.base import use_embedder

    monkeypatch.setenv("SOUNDING_NOW", NOW)  # one "now" for both answers
    resp = client.post("/v1/forecasts", json=DRAFT)
    assert resp.status_code == 200, resp.text
    served = resp.json()
    # The served JSON reads back into the model and writes out unchanged.
    assert Forecast.model_validate(served).model_dump(mode="json") == served
    assert set(served) == published(Forecast)
    for key in ("planned_at",):
        assert RFC3339.match(served[key]), served[key]
    assert all(RFC3339.match(p["posted_at"]) for p in served["precedents"])

    use_embedder(embedder)
    monkeypatch.setenv("SOUNDING_HOME", str(demo_home))
    res = CliRunner().invoke(
        app,
        [
            "check",
            DRAFT["text"],
            "--account",
            DRAFT["account"],
            "--at",
            DRAFT["planned_at"],
            "--json",
            "--no-record",
        ],
    )
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout) == served


def _our_modules() -> Iterator[Any]:
    for package in (service, models):
        for info in pkgutil.walk_packages(package.__path__, package.__name__ + "."):
            if info.name.endswith(("onnx_backend", "ray_embedding", "__main__")):
                continue  # optional heavy dependencies (no answers), or a script that runs
            yield importlib.import_module(info.name)


# The error classes keep to_dict, which builds the error body.
EXEMPT_MODULES = {"models.errors"}


def test_no_hand_written_to_dict_remains() -> None:
    found = [
        f"{module.__name__}.{name}"
        for module in _our_modules()
        if module.__name__ not in EXEMPT_MODULES
        for name, cls in inspect.getmembers(module, inspect.isclass)
        if cls.__module__ == module.__name__ and "to_dict" in vars(cls)
    ]
    assert found == []
    # The check can fail: the error classes, exempt above, do define one.
    from models.errors import SoundingError

    assert "to_dict" in vars(SoundingError)
