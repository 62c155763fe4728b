"""The page in headless Chromium: typed with the keyboard, checked
against the API's own answer for the same draft and time."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import httpx
from support.serving import BROWSER, CHROMIUM, CHROMIUM_ARGS, serve, shown_count

from service.api.app import create_app

ROOT = Path(__file__).resolve().parents[2]
EFFECTS = json.loads((ROOT / "demo_data" / "effects.json").read_text(encoding="utf-8"))
DRAFT = (
    "The dahlias in the Walled Garden are at their peak this week 🌸 The colour glows in "
    "low sun. #WhatsFlowering"
)
PLANNED = "2026-12-03T12:30"

pytestmark = BROWSER


def test_review_page(demo_workspace, artifacts: Path) -> None:
    from playwright.sync_api import expect, sync_playwright

    with serve(create_app(workspace=demo_workspace)) as base, sync_playwright() as p:
        # The API's own answer for the same draft and time (no offset: the account's zone).
        api = httpx.post(
            f"{base}/v1/forecasts",
            timeout=60,
            json={"text": DRAFT, "account": "loomhaven", "planned_at": PLANNED + ":00"},
        )
        assert api.status_code == 200, api.text
        want = api.json()

        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            outside: list[str] = []
            page.on(
                "request",
                lambda r: (
                    None if r.url.startswith(base) or r.url.startswith("data:") else outside.append(r.url)
                ),
            )
            page.goto(base + "/")
            expect(page).to_have_title("sounding — a sounding board for drafts")
            expect(page.locator("#output")).to_be_hidden()
            # Every account, and "every account" (who should post it) when there are several.
            known = len(httpx.get(f"{base}/v1/accounts").json())
            expect(page.locator("#account option")).to_have_count(known + (known > 1))

            # Keyboard only: Tab from the skip link to the tabs (one stop, the WAI-ARIA
            # tabs pattern), into the draft, type, Tab on.
            page.keyboard.press("Tab")
            assert page.evaluate("document.activeElement.className") == "skip"
            page.keyboard.press("Tab")
            assert page.evaluate("document.activeElement.id") == "tab-check"
            page.keyboard.press("Tab")  # the link to the import preview
            assert page.evaluate("document.activeElement.getAttribute('href')") == "/import"
            page.keyboard.press("Tab")
            assert page.evaluate("document.activeElement.id") == "text"
            page.keyboard.type(DRAFT)
            page.keyboard.press("Tab")
            assert page.evaluate("document.activeElement.id") == "account"
            page.select_option("#account", "loomhaven")
            page.locator("#planned").fill(PLANNED)
            # (a datetime-local field has one Tab stop per part, so skip to the next field)
            page.locator("#metric").focus()
            page.keyboard.press("Tab")
            assert page.evaluate("document.activeElement.id") == "submit"
            page.keyboard.press("Enter")  # submits the form

            expect(page.locator("#output")).to_be_visible(timeout=60_000)
            expect(page.locator("#fc-low")).to_have_text(shown_count(want["low"]))
            expect(page.locator("#fc-median")).to_have_text(shown_count(want["median"]))
            expect(page.locator("#fc-high")).to_have_text(shown_count(want["high"]))
            expect(page.locator("#fc-caution")).to_have_text(want["caution"])
            pct = round(want["backtested_coverage"] * 100)
            expect(page.locator("#fc-coverage")).to_contain_text(f"held in {pct}%")
            first = page.locator("#prec-list li .prec-text").first
            expect(first).to_have_text(want["precedents"][0]["text"])
            expect(page.locator("#contrib-body tr")).to_have_count(len(want["contributions"]["groups"]))
            # The charts: one point per precedent with the metric, one band over the day.
            expect(page.locator("#scatter-chart circle")).to_have_count(
                sum(p["metrics"]["impressions"] is not None for p in want["precedents"])
            )
            expect(page.locator("#hours-chart polygon.band")).to_have_count(1, timeout=60_000)
            expect(page.locator("#hours-summary")).not_to_be_empty()
            assert page.locator("#results").get_attribute("aria-live") == "polite"
            assert page.locator("#error").is_hidden()
            page.screenshot(path=str(artifacts / "review-page.png"), full_page=True)

            # An error: the draft emptied, submitted with Ctrl+Enter -> the API's message.
            page.locator("#text").fill("")
            page.locator("#text").focus()
            page.keyboard.press("Control+Enter")
            box = page.locator("#error[role=alert]")
            expect(box).to_be_visible()
            empty = httpx.post(f"{base}/v1/forecasts", json={"text": "", "account": "loomhaven"})
            assert empty.status_code == 422
            expect(page.locator("#error-message")).to_contain_text(empty.json()["error"]["message"])
            expect(page.locator("#output")).to_be_hidden()  # no stale forecast beside an error

            # Too long: the limit's own message (413).
            limit = demo_workspace.settings.max_draft_chars
            page.locator("#text").fill("x" * (limit + 1))
            page.locator("#submit").focus()
            page.keyboard.press("Enter")
            big = httpx.post(f"{base}/v1/forecasts", json={"text": "x" * (limit + 1), "account": "loomhaven"})
            assert big.status_code == 413
            expect(page.locator("#error-message")).to_contain_text(big.json()["error"]["message"])
            page.screenshot(path=str(artifacts / "review-page-error.png"))

            # The plan's planted near-repeat: the warning shows above the charts.
            plan = {
                r["draft_id"]: r
                for r in csv.DictReader((ROOT / "demo_data" / "plan.csv").open(encoding="utf-8", newline=""))
            }
            q = plan[EFFECTS["plan"]["near_repeat"]["draft_id"]]  # Source: effects.json
            page.locator("#text").fill(q["text"])
            page.locator("#planned").fill(q["planned_at"][:16])  # local wall-clock time (+00:00)
            page.locator("#submit").focus()
            page.keyboard.press("Enter")
            expect(page.locator("#warn-card")).to_be_visible(timeout=60_000)
            expect(page.locator("#warn-list li").first).to_contain_text(
                EFFECTS["plan"]["near_repeat"]["post_id"]
            )
            assert page.locator("#error").is_hidden()
            assert errors == [] and outside == []
        finally:
            browser.close()


def test_the_page_warns_of_a_repeat_in_the_words_asked_for(demo_workspace) -> None:
    """A demo post's words in reverse order: its meaning scores below the
    near-repeat threshold, its words do not; the page's choice decides."""
    from zoneinfo import ZoneInfo

    from history.test_word_repeats import shuffled_repeat
    from playwright.sync_api import expect, sync_playwright

    account, post_id, draft, planned = shuffled_repeat(demo_workspace)
    zone = {a.handle: a.timezone for a in demo_workspace.store.accounts()}[account]
    local = planned.astimezone(ZoneInfo(zone)).strftime("%Y-%m-%dT%H:%M")  # the account's wall clock
    with serve(create_app(workspace=demo_workspace)) as base, sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            page.goto(base + "/")
            expect(page.locator("#account option")).not_to_have_count(0)
            page.locator("#text").fill(draft)
            page.select_option("#account", account)
            page.locator("#planned").fill(local)
            shown = {}
            for match in ("meaning", "words", "both"):
                page.select_option("#match", match)
                page.locator("#submit").click()
                expect(page.locator("#output")).to_be_visible(timeout=60_000)
                expect(page.locator("#submit")).to_have_text("Check draft", timeout=60_000)
                shown[match] = page.locator("#warn-list li").all_text_contents()
            assert not any(post_id in w for w in shown["meaning"])
            assert any(post_id in w for w in shown["words"])
            assert any(post_id in w for w in shown["both"])
            # The versions panel asks the same, with the check form's choices.
            page.locator("#tab-wordings").click()
            expect(page.locator("#w-match option")).to_have_count(3)
            page.locator("#w-text-1").fill(draft)
            page.locator("#w-text-2").fill("Something else entirely")
            page.select_option("#w-account", account)
            page.locator("#w-planned").fill(local)
            for match, warned in (("meaning", False), ("words", True)):
                page.select_option("#w-match", match)
                page.locator("#w-submit").click()
                expect(page.locator("#w-output")).to_be_visible(timeout=60_000)
                expect(page.locator("#w-submit")).to_have_text("Compare", timeout=60_000)
                said = page.locator(".w-warn").all_text_contents()
                assert any(post_id in w for w in said) is warned, match
        finally:
            browser.close()


