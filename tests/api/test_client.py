"""The Python client against the real app served by uvicorn on 127.0.0.1,
and the hold-back example script built on it."""

from __future__ import annotations

import csv
import importlib.util
import json
import socket
from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from support.serving import serve

from models.errors import (
    AuthError,
    InputError,
    LimitExceeded,
    NotFound,
    NotReady,
    ServiceUnavailable,
    StoreError,
)
from service.api.app import create_app
from service.api.schemas import DraftIn
from service.client import SoundingClient, error_from

ROOT = Path(__file__).resolve().parents[2]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text(encoding="utf-8"))
AT = "2026-10-14T12:30:00"
DRAFT = (
    "The dahlias in the Walled Garden are at their peak this week 🌸 The colour glows in "
    "low sun. #WhatsFlowering"
)


@pytest.fixture(scope="module")
def base_url(demo_workspace) -> Iterator[str]:
    with serve(create_app(workspace=demo_workspace)) as url:
        yield url


@pytest.fixture()
def client(base_url: str) -> Iterator[SoundingClient]:
    with SoundingClient(base_url=base_url, timeout=60.0) as c:
        yield c


def test_health_matches_the_store(client: SoundingClient, demo_workspace) -> None:
    h = client.health()
    counts = demo_workspace.store.counts()
    assert (h.posts, h.accounts) == (counts["posts"], counts["accounts"])
    assert h.index.state == "ready"


def test_forecast_equals_the_api_answer(client: SoundingClient, demo_workspace) -> None:
    f = client.forecast(DRAFT, account="loomhaven", planned_at=AT)
    raw = (
        TestClient(create_app(workspace=demo_workspace))
        .post("/v1/forecasts", json={"text": DRAFT, "account": "loomhaven", "planned_at": AT})
        .json()
    )
    assert (f.low, f.median, f.high) == (raw["low"], raw["median"], raw["high"])
    assert [p.post_id for p in f.precedents] == [p["post_id"] for p in raw["precedents"]]
    assert f.low <= f.median <= f.high and f.caution


def test_plan_hours_and_compare(client: SoundingClient) -> None:
    drafts = [
        DraftIn(text=DRAFT, account="loomhaven", planned_at=AT, draft_id="a"),
        {"text": DRAFT, "account": "loomhaven_events", "planned_at": AT, "draft_id": "b"},
    ]
    got = client.forecast_plan(drafts)
    assert [f.draft_id for f in got] == ["a", "b"]
    assert [f.account for f in got] == ["loomhaven", "loomhaven_events"]
    # Source: demo_data/effects.json account_base: loomhaven 7.6 > loomhaven_events 7.05.
    assert EFFECTS["account_base"]["loomhaven"] > EFFECTS["account_base"]["loomhaven_events"]
    assert got[0].median > got[1].median
    h = client.best_hours(DRAFT, account="loomhaven", day="2026-03-29")
    assert h.n_slots == 23 and h.timezone == "Europe/London"  # IANA tz: EU spring-forward day
    v = client.compare([DRAFT, DRAFT + " Come early."], account="loomhaven", planned_at=AT)
    assert len(v.variants) == 2 and {x.index for x in v.variants} == {1, 2}


def test_errors_are_the_library_exceptions(client: SoundingClient, demo_workspace) -> None:
    with pytest.raises(NotFound, match="nobody"):
        client.forecast(DRAFT, account="nobody")
    with pytest.raises(InputError, match="text"):
        client.forecast("", account="loomhaven")
    limit = demo_workspace.settings.max_draft_chars
    with pytest.raises(LimitExceeded) as info:
        client.forecast("x" * (limit + 1), account="loomhaven")
    assert info.value.maximum == limit and f"the limit is {limit}" in info.value.message
    with pytest.raises(InputError, match="cannot read time"):
        client.forecast(DRAFT, account="loomhaven", planned_at="next Tuesday")
    with pytest.raises(NotReady):  # only an impressions model is trained in the demo
        client.forecast(DRAFT, account="loomhaven", metric="replies")


