"""How to read one export: our canonical columns, the column mapping, the
account and zone, and how its times and numbers are written."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

from models.errors import InputError
from models.metrics import METRIC_COLUMNS, Metric
from service.clock import zone
from service.ingest.timestamps import DateOrder, TimeLayout

RATE_COLUMN = Metric.ENGAGEMENT_RATE.value
CANONICAL_COLUMNS: tuple[str, ...] = (
    "post_id",
    "account",
    "text",
    "posted_at",
    *METRIC_COLUMNS,
    "has_media",
    RATE_COLUMN,
    "draft_id",  # optional: the draft a post fulfils (service.track.record)
)
REQUIRED_COLUMNS: tuple[str, ...] = ("post_id", "text", "posted_at")


@dataclass(frozen=True, slots=True)
class ImportOptions:
    """How to read one export: column mapping, account, and how its times
    and numbers are written. A saved mapping (``service.ingest.mappings``) holds
    exactly these."""

    mapping: dict[str, str] = field(default_factory=dict)
    account: str | None = None
    timezone: str | None = None
    time_format: str | None = None
    date_order: DateOrder | None = None
    decimal_comma: bool = False

    def layout(self) -> TimeLayout:
        return TimeLayout(pattern=self.time_format, date_order=self.date_order)

    def check(self) -> ImportOptions:
        """Validate every option before a file is opened."""
        if self.timezone is not None:
            zone(self.timezone)
        self.layout()
        bad = [k for k in self.mapping if k not in CANONICAL_COLUMNS]
        if bad:
            raise InputError(
                f"{bad[0]!r} is not one of our columns ({', '.join(CANONICAL_COLUMNS)})",
                field="map",
                value=bad[0],
            )
        return self


def parse_mapping(pairs: Sequence[str] | None) -> dict[str, str]:
    """``["text=Post body", ...]`` -> ``{"text": "Post body"}``, checked."""
    mapping: dict[str, str] = {}
    for pair in pairs or ():
        ours, sep, theirs = pair.partition("=")
        ours, theirs = ours.strip(), theirs.strip()
        if not sep or not ours or not theirs:
            raise InputError(
                f"mapping {pair!r} must look like ours=theirs, e.g. text=Post body",
                field="map",
                value=pair,
            )
        if ours not in CANONICAL_COLUMNS:
            raise InputError(
                f"mapping {pair!r}: {ours!r} is not one of our columns ({', '.join(CANONICAL_COLUMNS)})",
                field="map",
                value=pair,
            )
        if ours in mapping:
            raise InputError(f"column {ours!r} is mapped twice", field="map", value=pair)
        mapping[ours] = theirs
    return mapping
