"""Counts in other digit scripts, with underscores or exponents are refused
per row, with field and line (common practice, no source: exports write 0-9)."""

from __future__ import annotations

import csv
import io

import pytest
from conftest import history_csv

from service.ingest.numbers import NumberError, read_count
from service.ingest.options import ImportOptions

ODD = ["١٢٣", "１２３", "१२३", "1_000", "1.5e3", "2E4", "1e+3"]


@pytest.mark.parametrize("raw", ODD)
def test_odd_counts_are_refused(raw: str) -> None:
    with pytest.raises(NumberError):
        read_count(raw)


@pytest.mark.parametrize(("raw", "value"), [("1,234", 1234), ("123", 123), (" 77 ", 77)])
def test_plain_counts_still_read(raw: str, value: int) -> None:
    assert read_count(raw).value == value


def test_odd_counts_are_rejected_row_by_row(make_workspace, tmp_path) -> None:
    rows = list(csv.reader(io.StringIO(history_csv(len(ODD) + 3).decode())))
    i = rows[0].index("impressions")
    for line, raw in enumerate(ODD, start=2):  # line 1 is the header
        rows[line - 1][i] = raw
    out = io.StringIO()
    csv.writer(out).writerows(rows)
    path = tmp_path / "odd.csv"
    path.write_text(out.getvalue(), encoding="utf-8")
    summary = make_workspace().import_csv(path, ImportOptions(new_accounts="UTC"))
    assert summary.added == 3 and summary.rejected == len(ODD)
    got = {(p.line, p.column) for p in summary.problems}
    assert got == {(line, "impressions") for line in range(2, len(ODD) + 2)}