WORDINGS = [DRAFT, "Dahlia peak week in the Walled Garden: the colours glow in the low sun"]


def test_wordings_and_segments_panels(demo_workspace, artifacts: Path) -> None:
    """The compare-wordings and segments panels, driven with the keyboard and
    checked against the API's own answers to the same requests."""
    from playwright.sync_api import expect, sync_playwright

    with serve(create_app(workspace=demo_workspace)) as base, sync_playwright() as p:
        variants = httpx.post(
            f"{base}/v1/comparisons",
            timeout=60,
            json={"texts": WORDINGS, "account": "loomhaven", "planned_at": PLANNED + ":00"},
        )
        assert variants.status_code == 200, variants.text
        segs = httpx.post(
            f"{base}/v1/segments",
            timeout=60,
            json={"topics": ["flowers in bloom", "volunteering"], "by": None},
        )
        assert segs.status_code == 200, segs.text
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 1000})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(base + "/")
            # Arrow keys move between the tabs.
            page.locator("#tab-check").focus()
            page.keyboard.press("ArrowRight")
            assert page.evaluate("document.activeElement.id") == "tab-wordings"
            expect(page.locator("#wordings-panel")).to_be_visible()
            expect(page.locator("#check-panel")).to_be_hidden()
            page.locator("#w-text-1").fill(WORDINGS[0])
            page.locator("#w-text-2").fill(WORDINGS[1])
            expect(page.locator("#w-account option")).to_have_count(
                len(httpx.get(f"{base}/v1/accounts").json())
            )
            page.select_option("#w-account", "loomhaven")
            page.locator("#w-planned").fill(PLANNED)
            page.locator("#w-submit").focus()
            page.keyboard.press("Enter")
            rows = page.locator("#w-body tr")
            expect(rows).to_have_count(2, timeout=60_000)
            for i, v in enumerate(variants.json()["variants"]):
                cells = rows.nth(i).locator("td")
                expect(cells.nth(0)).to_have_text(str(v["rank"]))
                expect(cells.nth(3)).to_have_text(shown_count(v["median"]))
                expect(cells.nth(4)).to_have_text("yes" if v["tied_with_best"] else "no")
            expect(page.locator("#w-caution")).to_have_text(variants.json()["caution"])
            page.screenshot(path=str(artifacts / "page-wordings.png"), full_page=True)

            page.locator("#tab-wordings").focus()
            page.keyboard.press("ArrowRight")
            assert page.evaluate("document.activeElement.id") == "tab-segments"
            page.locator("#s-topics").fill("flowers in bloom\nvolunteering")
            page.locator("#s-submit").focus()
            page.keyboard.press("Enter")
            want = segs.json()["splits"][0]["segments"]
            seg_rows = page.locator(".seg-table tbody tr")
            expect(seg_rows).to_have_count(len(want), timeout=60_000)
            for i, s in enumerate(want):
                expect(seg_rows.nth(i).locator("th")).to_have_text(s["name"])
                expect(seg_rows.nth(i).locator("td").nth(0)).to_have_text(str(s["n"]))
            expect(page.locator("#s-plot")).to_be_visible(timeout=60_000)
            page.screenshot(path=str(artifacts / "page-segments.png"), full_page=True)
            assert errors == []
        finally:
            browser.close()


