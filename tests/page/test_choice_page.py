"""The check tab's "every account" choice in headless Chromium, checked
against the API's own answer for the same draft and time."""

from __future__ import annotations

import math
from pathlib import Path

import httpx
import pytest
from conftest import NOW
from support.serving import CHROMIUM, CHROMIUM_ARGS, serve
from support.team_history import ACCOUNTS, make_team

from models.embedding import Embedder
from service.api.app import create_app

DRAFT = "The bee hotel hosts a talk this week"
PLANNED = "2026-12-03T12:30"

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(
        not CHROMIUM.exists(), reason="Debian's chromium is not at /usr/bin/chromium (CI installs it)"
    ),
]


def _shown(v: float) -> str:
    """How the page writes a count: rounded half up, with thousands separators."""
    return f"{math.floor(v + 0.5):,}"


def test_every_account_in_the_check_tab(
    tmp_path: Path, embedder: Embedder, artifacts: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from playwright.sync_api import expect, sync_playwright

    monkeypatch.setenv("SOUNDING_NOW", NOW.isoformat())
    ws, _ = make_team(tmp_path / "home", embedder, NOW)
    try:
        with serve(create_app(workspace=ws)) as base, sync_playwright() as p:
            want = httpx.post(
                f"{base}/v1/account-choices",
                timeout=60,
                json={"text": DRAFT, "accounts": ["all"], "planned_at": PLANNED + ":00"},
            )
            assert want.status_code == 200, want.text
            rows = want.json()["accounts"]
            browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
            try:
                page = browser.new_page(viewport={"width": 1280, "height": 900})
                errors: list[str] = []
                page.on("pageerror", lambda e: errors.append(str(e)))
                page.goto(base + "/")
                # Every account, then the choice that ranks them.
                expect(page.locator("#account option")).to_have_count(len(ACCOUNTS) + 1)
                page.locator("#text").fill(DRAFT)
                page.select_option("#account", label="every account")
                expect(page.locator("#planned-help")).to_contain_text("each account's own time zone")
                page.locator("#planned").fill(PLANNED)
                page.locator("#submit").click()
                expect(page.locator("#choice-output")).to_be_visible(timeout=60_000)
                expect(page.locator("#output")).to_be_hidden()
                body = page.locator("#choice-body tr")
                expect(body).to_have_count(len(rows))
                for i, r in enumerate(rows):
                    cells = body.nth(i).locator("td, th")
                    expect(cells.nth(0)).to_have_text(str(r["rank"]))
                    expect(cells.nth(1)).to_have_text(r["account"])
                    expect(cells.nth(4)).to_have_text(_shown(r["median"]))
                    expect(cells.nth(5)).to_have_text("yes" if r["tied_with_best"] else "no")
                    expect(cells.nth(6)).to_have_text(r["reason"])
                expect(page.locator("#choice-summary")).to_have_text(want.json()["summary"])
                expect(page.locator("#choice-note")).to_contain_text("Not recorded")
                page.screenshot(path=str(artifacts / "page-accounts-choice.png"), full_page=True)
                # Back to one account: the single forecast, and the table goes away.
                page.select_option("#account", "fernside")
                page.locator("#submit").click()
                expect(page.locator("#output")).to_be_visible(timeout=60_000)
                expect(page.locator("#choice-output")).to_be_hidden()
                assert not errors, errors
            finally:
                browser.close()
    finally:
        ws.close()
