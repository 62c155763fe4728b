"""UTC offsets beyond ±23:59 are refused row by row, never failing the file."""

from __future__ import annotations

import csv
import io
from datetime import UTC, datetime, timedelta

import pytest
from conftest import history_csv

from models.errors import TimeParseError
from service.clock import parse_time
from service.ingest.options import ImportOptions
from service.ingest.timestamps import TimeLayout, TimeReader

# ISO 8601-1:2019 and RFC 3339 5.6 (time-numoffset = ("+" / "-") time-hour ":" time-minute,
# time-hour 00-23, time-minute 00-59): nothing beyond ±23:59 is an offset.
BEYOND = ["+24:00", "+25:00", "+99", "-9999", "-24", "+2400", "+23:60"]
WITHIN = {
    "+23:59": timedelta(hours=23, minutes=59),
    "-23:59": -timedelta(hours=23, minutes=59),
    "-03": -timedelta(hours=3),
    "+0530": timedelta(hours=5, minutes=30),
}


@pytest.mark.parametrize("offset", BEYOND)
@pytest.mark.parametrize("read", ["iso", "reader", "day-first"])
def test_an_offset_beyond_a_day_is_a_clear_time_error(offset: str, read: str) -> None:
    text = ("30/06/2026 10:00" if read == "day-first" else "2026-06-30T10:00:00") + offset
    with pytest.raises(TimeParseError) as err:
        if read == "iso":
            parse_time(text, where="posted_at")
        else:
            TimeReader(layout=TimeLayout(date_order="day-first")).read(text, tz="UTC", where="posted_at")
    assert offset in err.value.message and "23:59" in err.value.message
    assert err.value.where == "posted_at"


@pytest.mark.parametrize(("offset", "delta"), WITHIN.items())
def test_offsets_within_a_day_still_read(offset: str, delta: timedelta) -> None:
    # Local 10:00 at UTC+delta is 10:00 - delta in UTC (RFC 3339 5.6).
    want = datetime(2026, 6, 30, 10, tzinfo=UTC) - delta
    assert parse_time("2026-06-30T10:00:00" + offset) == want
    assert TimeReader(layout=TimeLayout()).read("2026-06-30 10:00" + offset, tz="UTC") == want


def _with_bad_offset(n: int, line: int, offset: str) -> bytes:
    rows = list(csv.reader(io.StringIO(history_csv(n).decode())))
    i = rows[0].index("posted_at")
    rows[line - 1][i] = rows[line - 1][i][:19] + offset  # line 1 is the header
    out = io.StringIO()
    csv.writer(out).writerows(rows)
    return out.getvalue().encode()


def test_one_bad_offset_rejects_its_row_only(make_workspace, tmp_path) -> None:
    offset = "+24:00"
    path = tmp_path / "history.csv"
    path.write_bytes(_with_bad_offset(400, 252, offset))
    ws = make_workspace()
    preview = ws.preview_import(path, ImportOptions(new_accounts="UTC"))
    assert preview.would_import == 399 and preview.rejected == 1
    summary = ws.import_csv(path, ImportOptions(new_accounts="UTC"))
    assert summary.added == 399 and summary.rejected == 1
    (problem,) = summary.problems
    assert problem.line == 252 and problem.column == "posted_at" and offset in problem.reason
    assert ws.store.counts()["posts"] == 399