def _given(base: str) -> int:
    r = httpx.get(f"{base}/v1/track-record", params={"metric": "impressions"}, timeout=60)
    assert r.status_code == 200, r.text
    return int(r.json()["overall"]["given"])


def test_page_records_only_what_will_be_posted_and_marks_tied_hours(demo_copy, artifacts: Path) -> None:
    """Trying a draft on the page records nothing; "I'll post this" records it once.
    The hour chart's dots are the answer's own tied and few-post hours."""
    from playwright.sync_api import expect, sync_playwright

    with serve(create_app(workspace=demo_copy)) as base, sync_playwright() as p:
        before = _given(base)
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS, headless=True)
        try:
            page = browser.new_page(viewport={"width": 1280, "height": 900})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(base + "/")
            expect(page.locator("#account option")).not_to_have_count(0)
            page.locator("#text").fill(DRAFT)
            page.select_option("#account", "loomhaven_lab")
            page.locator("#planned").fill(PLANNED)
            page.locator("#submit").click()
            expect(page.locator("#output")).to_be_visible(timeout=60_000)
            expect(page.locator("#hours-chart polygon.band")).to_have_count(1, timeout=60_000)
            # Another try: still nothing recorded.
            page.locator("#submit").click()
            expect(page.locator("#submit")).to_have_text("Check draft", timeout=60_000)
            assert _given(base) == before

            # The same day's hours from the API: the dots and the sentence agree with it.
            hours = httpx.post(
                f"{base}/v1/hours",
                timeout=60,
                json={"text": DRAFT, "account": "loomhaven_lab", "day": PLANNED[:10]},
            ).json()
            tied = sum(s["tied_with_best"] for s in hours["slots"])
            few = sum(s["few_posts"] for s in hours["slots"])
            assert few > 0  # the demo's nights are thin
            expect(page.locator("#hours-chart circle.best")).to_have_count(tied)
            expect(page.locator("#hours-chart circle.few")).to_have_count(few)
            expect(page.locator("#hours-summary")).to_have_text(hours["summary"])
            assert not any(s["few_posts"] and s["tied_with_best"] for s in hours["slots"])

            # The form sits at the top of its column, level with the results, also
            # after scrolling (it is not pinned to the middle of the window).
            form = page.locator("#check-panel .compose").bounding_box()
            results = page.locator("#results").bounding_box()
            assert form is not None and results is not None
            assert abs(form["y"] - results["y"]) < 2
            page.mouse.wheel(0, 700)
            page.wait_for_timeout(200)
            form2 = page.locator("#check-panel .compose").bounding_box()
            results2 = page.locator("#results").bounding_box()
            assert form2 is not None and results2 is not None
            assert abs(form2["y"] - results2["y"]) < 2

            # Saying it will be posted records it, once.
            record = page.locator("#record")
            expect(record).to_have_text("I'll post this")
            record.click()
            expect(record).to_have_text("Recorded", timeout=60_000)
            expect(record).to_be_disabled()
            assert _given(base) == before + 1
            page.screenshot(path=str(artifacts / "page-recorded.png"), full_page=True)
            # A new check is a new try: not recorded, and the button is offered again.
            page.locator("#submit").click()
            expect(record).to_have_text("I'll post this", timeout=60_000)
            assert _given(base) == before + 1
            assert errors == []
        finally:
            browser.close()
