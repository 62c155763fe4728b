"""The import page in headless Chromium: a preview stores nothing, the import stores
what the preview showed; both go through the token."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest
from support.serving import CHROMIUM, CHROMIUM_ARGS, serve

from service.api.app import create_app

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures" / "exports"
TOKEN = "page-import-token-0123456789abcdef"
MAP = [
    "post_id=Post ID",
    "text=Message",
    "posted_at=Published",
    "impressions=Views",
    "engagements=Interactions",
    "likes=Likes",
    "has_media=Media",
    "engagement_rate=Engagement rate",
]

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(
        not CHROMIUM.exists(), reason="Debian's chromium is not at /usr/bin/chromium (CI installs it)"
    ),
]


def test_import_page_previews_then_imports(make_workspace, artifacts: Path) -> None:
    from playwright.sync_api import expect, sync_playwright

    ws = make_workspace(token=TOKEN)
    ws.store.set_account("loomhaven", timezone="Europe/London")
    db = ws.settings.resolved_home / "sounding.db"
    with serve(create_app(workspace=ws)) as base, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 1000})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(base + "/import")
            page.set_input_files("#file", str(FIXTURES / "messy.csv"))
            page.fill("#map", "\n".join(MAP))
            page.fill("#account", "loomhaven")
            # Without the token: refused, nothing stored.
            page.click("#preview")
            expect(page.locator("#error")).to_be_visible()
            page.fill("#token", TOKEN)
            # Without a date order the day-first dates are refused, naming the first one.
            page.click("#preview")
            expect(page.locator("#error-message")).to_contain_text("'07/01/2026 18:45' on line 2")
            before = hashlib.sha256(db.read_bytes()).hexdigest()
            page.select_option("#date-order", "day-first")
            page.click("#preview")
            expect(page.locator("#summary")).to_contain_text("13 rows would be imported")
            # lh-104: 02:30 BST on 29 March is 01:30 UTC (Europe/London rules, zoneinfo).
            row = page.locator("#rows tbody tr").nth(3)
            expect(row).to_contain_text("2026-03-29 01:30")
            expect(row).to_contain_text("2026-03-29 02:30+01:00 Europe/London")
            expect(row).to_contain_text("impressions ~2,300,000")
            assert ws.store.counts()["posts"] == 0
            assert hashlib.sha256(db.read_bytes()).hexdigest() == before
            page.screenshot(path=str(artifacts / "import-page.png"), full_page=True)
            page.click("#commit")
            expect(page.locator("#summary")).to_contain_text("added 13")
            assert errors == []
        finally:
            browser.close()
    assert ws.store.counts()["posts"] == 13
