"""Off loopback, recording a forecast into the track record needs the token."""

from __future__ import annotations

import pytest
from conftest import TOKEN
from fastapi.testclient import TestClient
from sqlalchemy import func, select

from service.api.app import create_app
from service.settings import Settings
from service.storage.tables import ForecastGiven
from service.workspace import Workspace

DRAFT = {"text": "Magnolias in flower by the lake path", "account": "loomhaven"}
HOST = {"Host": "127.0.0.1"}


def _recorded(ws: Workspace) -> int:
    with ws.store.session() as s:
        return int(s.scalar(select(func.count(ForecastGiven.id))) or 0)


@pytest.mark.parametrize("bound", ["0.0.0.0", "192.0.2.10"])
def test_recording_off_loopback_needs_the_token(demo_copy: Workspace, bound: str) -> None:
    ws = Workspace(
        settings=Settings(home=demo_copy.settings.resolved_home, token=TOKEN), embedder=demo_copy.embedder
    )
    with TestClient(create_app(workspace=ws, bound_host=bound)) as c:
        before = _recorded(ws)
        r = c.post("/v1/forecasts", json={**DRAFT, "record": True}, headers=HOST)
        assert r.status_code == 401 and r.json()["error"]["code"] == "unauthorized"
        # Left to the default, the forecast is answered and not recorded.
        r = c.post("/v1/forecasts", json=DRAFT, headers=HOST)
        assert r.status_code == 200, r.text
        assert _recorded(ws) == before
        r = c.post("/v1/forecasts", json=DRAFT, headers={**HOST, "Authorization": f"Bearer {TOKEN}"})
        assert r.status_code == 200 and _recorded(ws) == before + 1
        # Reads stay open off loopback (README, "Off loopback").
        assert c.get("/v1/track-record", headers=HOST).status_code == 200
    ws.close()


def test_recording_on_loopback_needs_no_token(demo_copy: Workspace) -> None:
    with TestClient(create_app(workspace=demo_copy, bound_host="127.0.0.1")) as c:
        before = _recorded(demo_copy)
        r = c.post("/v1/forecasts", json={**DRAFT, "record": True}, headers=HOST)
        assert r.status_code == 200 and _recorded(demo_copy) == before + 1
