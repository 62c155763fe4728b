"""The analyst's tabs of the page in headless Chromium, driven with the
keyboard and checked against the API's own answers to the same requests."""

from __future__ import annotations

from pathlib import Path

import httpx
from support.serving import BROWSER, chromium_page, shown_count

from service.api.app import create_app

pytestmark = BROWSER


def test_spread_tab(demo_workspace, artifacts: Path) -> None:
    from playwright.sync_api import expect

    with chromium_page(create_app(workspace=demo_workspace)) as (base, page, errors):
        want = httpx.get(f"{base}/v1/distribution", params={"account": "loomhaven"}, timeout=60)
        assert want.status_code == 200, want.text
        answer = want.json()
        page.goto(base + "/#spread")
        expect(page.locator("#spread-panel")).to_be_visible()
        expect(page.locator("#d-account option[value='loomhaven']")).to_have_count(1)
        page.select_option("#d-account", "loomhaven")
        page.locator("#d-submit").focus()
        page.keyboard.press("Enter")
        cells = page.locator("#d-summary-row td")
        expect(cells).to_have_count(5, timeout=60_000)
        expect(cells.nth(0)).to_have_text(shown_count(answer["summary"]["median"]))
        expect(cells.nth(3)).to_have_text(shown_count(answer["summary"]["p99"]))
        expect(page.locator("#d-reading")).to_have_text(answer["reading"])
        expect(page.locator("#d-fits-body tr")).to_have_count(len(answer["tail"]["comparisons"]))
        expect(page.locator("#d-note")).to_contain_text("association")
        expect(page.locator("#d-plot")).to_be_visible(timeout=60_000)
        page.screenshot(path=str(artifacts / "page-spread.png"), full_page=True)
        assert errors == []


def test_over_time_tab(demo_workspace, artifacts: Path) -> None:
    from playwright.sync_api import expect

    with chromium_page(create_app(workspace=demo_workspace)) as (base, page, errors):
        body = {"by": "month", "topics": ["volunteering"]}
        want = httpx.post(f"{base}/v1/trends", json=body, timeout=60)
        assert want.status_code == 200, want.text
        answer = want.json()
        page.goto(base + "/#spread")
        page.locator("#tab-spread").focus()
        page.keyboard.press("ArrowRight")
        assert page.evaluate("document.activeElement.id") == "tab-trends"
        page.locator("#t-topics").fill("volunteering")
        page.locator("#t-submit").focus()
        page.keyboard.press("Enter")
        cards = page.locator(".t-series")
        expect(cards).to_have_count(len(answer["series"]), timeout=60_000)
        for i, s in enumerate(answer["series"]):
            expect(cards.nth(i).locator("h3")).to_have_text(s["name"])
            expect(cards.nth(i).locator("tbody tr")).to_have_count(len(s["rows"]))
            first = cards.nth(i).locator("tbody tr").nth(0).locator("td")
            expect(first.nth(0)).to_have_text(str(s["rows"][0]["n"]))
            expect(first.nth(2)).to_have_text(shown_count(s["rows"][0]["median"]))
            expect(cards.nth(i).locator(".t-reading")).to_contain_text(s["trend"]["reading"])
        expect(page.locator("#t-plot")).to_be_visible(timeout=60_000)
        page.screenshot(path=str(artifacts / "page-trends.png"), full_page=True)
        assert errors == []


def test_topics_tab_and_map(demo_workspace, artifacts: Path) -> None:
    from playwright.sync_api import expect

    with chromium_page(create_app(workspace=demo_workspace)) as (base, page, errors):
        want = httpx.get(f"{base}/v1/topics", timeout=120)
        assert want.status_code == 200, want.text
        answer = want.json()
        page.goto(base + "/#found")
        expect(page.locator("#found-panel")).to_be_visible()
        page.locator("#f-submit").focus()
        page.keyboard.press("Enter")
        rows = page.locator("#f-body tr")
        expect(rows).to_have_count(len(answer["topics"]), timeout=120_000)
        for i, t in enumerate(answer["topics"]):
            expect(rows.nth(i).locator("th")).to_have_text(t["name"])
            expect(rows.nth(i).locator("td").nth(0)).to_have_text(str(t["n"]))
        points = page.locator("#f-map circle.f-point")
        expect(points).to_have_count(answer["n_posts"], timeout=120_000)
        expect(page.locator("#f-map text.f-centre")).to_have_count(len(answer["topics"]))
        first = points.nth(0)
        post = first.get_attribute("data-post")
        first.hover(force=True)
        texts = {pid: t for t in answer["topics"] for pid in t["post_ids"]}
        expect(page.locator("#f-hover")).to_contain_text(texts[post]["name"])
        expect(page.locator("#f-map-note")).to_contain_text("approximate")
        page.screenshot(path=str(artifacts / "page-topics.png"), full_page=True)
        assert errors == []


def test_surprises_tab(demo_workspace, artifacts: Path) -> None:
    from playwright.sync_api import expect

    with chromium_page(create_app(workspace=demo_workspace)) as (base, page, errors):
        want = httpx.get(f"{base}/v1/surprises", timeout=300)
        assert want.status_code == 200, want.text
        answer = want.json()
        page.goto(base + "/#surprises")
        page.locator("#x-submit").focus()
        page.keyboard.press("Enter")
        items = page.locator(".x-item")
        expect(items).to_have_count(len(answer["better"]) + len(answer["worse"]), timeout=300_000)
        for i, s in enumerate([*answer["better"], *answer["worse"]]):
            expect(items.nth(i)).to_have_attribute("data-post", s["post_id"])
            expect(items.nth(i).locator(".x-figures")).to_contain_text(shown_count(s["outcome"]))
        expect(page.locator("#x-summary")).to_contain_text(f"{answer['outside']} of {answer['n_forecast']}")
        expect(page.locator("#x-note")).to_have_text(answer["note"])
        page.screenshot(path=str(artifacts / "page-surprises.png"), full_page=True)
        assert errors == []
