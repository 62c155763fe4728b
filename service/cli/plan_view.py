"""The terminal side of a plan file: its options, read as import reads
them, and a fitted table of what was forecast."""

from __future__ import annotations

from models.errors import InputError
from service.cli.base import err, out
from service.cli.render import Column, print_table
from service.ingest.plan_options import PlanOptions
from service.ingest.timestamps import DateOrder
from service.plan import RATES, PlanCounts


def plan_options(
    *,
    account: str | None,
    timezone: str | None,
    time_format: str | None,
    day_first: bool,
    month_first: bool,
) -> PlanOptions:
    """The command line's reading options for a plan file (or ``--at``), checked."""
    if day_first and month_first:
        raise InputError("give --day-first or --month-first, not both")
    order: DateOrder | None = "day-first" if day_first else "month-first" if month_first else None
    return PlanOptions(account=account, timezone=timezone, time_format=time_format, date_order=order).check()


def _n(v: str, metric: str) -> str:
    if not v:
        return "-"
    return v if metric in RATES else f"{int(v):,}"


def print_plan(counts: PlanCounts, dest: str, *, wide: bool = False) -> None:
    """One line per draft: when, the median and range, a near-repeat mark, the text."""
    rows = []
    for line in counts.lines:
        m = line["metric"]
        planned = line["planned_local"][:16].replace("T", " ")
        rng = f"{_n(line['low'], m)}–{_n(line['high'], m)}" if line["median"] else "not forecast"
        rows.append(
            [
                line["draft_id"],
                line["account"],
                planned or "-",
                _n(line["median"], m),
                rng,
                "yes" if line["near_repeat"] else "",
                line["text"] or line["warnings"],
            ]
        )
    metric = counts.lines[0]["metric"].replace("_", " ") if counts.lines else ""
    print_table(
        out,
        [
            Column(header="draft"),
            Column(header="account", optional=True),
            Column(header="planned (local)"),
            Column(header=f"{metric} median", right=True),
            Column(header="range", right=True),
            Column(header="near-repeat", optional=True),
            Column(header="text", free=True),
        ],
        rows,
        title="plan",
        wide=wide,
    )
    for line in counts.lines:
        if not line["median"]:
            err.print(f"{line['draft_id']}: {line['warnings']}", highlight=False, markup=False)
    out.print(
        f"{counts.forecast} of {counts.rows} drafts forecast into {dest}"
        + (f"; {counts.failed} with a reason in warnings" if counts.failed else ""),
        highlight=False,
    )
