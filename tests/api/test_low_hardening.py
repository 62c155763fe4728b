"""Small defences: a blank token is no token, /docs keeps the schema local and
HTML answers carry a Content-Security-Policy, a NaN coverage is named as such."""

from __future__ import annotations

import pytest
from conftest import TOKEN
from fastapi.testclient import TestClient

from models.errors import InputError
from models.metrics import check_coverage
from service.api.app import create_app
from service.cli.history import check_bind
from service.settings import Settings

HOST = {"Host": "127.0.0.1"}


@pytest.mark.parametrize("token", [" " * 32, "\t" * 40, " " * 31 + "x"])
def test_the_bind_check_refuses_a_blank_token(token: str) -> None:
    with pytest.raises(InputError):
        check_bind("0.0.0.0", Settings(token=token))


def test_the_bind_check_takes_a_long_token() -> None:
    check_bind("0.0.0.0", Settings(token="k" * 32))


@pytest.fixture()
def client(make_workspace):
    ws = make_workspace(token=TOKEN)
    with TestClient(create_app(workspace=ws, bound_host="127.0.0.1")) as c:
        yield c


def test_docs_switch_off_the_online_validator_and_carry_a_policy(client: TestClient) -> None:
    r = client.get("/docs", headers=HOST)
    assert r.status_code == 200
    assert '"validatorUrl": null' in r.text
    policy = r.headers["content-security-policy"]
    # CSP Level 3 (W3C): default-src 'self' keeps every fetch on this origin.
    assert "default-src 'self'" in policy and "frame-ancestors 'none'" in policy
    assert "content-security-policy" in client.get("/", headers=HOST).headers
    assert "content-security-policy" not in client.get("/v1/health", headers=HOST).headers


def test_a_nan_coverage_is_asked_for_as_a_number(client: TestClient) -> None:
    body = b'{"text": "Roses", "account": "loomhaven", "coverage": NaN}'
    r = client.post("/v1/forecasts", content=body, headers={**HOST, "content-type": "application/json"})
    assert r.status_code == 422
    assert "a number between 0.5 and 0.95" in r.json()["error"]["message"]
    with pytest.raises(InputError, match=r"a number between 0\.5 and 0\.95"):
        check_coverage(float("nan"))
