"""Forecasts for a scheduling script's plan file: drafts planned for posting.

Input columns: ``draft_id, account, text, planned_at`` and, optionally,
``has_media`` (true/false, as in the import format). Output columns:
``draft_id, metric, low, median, high, coverage, model_version,
top_precedent_id, warnings``. A row that cannot be forecast keeps its place
with its reason in ``warnings``; the other rows are still forecast.
Both files are RFC 4180 CSV in UTF-8.

``draft_id`` names a row in the answer, so it must be unique: a file that
repeats one is refused as a whole, naming the lines, before anything is
forecast (two rows with one id could not be told apart in the output).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

from models.errors import CSVFormatError, InputError, SoundingError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC
from service.forecasting import Draft, Forecast
from service.importer import _FALSE, _TRUE, check_encoding
from service.timeparse import parse_time
from service.track_record import give
from service.workspace import Workspace

PLAN_COLUMNS = ("draft_id", "account", "text", "planned_at")
OPTIONAL_COLUMNS = ("has_media",)
OUT_COLUMNS = (
    "draft_id",
    "metric",
    "low",
    "median",
    "high",
    "coverage",
    "model_version",
    "top_precedent_id",
    "warnings",
)


@dataclass(frozen=True, slots=True)
class PlanRow:
    """One data row of a plan file: its draft, or why it has none."""

    line: int
    draft_id: str
    draft: Draft | None
    problem: str = ""


@dataclass(frozen=True, slots=True)
class PlanCounts:
    rows: int
    forecast: int
    failed: int


def read_plan(ws: Workspace, path: Path) -> list[PlanRow]:
    """Every data row of a plan file, in file order."""
    check_encoding(path)
    rows: list[PlanRow] = []
    with path.open("r", encoding="utf-8-sig", newline="") as f:
        reader = csv.DictReader(f)
        missing = [c for c in PLAN_COLUMNS if c not in (reader.fieldnames or [])]
        if missing:
            raise CSVFormatError(
                f"the plan file lacks column(s) {', '.join(missing)} "
                f"(found: {', '.join(reader.fieldnames or []) or 'none'})",
                where=str(path),
            )
        start = reader.line_num + 1  # the line after the header
        for n, rec in enumerate(reader, start=1):
            line, start = start, reader.line_num + 1
            draft_id = (rec.get("draft_id") or "").strip() or f"row-{n}"
            where = f"{path.name}, line {line}"
            try:
                account = (rec.get("account") or "").strip()
                tz = ws.store.account(account).timezone
                text = ws.forecaster.limits.check_draft(rec.get("text") or "")
                planned = (
                    parse_time(rec["planned_at"], tz=tz, where=where)
                    if (rec.get("planned_at") or "").strip()
                    else None
                )
                media = _flag(rec.get("has_media"), column="has_media", where=where)
                rows.append(
                    PlanRow(
                        line,
                        draft_id,
                        Draft(
                            text=text,
                            account=account,
                            planned_at=planned,
                            draft_id=draft_id,
                            has_media=bool(media),
                        ),
                    )
                )
            except SoundingError as exc:
                rows.append(PlanRow(line, draft_id, None, exc.message))
    _refuse_duplicates(rows, path)
    return rows


def _refuse_duplicates(rows: list[PlanRow], path: Path) -> None:
    lines: dict[str, list[int]] = {}
    for r in rows:
        lines.setdefault(r.draft_id, []).append(r.line)
    repeated = {d: ls for d, ls in lines.items() if len(ls) > 1}
    if repeated:
        said = "; ".join(f"{d!r} on lines {', '.join(map(str, ls))}" for d, ls in repeated.items())
        raise CSVFormatError(
            f"draft_id must be unique in a plan file: {said}",
            where=str(path),
            field="draft_id",
            value=next(iter(repeated)),
            hint="give each row its own draft_id",
        )


def forecast_plan(
    ws: Workspace,
    src: Path,
    dest: Path,
    *,
    metric: str = DEFAULT_METRIC,
    coverage: float = DEFAULT_COVERAGE,
    record: bool = True,
) -> PlanCounts:
    """Forecast every row of ``src`` into ``dest``."""
    ws.forecaster.model(metric)  # no model, or an unknown metric, fails the whole file
    rows = read_plan(ws, Path(src))
    todo = [i for i, r in enumerate(rows) if r.draft is not None]
    results: dict[int, Forecast] = {}
    problems: dict[int, str] = {i: r.problem for i, r in enumerate(rows) if r.draft is None}
    drafts = [d for d in (rows[i].draft for i in todo) if d is not None]
    try:
        # Adapted, staleness-checked and recorded in the track record (issue 11).
        found = give(ws, drafts, metric=metric, coverage=coverage, record=record, source="plan")
        results.update(zip(todo, found, strict=True))
    except SoundingError:
        # One draft spoiled the batch: forecast them one by one to isolate it.
        for i, d in zip(todo, drafts, strict=True):
            try:
                results[i] = give(ws, [d], metric=metric, coverage=coverage, record=record, source="plan")[0]
            except SoundingError as one:
                problems[i] = one.message
    Path(dest).parent.mkdir(parents=True, exist_ok=True)
    with Path(dest).open("w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)  # RFC 4180 quoting; csv's default line end is CRLF
        w.writerow(OUT_COLUMNS)
        for i, row in enumerate(rows):
            fc = results.get(i)
            if fc is None:
                w.writerow(
                    [row.draft_id, metric, "", "", "", coverage, "", "", problems.get(i) or "not forecast"]
                )
                continue
            top = fc.precedents[0].post_id if fc.precedents else ""
            w.writerow(
                [
                    row.draft_id,
                    metric,
                    fc.low,
                    fc.median,
                    fc.high,
                    fc.coverage,
                    fc.model_version,
                    top,
                    "; ".join(fc.warnings),
                ]
            )
    return PlanCounts(rows=len(rows), forecast=len(results), failed=len(rows) - len(results))


def _flag(raw: str | None, *, column: str, where: str) -> bool:
    """A true/false cell, read as the import format reads has_media (empty: false)."""
    v = (raw or "").strip().lower()
    if v in _TRUE:
        return True
    if v in _FALSE:
        return False
    raise InputError(f"{raw!r} is not true or false", where=where, field=column, value=raw)