def test_auth_and_store_answers_map_back(make_workspace) -> None:
    # A real 401 answer of the app (a change without a token, on an empty workspace),
    # read back by the client's mapper.
    ws = make_workspace("no-token", token=None)
    r = TestClient(create_app(workspace=ws)).delete("/v1/accounts/someone")
    assert r.status_code == 401
    exc = error_from(r.status_code, r.json())
    assert isinstance(exc, AuthError) and exc.message == r.json()["error"]["message"]
    body = {"error": {"code": "store_error", "message": "the database is locked"}}
    exc = error_from(503, body)
    assert isinstance(exc, StoreError) and str(exc) == "the database is locked"


def test_unreachable_service() -> None:
    with socket.socket() as s:  # a port that was free a moment ago: nothing listens there
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    with (
        SoundingClient(base_url=f"http://127.0.0.1:{port}", timeout=5) as c,
        pytest.raises(ServiceUnavailable, match="cannot reach"),
    ):
        c.health()
    assert issubclass(ServiceUnavailable, StoreError)


def _load_example():
    spec = importlib.util.spec_from_file_location("hold_back", ROOT / "examples" / "hold_back.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_hold_back_example_holds_the_planted_repeat(base_url: str, capsys) -> None:
    hold_back = _load_example()
    plan = ROOT / "demo_data" / "plan.csv"
    code = hold_back.main([str(plan), "--base-url", base_url, "--threshold", "0"])
    out = capsys.readouterr().out
    assert code == 0, out
    lines = {ln.split()[1]: ln for ln in out.splitlines() if ln.startswith(("post ", "hold "))}
    with plan.open(encoding="utf-8", newline="") as f:
        ids = [r["draft_id"] for r in csv.DictReader(f)]
    assert sorted(lines) == sorted(ids)
    # Source: demo_data/effects.json plan.near_repeat names the generator's planted repeat.
    planted = EFFECTS["plan"]["near_repeat"]
    assert lines[planted["draft_id"]].startswith("hold")
    assert "near-repeat" in lines[planted["draft_id"]] and planted["post_id"] in lines[planted["draft_id"]]
    # With a threshold of 0 only near-repeats are held.
    held = [d for d, ln in lines.items() if ln.startswith("hold")]
    assert all("near-repeat" in lines[d] for d in held)
    # A threshold above every median holds everything back.
    code = hold_back.main([str(plan), "--base-url", base_url, "--threshold", "1e12"])
    out = capsys.readouterr().out
    assert f"0 to post, {len(ids)} held back" in out


def test_accounts_are_listed_and_changed(make_workspace) -> None:
    from conftest import TOKEN

    ws = make_workspace("accounts", token=TOKEN)
    with serve(create_app(workspace=ws)) as url:
        with SoundingClient(base_url=url, token=TOKEN, timeout=60.0) as c:
            made = c.change_account("river_walks", display_name="River walks", timezone="Europe/Paris")
            assert (made.handle, made.timezone, made.reference) == ("river_walks", "Europe/Paris", False)
            c.change_account("river_walks", reference=True)  # fields left out stay as they were
            listed = {a.handle: a for a in c.accounts()}
            assert listed["river_walks"].display_name == "River walks"
            assert listed["river_walks"].reference is True
            with pytest.raises(InputError, match="Europe/Pariss"):
                c.change_account("river_walks", timezone="Europe/Pariss")  # not an IANA zone name
        with SoundingClient(base_url=url, timeout=60.0) as anonymous:
            with pytest.raises(AuthError):
                anonymous.change_account("someone", timezone="UTC")
            assert [a.handle for a in anonymous.accounts()] == ["river_walks"]  # reading needs no token


def test_a_mistyped_handle_is_refused_in_words(make_workspace) -> None:
    from conftest import AUTH, TOKEN

    ws = make_workspace("handles", token=TOKEN)
    r = TestClient(create_app(workspace=ws)).put(
        "/v1/accounts/river walks", json={"timezone": "UTC"}, headers=AUTH
    )
    assert r.status_code == 422
    message = r.json()["error"]["message"]
    assert message.startswith("path.handle: a handle is letters, digits")
    assert "'river walks'" in message and "^[" not in message  # the rule, not the expression
