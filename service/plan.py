"""Forecasts for a scheduling script's plan file: drafts planned for posting.

Input columns: ``draft_id, account, text, planned_at`` and, optionally,
``has_media`` (true/false, as in the import format); ``account`` may come
from the options instead (service.ingest.plan_options), and times are read with
the same options as import (zone, time format, date order). Output columns:
``draft_id, account, text, planned_local, metric, low, median, high,
coverage, near_repeat, model_version, top_precedent_id, warnings``, counts
as whole numbers. A row that cannot be forecast keeps its place with its
reason in ``warnings``; the other rows are still forecast. Both files are
RFC 4180 CSV in UTF-8.

``draft_id`` names a row in the answer, so it must be unique: a file that
repeats one is refused as a whole, naming the lines, before anything is
forecast (two rows with one id could not be told apart in the output).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass, field
from pathlib import Path

from models.errors import CSVFormatError, InputError, SoundingError
from models.metrics import DEFAULT_COVERAGE, DEFAULT_METRIC
from service.checking import check_drafts
from service.forecast.answer import Forecast
from service.forecast.draft import Draft, make_draft, planned_time
from service.history.match_modes import Match
from service.ingest.encodings import check_text
from service.ingest.flags import read_flag
from service.ingest.plan_options import PlanOptions
from service.ingest.timestamps import TimeReader, check_date_order
from service.storage.handles import fold_handle
from service.workspace import Workspace

PLAN_COLUMNS = ("draft_id", "account", "text", "planned_at")
OPTIONAL_COLUMNS = ("has_media",)
OUT_COLUMNS = (
    "draft_id",
    "account",
    "text",
    "planned_local",
    "metric",
    "low",
    "median",
    "high",
    "coverage",
    "near_repeat",
    "model_version",
    "top_precedent_id",
    "warnings",
)
#: Metrics that are rates, written with decimals; every other one is a count.
RATES = frozenset({"engagement_rate"})


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
    #: Each row as written to the forecasts file (OUT_COLUMNS), in file order.
    lines: list[dict[str, str]] = field(default_factory=list)


def _check_dates(path: Path, times: TimeReader) -> None:
    """Refuse planned times that read day-first and month-first when no
    order was given, as import does (before anything is forecast)."""
    with path.open("r", encoding="utf-8-sig", newline="") as f:
        reader = csv.DictReader(f)
        values = ((n + 2, rec.get("planned_at") or "") for n, rec in enumerate(reader))
        check_date_order(times, values, where=str(path), column="planned_at")


def read_plan(ws: Workspace, path: Path, options: PlanOptions | None = None) -> list[PlanRow]:
    """Every data row of a plan file, in file order."""
    o = (options or PlanOptions()).check()
    check_text(path)
    times = TimeReader(layout=o.layout())
    rows: list[PlanRow] = []
    with path.open("r", encoding="utf-8-sig", newline="") as f:
        reader = csv.DictReader(f)
        needed = [c for c in PLAN_COLUMNS if not (c == "account" and o.account)]
        missing = [c for c in needed if c not in (reader.fieldnames or [])]
        if missing:
            raise CSVFormatError(
                f"the plan file lacks column(s) {', '.join(missing)} "
                f"(found: {', '.join(reader.fieldnames or []) or 'none'})",
                where=str(path),
                hint="or give the account for every row" if missing == ["account"] else None,
            )
        _check_dates(path, times)
        start = reader.line_num + 1  # the line after the header
        for n, rec in enumerate(reader, start=1):
            line, start = start, reader.line_num + 1
            draft_id = (rec.get("draft_id") or "").strip() or f"row-{n}"
            where = f"{path.name}, line {line}"
            try:
                account = fold_handle(rec.get("account") or "") or o.account or ""
                if not account:
                    raise InputError("the account is empty", where=where, field="account")
                # An unknown account is refused here, naming the closest handles.
                planned = planned_time(
                    ws, account, rec.get("planned_at"), where=where, reader=times, timezone=o.timezone
                )
                text = ws.forecaster.limits.check_draft(rec.get("text") or "")
                media = _flag(rec.get("has_media"), column="has_media", where=where)
                draft = make_draft(
                    ws,
                    text=text,
                    account=account,
                    planned_at=planned,
                    draft_id=draft_id,
                    has_media=bool(media),
                    where=where,
                )
                rows.append(PlanRow(line, draft_id, draft))
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
    options: PlanOptions | None = None,
    match: Match = Match.MEANING,
) -> PlanCounts:
    """Forecast every row of ``src`` into ``dest`` (``match``: how near-repeats are found)."""
    ws.forecaster.model(metric)  # no model, or an unknown metric, fails the whole file
    rows = read_plan(ws, Path(src), options)
    todo = [i for i, r in enumerate(rows) if r.draft is not None]
    results: dict[int, Forecast] = {}
    problems: dict[int, str] = {i: r.problem for i, r in enumerate(rows) if r.draft is None}
    drafts = [d for d in (rows[i].draft for i in todo) if d is not None]
    if drafts:  # with every row unreadable there is nothing to forecast; each keeps its reason
        _give_all(
            ws, todo, drafts, results, problems, metric=metric, coverage=coverage, record=record, match=match
        )
    lines = [_line(row, results.get(i), problems.get(i), metric, coverage) for i, row in enumerate(rows)]
    Path(dest).parent.mkdir(parents=True, exist_ok=True)
    with Path(dest).open("w", encoding="utf-8", newline="") as f:
        w = csv.DictWriter(f, fieldnames=OUT_COLUMNS)  # RFC 4180 quoting; CRLF line ends
        w.writeheader()
        w.writerows(lines)
    return PlanCounts(rows=len(rows), forecast=len(results), failed=len(rows) - len(results), lines=lines)


def _give_all(
    ws: Workspace,
    todo: list[int],
    drafts: list[Draft],
    results: dict[int, Forecast],
    problems: dict[int, str],
    *,
    metric: str,
    coverage: float,
    record: bool,
    match: Match,
) -> None:
    try:
        # Adapted, staleness-checked and recorded in the track record.
        found = check_drafts(
            ws, drafts, metric=metric, coverage=coverage, record=record, source="plan", match=match
        )
        results.update(zip(todo, found, strict=True))
    except SoundingError:
        # One draft spoiled the batch: forecast them one by one to isolate it.
        for i, d in zip(todo, drafts, strict=True):
            try:
                results[i] = check_drafts(
                    ws, [d], metric=metric, coverage=coverage, record=record, source="plan", match=match
                )[0]
            except SoundingError as one:
                problems[i] = one.message


def _whole(v: float, metric: str) -> str:
    return f"{v:.4f}" if metric in RATES else str(round(v))


def _line(
    row: PlanRow, fc: Forecast | None, problem: str | None, metric: str, coverage: float
) -> dict[str, str]:
    """One row of the forecasts file."""
    d = row.draft
    base = {
        "draft_id": row.draft_id,
        "account": d.account if d else "",
        "text": d.text if d else "",
        "metric": metric,
        "coverage": f"{coverage:g}",
    }
    if fc is None:
        planned = d.planned_at.isoformat() if d and d.planned_at else ""
        blank = dict.fromkeys(OUT_COLUMNS, "")
        return {**blank, **base, "planned_local": planned, "warnings": problem or "not forecast"}
    near = max(fc.repeats, key=lambda r: r.similarity, default=None)
    return {
        **base,
        "planned_local": fc.local_time,
        "low": _whole(fc.low, metric),
        "median": _whole(fc.median, metric),
        "high": _whole(fc.high, metric),
        "coverage": f"{fc.coverage:g}",
        "near_repeat": ""
        if near is None
        else f"{near.post_id} ({near.account}, {near.days_before:g} days before)",
        "model_version": fc.model_version,
        "top_precedent_id": fc.precedents[0].post_id if fc.precedents else "",
        "warnings": "; ".join(fc.warnings),
    }


def _flag(raw: str | None, *, column: str, where: str) -> bool:
    """A true/false cell, read as the import format reads has_media (empty: false)."""
    flag = read_flag(raw or "")
    if flag is not None:
        return flag
    raise InputError(f"{raw!r} is not true or false", where=where, field=column, value=raw)
