"""Stored texts are capped at import (SOUNDING_MAX_TEXT_CHARS), row by row, so
that no answer that shows a precedent can echo an unbounded text."""

from __future__ import annotations

import csv
import io
from pathlib import Path

from fastapi.testclient import TestClient

from service.api.app import create_app
from service.ingest.options import ImportOptions

CAP = 200


def _csv(path: Path, texts: list[str]) -> Path:
    buf = io.StringIO()
    w = csv.writer(buf)
    w.writerow(["post_id", "account", "text", "posted_at", "impressions"])
    for i, text in enumerate(texts):
        w.writerow([f"c{i}", "loomhaven", text, f"2026-03-{i + 1:02d}T10:00:00Z", 100 + i])
    path.write_text(buf.getvalue(), encoding="utf-8")
    return path


def test_a_text_over_the_cap_is_refused_on_its_line_and_the_rest_is_stored(make_workspace, tmp_path):
    ws = make_workspace(max_text_chars=CAP)
    ok = "The magnolia walk opens on Saturday."
    first = ws.import_csv(
        _csv(tmp_path / "a.csv", [ok, "Pond dipping at ten."]), ImportOptions(new_accounts="UTC")
    )
    assert first.added == 2
    texts = [ok, "x" * CAP, "y" * (CAP + 1), "Seed swap in the glasshouse."]
    s = ws.import_csv(_csv(tmp_path / "b.csv", texts))
    # Exactly at the cap is stored; one character over is refused, with its
    # line (header = line 1) and column; the other rows go in.
    assert [(p.line, p.column) for p in s.problems] == [(4, "text")]
    assert f"{CAP + 1:,} characters" in s.problems[0].reason and f"{CAP:,}" in s.problems[0].reason
    # c0 is as before, c1 takes its new (capped-length) text, c3 is new.
    assert (s.added, s.updated, s.unchanged) == (1, 1, 1)
    assert ws.store.counts()["posts"] == 3
    preview = ws.preview_import(_csv(tmp_path / "c.csv", ["z" * (CAP + 5)]))
    assert [(p.line, p.column) for p in preview.problems] == [(2, "text")]


def test_an_answer_echoes_no_text_longer_than_the_cap(make_workspace, tmp_path):
    ws = make_workspace(max_text_chars=CAP)
    long = "Magnolia " * (CAP // 9)  # just under the cap
    texts = [long[:CAP], "Magnolia " * 400, *[f"Magnolias in bloom, day {i}." for i in range(6)]]
    ws.import_csv(_csv(tmp_path / "m.csv", texts), ImportOptions(new_accounts="UTC"))
    with TestClient(create_app(workspace=ws)) as c:
        r = c.post("/v1/precedents", json={"text": "Magnolias", "k": 20})
    assert r.status_code == 200, r.text
    shown = [p["text"] for p in r.json()["precedents"]]
    assert len(shown) == 7 and max(map(len, shown)) <= CAP
