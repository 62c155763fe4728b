"""The import page in headless Chromium: a preview stores nothing, the import stores
what the preview showed; a preview from loopback needs no token, importing does."""

from __future__ import annotations

import hashlib
from pathlib import Path

from support.serving import BROWSER, CHROMIUM, CHROMIUM_ARGS, serve

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

pytestmark = BROWSER


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
            # No token: a preview from loopback is still read (it stores nothing). Without a
            # date order the day-first dates are refused, naming the first one, in the
            # page's own words rather than command-line options.
            page.click("#preview")
            expect(page.locator("#error-message")).to_contain_text("'07/01/2026 18:45' on line 2")
            expect(page.locator("#error-message")).to_contain_text("Numeric dates")
            assert "--" not in page.locator("#error-message").inner_text()
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
            # Importing does need the token.
            page.click("#commit")
            expect(page.locator("#error-message")).to_contain_text("needs the service's access token")
            assert ws.store.counts()["posts"] == 0
            page.fill("#token", TOKEN)
            page.click("#preview")
            expect(page.locator("#summary")).to_contain_text("13 rows would be imported")
            page.click("#commit")
            expect(page.locator("#summary")).to_contain_text("added 13")
            assert errors == []
        finally:
            browser.close()
    assert ws.store.counts()["posts"] == 13


def test_saved_mappings_are_a_list_and_unknown_accounts_read_in_page_words(make_workspace) -> None:
    from playwright.sync_api import expect, sync_playwright

    from service.ingest.mappings import save_mapping
    from service.ingest.options import ImportOptions, parse_mapping

    ws = make_workspace(token=TOKEN)
    ws.store.set_account("loomhaven", timezone="Europe/London")
    opts = ImportOptions(mapping=parse_mapping(MAP), date_order="day-first")
    save_mapping(ws.settings.resolved_home, "garden-export", opts)
    with serve(create_app(workspace=ws)) as base, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 1000})
            page.goto(base + "/import")
            expect(page.locator("#mapping option")).to_have_count(2)  # "none" and the saved one
            page.select_option("#mapping", "garden-export")
            page.set_input_files("#file", str(FIXTURES / "messy.csv"))
            page.fill("#account", "loomhavn")
            page.click("#preview")
            msg = page.locator("#error-message")
            expect(msg).to_contain_text("did you mean loomhaven?")
            expect(msg).to_contain_text("The file names a new account")
            assert "--" not in msg.inner_text()
            page.fill("#account", "loomhaven")
            page.click("#preview")
            expect(page.locator("#summary")).to_contain_text("13 rows would be imported")
        finally:
            browser.close()
    assert ws.store.counts()["posts"] == 0
