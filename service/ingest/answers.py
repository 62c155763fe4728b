"""What an import or its preview answers: rows rejected with where and why,
counts of what was stored, and the preview of a file before it is imported."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from service.answers import Instant, MetricValues


class RowProblem(BaseModel):
    """A rejected row: where it starts, which column is at fault, why, and a fix to try."""

    model_config = ConfigDict(frozen=True)

    line: int = Field(description="Line of the file where the rejected row starts")
    column: str | None = Field(description="Our column name, when one field is at fault")
    reason: str
    hint: str | None = Field(default=None, description="A fix to try")
    post_id: str | None = Field(default=None, description="The row's post_id, when readable")

    def __str__(self) -> str:
        col = f", column {self.column}" if self.column else ""
        fix = f" ({self.hint})" if self.hint else ""
        return f"line {self.line}{col}: {self.reason}{fix}"


class ImportSummary(BaseModel):
    """What an import did."""

    added: int = 0
    updated: int = 0
    unchanged: int = 0
    rejected: int = 0
    embedded: int = Field(default=0, description="Texts embedded for the first time")
    approximate: int = Field(
        default=0, description="Rows stored with an abbreviated (1.2K) or derived count, marked approximate"
    )
    skipped_lines: int = Field(
        default=0, description="Lines never read because the rest of the file was not CSV"
    )
    stopped: str | None = Field(default=None, description="Why reading stopped early, if it did")
    problems: list[RowProblem] = Field(default_factory=list)
    changed_pks: list[int] = Field(default_factory=list, exclude=True)

    @property
    def complete(self) -> bool:
        """Every row was stored (none rejected, none left unread)."""
        return not self.rejected and not self.skipped_lines


class ColumnUse(BaseModel):
    """How one of our columns is read: from which of the file's columns, and as what."""

    ours: str
    theirs: str | None = Field(description="The file's column, or null when not read")
    reads: str = Field(description="How its values are read")


class PreviewRow(BaseModel):
    """One row of a dry run, as it would be stored."""

    line: int
    account: str
    post_id: str
    text: str
    posted_at: Instant = Field(description="UTC")
    local_time: str = Field(description="In the zone the time was read in, with its offset")
    zone: str
    metrics: MetricValues
    approximate: list[str] = Field(description="Metrics known only roughly")
    has_media: bool | None


class ImportFix(BaseModel):
    """A fix to try, with how many rejected rows it concerns and the first of them."""

    column: str | None
    hint: str
    rows: int = Field(description="Rejected rows this fix concerns")
    first_line: int


class ImportPreview(BaseModel):
    """A dry run: what the import would do; nothing was stored."""

    dry_run: Literal[True] = True
    columns: list[ColumnUse]
    unused_columns: list[str]
    time_layout: str
    rows: list[PreviewRow] = Field(description="The first rows as read")
    would_import: int
    approximate: int
    rejected: int
    skipped_lines: int
    stopped: str | None
    problems: list[RowProblem]
    fixes: list[ImportFix]


def fixes_of(problems: Sequence[RowProblem]) -> list[ImportFix]:
    """Each distinct fix to try among ``problems``, with how many rows it
    concerns and the first of them."""
    seen: dict[tuple[str | None, str], ImportFix] = {}
    for p in problems:
        if p.hint:
            fix = seen.setdefault(
                (p.column, p.hint), ImportFix(column=p.column, hint=p.hint, rows=0, first_line=p.line)
            )
            fix.rows += 1
    return list(seen.values())
