"""Forecasts for a scheduling script's queue file.

Input columns: ``draft_id, account, text, planned_at``. Output columns:
``draft_id, metric, low, median, high, coverage, model_version,
top_precedent_id, warnings``. A row that cannot be forecast keeps its place
with its reason in ``warnings``; the other rows are still forecast.
Both files are RFC 4180 CSV in UTF-8.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

from models.errors import CSVFormatError, SoundingError

from .forecasting import Draft, Forecast
from .importer import check_encoding
from .timeparse import parse_time
from .track_record import give

QUEUE_COLUMNS = ("draft_id", "account", "text", "planned_at")
OUT_COLUMNS = ("draft_id", "metric", "low", "median", "high", "coverage", "model_version",
               "top_precedent_id", "warnings")


def read_queue(ws: Any, path: Path) -> list[tuple[str, Draft | None, str]]:
    """(draft_id, draft or None, problem) per data row, in file order."""
    check_encoding(path)
    rows: list[tuple[str, Draft | None, str]] = []
    with path.open("r", encoding="utf-8-sig", newline="") as f:
        reader = csv.DictReader(f)
        missing = [c for c in QUEUE_COLUMNS if c not in (reader.fieldnames or [])]
        if missing:
            raise CSVFormatError(
                f"the queue file lacks column(s) {', '.join(missing)} "
                f"(found: {', '.join(reader.fieldnames or []) or 'none'})",
                where=str(path),
            )
        for n, rec in enumerate(reader, start=1):
            draft_id = (rec.get("draft_id") or "").strip() or f"row-{n}"
            where = f"{path.name}, line {reader.line_num}"
            try:
                account = (rec.get("account") or "").strip()
                tz = ws.store.account(account).timezone
                text = ws.check_draft(rec.get("text") or "")
                planned = (parse_time(rec["planned_at"], tz=tz, where=where)
                           if (rec.get("planned_at") or "").strip() else None)
                rows.append((draft_id, Draft(text=text, account=account, planned_at=planned,
                                             draft_id=draft_id), ""))
            except SoundingError as exc:
                rows.append((draft_id, None, exc.message))
    return rows


def forecast_queue(ws: Any, src: Path, dest: Path, *, metric: str = "impressions",
                   coverage: float = 0.8, record: bool = True) -> dict[str, int]:
    """Forecast every row of ``src`` into ``dest``; returns counts."""
    ws.forecaster.model(metric)  # no model, or an unknown metric, fails the whole file
    rows = read_queue(ws, Path(src))
    results: dict[str, Forecast] = {}
    problems: dict[str, str] = {}
    drafts = [d for _, d, _ in rows if d is not None]
    try:
        # Track record hook (issue 11): adapted, staleness-checked and recorded.
        for f in give(ws, drafts, metric=metric, coverage=coverage, record=record, source="plan"):
            results[f.draft_id or ""] = f
    except SoundingError:
        # One draft spoiled the batch: forecast them one by one to isolate it.
        for d in drafts:
            try:
                results[d.draft_id or ""] = give(ws, [d], metric=metric, coverage=coverage,
                                                 record=record, source="plan")[0]
            except SoundingError as one:
                problems[d.draft_id or ""] = one.message
    Path(dest).parent.mkdir(parents=True, exist_ok=True)
    with Path(dest).open("w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)  # RFC 4180 quoting; csv's default line end is CRLF
        w.writerow(OUT_COLUMNS)
        for draft_id, _, problem in rows:
            fc = results.get(draft_id)
            if fc is None:
                w.writerow([draft_id, metric, "", "", "", coverage, "", "",
                            problem or problems.get(draft_id, "not forecast")])
                continue
            top = fc.precedents[0]["post_id"] if fc.precedents else ""
            w.writerow([draft_id, metric, fc.low, fc.median, fc.high, fc.coverage,
                        fc.model_version, top, "; ".join(fc.warnings)])
    return {"rows": len(rows), "forecast": len(results), "failed": len(rows) - len(results)}
