"""Changing an account over HTTP: reference or team, a follower count."""

from __future__ import annotations

from conftest import AUTH, TOKEN
from fastapi.testclient import TestClient

from service.api.app import create_app


def test_put_marks_a_reference_account_and_records_followers(make_workspace) -> None:
    ws = make_workspace(token=TOKEN)
    with TestClient(create_app(workspace=ws)) as c:
        body = {
            "reference": True,
            "timezone": "Europe/London",
            "followers": 4200,
            "since": "2026-03-01T00:00:00Z",
        }
        assert c.put("/v1/accounts/fernbrook_park", json=body).status_code == 401  # a change needs the token
        r = c.put("/v1/accounts/fernbrook_park", json=body, headers=AUTH)
        assert r.status_code == 200, r.text
        assert r.json() == {
            "handle": "fernbrook_park",
            "display_name": None,
            "timezone": "Europe/London",
            "posts": 0,
            "reference": True,
        }
        assert [a["reference"] for a in c.get("/v1/accounts").json()] == [True]
        assert [(h, n) for h, _, n in ws.store.follower_counts()] == [("fernbrook_park", 4200)]
        # Back to the team; fields left out stay as they were.
        r = c.put("/v1/accounts/fernbrook_park", json={"reference": False}, headers=AUTH)
        assert r.json()["reference"] is False and r.json()["timezone"] == "Europe/London"
        # A count below 0 or an unknown zone is refused by name, and nothing changes.
        bad = c.put("/v1/accounts/fernbrook_park", json={"followers": -1}, headers=AUTH)
        assert bad.status_code == 422 and "followers" in bad.text
        bad = c.put("/v1/accounts/fernbrook_park", json={"timezone": "Mars/Olympus"}, headers=AUTH)
        assert bad.status_code == 422 and bad.json()["error"]["field"] == "timezone"
        assert len(ws.store.follower_counts()) == 1
