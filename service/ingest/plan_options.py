"""How a plan file's rows are read: the same time options as import, and an
account for rows (or files) without one.

A plan is read like an export: ``timezone`` for times without an offset
(default: each account's own zone), a strptime ``time_format`` or a
``date_order`` for numeric dates that read two ways (never guessed), and
``account`` for a file with no account column or a row with an empty one.
"""

from __future__ import annotations

from dataclasses import dataclass

from service.clock import zone
from service.ingest.timestamps import DateOrder, TimeLayout
from service.storage.handles import check_handle


@dataclass(frozen=True, slots=True)
class PlanOptions:
    """How to read one plan file."""

    account: str | None = None
    timezone: str | None = None
    time_format: str | None = None
    date_order: DateOrder | None = None

    def layout(self) -> TimeLayout:
        return TimeLayout(pattern=self.time_format, date_order=self.date_order)

    def check(self) -> PlanOptions:
        """Validate every option before the file is opened; the account folded."""
        if self.timezone is not None:
            zone(self.timezone)
        self.layout()
        if self.account is None:
            return self
        return PlanOptions(
            account=check_handle(self.account, where="--account"),
            timezone=self.timezone,
            time_format=self.time_format,
            date_order=self.date_order,
        )
