"""The team on the page, in headless Chromium: the check tab's "every
account" choice and the team tab, each checked against the API's own answer."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest
from conftest import NOW
from support.serving import BROWSER, CHROMIUM, CHROMIUM_ARGS, serve, shown_count
from support.team_history import ACCOUNTS, make_team

from models.embedding import Embedder
from service.api.app import create_app

DRAFT = "The bee hotel hosts a talk this week"
PLANNED = "2026-12-03T12:30"

pytestmark = BROWSER


@pytest.fixture(scope="module")
def base(tmp_path_factory: pytest.TempPathFactory, embedder: Embedder) -> Iterator[str]:
    """The generated team served on loopback, its clock fixed at NOW."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SOUNDING_NOW", NOW.isoformat())
        ws, _ = make_team(tmp_path_factory.mktemp("team") / "home", embedder, NOW)
        try:
            with serve(create_app(workspace=ws)) as url:
                yield url
        finally:
            ws.close()


def test_every_account_in_the_check_tab(base: str, artifacts: Path) -> None:
    from playwright.sync_api import expect, sync_playwright

    with sync_playwright() as p:
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
                expect(cells.nth(4)).to_have_text(shown_count(r["median"]))
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


def test_the_team_tab(base: str, artifacts: Path) -> None:
    from playwright.sync_api import expect, sync_playwright

    want = httpx.get(f"{base}/v1/team", timeout=120)
    assert want.status_code == 200, want.text
    team = want.json()
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(base + "/#team")
            page.locator("#tab-team").click()
            expect(page.locator("#team-panel")).to_be_visible()
            page.locator("#tm-submit").click()
            expect(page.locator("#tm-output")).to_be_visible(timeout=120_000)
            rows = page.locator("#tm-body tr")
            expect(rows).to_have_count(len(team["accounts"]))
            for i, a in enumerate(team["accounts"]):
                cells = rows.nth(i).locator("td, th")
                expect(cells.nth(0)).to_have_text(a["account"])
                expect(cells.nth(1)).to_have_text(f"{a['settled']:,}")
                expect(cells.nth(2)).to_have_text(f"{round(a['share'] * 100)}%")
                expect(cells.nth(5)).to_have_text(shown_count(a["median"]))
                card = page.locator(f'#tm-cards section[data-account="{a["account"]}"] li')
                expect(card).to_have_text(a["lines"])
            expect(page.locator("#tm-note")).to_have_text(team["note"])
            page.screenshot(path=str(artifacts / "page-team.png"), full_page=True)
            assert not errors, errors
        finally:
            browser.close()
