"""The segments tab offers the team's own labels as splits (GET /v1/labels)
and shows the split the API gives for one, in headless Chromium."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import httpx
from conftest import NOW, history_csv
from support.serving import BROWSER, chromium_page

from service.api.app import create_app
from service.ingest.options import ImportOptions

pytestmark = BROWSER


def test_a_label_is_a_split_choice(make_workspace, tmp_path: Path, artifacts: Path, monkeypatch) -> None:
    from playwright.sync_api import expect

    monkeypatch.setenv("SOUNDING_NOW", NOW.isoformat())
    rows = list(csv.reader(io.StringIO(history_csv(60).decode())))
    rows[0].append("campaign")
    for i, row in enumerate(rows[1:]):
        row.append(("bulb week", "open gardens", "")[i % 3])
    path = tmp_path / "history.csv"
    with path.open("w", newline="", encoding="utf-8") as f:
        csv.writer(f).writerows(rows)
    ws = make_workspace()
    ws.import_csv(path, ImportOptions(new_accounts="UTC", labels=("campaign",)))
    with chromium_page(create_app(workspace=ws)) as (base, page, errors):
        want = httpx.post(f"{base}/v1/segments", json={"by": "label:campaign"}, timeout=60)
        assert want.status_code == 200, want.text
        segments = want.json()["splits"][0]["segments"]
        assert [s["name"] for s in segments] == ["bulb week", "open gardens", "no label"]
        page.goto(base + "/#segments")
        choice = page.locator("#s-by option[value='label:campaign']")
        expect(choice).to_have_text("label: campaign (40 posts)")
        page.select_option("#s-by", "label:campaign")
        page.locator("#s-submit").focus()
        page.keyboard.press("Enter")
        seg_rows = page.locator(".seg-table tbody tr")
        expect(seg_rows).to_have_count(len(segments), timeout=60_000)
        for i, s in enumerate(segments):
            expect(seg_rows.nth(i).locator("th")).to_have_text(s["name"])
            expect(seg_rows.nth(i).locator("td").nth(0)).to_have_text(str(s["n"]))
        expect(page.locator("#s-plot")).to_be_visible(timeout=60_000)
        page.screenshot(path=str(artifacts / "page-segments-label.png"), full_page=True)
        assert errors == []
