"""How to read one export: our canonical columns, the column mapping, the
account and zone, and how its times and numbers are written."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace

from models.errors import InputError
from models.metrics import METRIC_COLUMNS, Metric
from service.clock import zone
from service.ingest.encodings import codec_of
from service.ingest.timestamps import DateOrder, TimeLayout
from service.storage.handles import check_handle
from service.storage.tables import LABEL_CHARS

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
    "followers",  # optional: the account's follower count at the post's time
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
    #: The zone to create accounts in that the file names and the store lacks
    #: (None: such a file is refused, naming the closest handles).
    new_accounts: str | None = None
    #: The file's codec (None: UTF-8, with or without a byte-order mark).
    encoding: str | None = None
    #: The file's extra columns kept as the team's own labels of each post
    #: (service.storage.labels); none: no label is stored or changed.
    labels: tuple[str, ...] = ()

    def layout(self) -> TimeLayout:
        return TimeLayout(pattern=self.time_format, date_order=self.date_order)

    def check(self) -> ImportOptions:
        """Validate every option before a file is opened; the account's handle
        comes back folded (service.storage.handles)."""
        if self.timezone is not None:
            zone(self.timezone)
        if self.new_accounts is not None:
            zone(self.new_accounts)
        if self.encoding is not None:
            codec_of(self.encoding)
        if self.account is not None:
            folded = check_handle(self.account, where="account")
            if folded != self.account:
                return replace(self, account=folded).check()
        names = check_labels(self.labels)
        if names != self.labels:
            return replace(self, labels=names).check()
        self.layout()
        bad = [k for k in self.mapping if k not in CANONICAL_COLUMNS]
        if bad:
            raise InputError(
                f"{bad[0]!r} is not one of our columns ({', '.join(CANONICAL_COLUMNS)})",
                field="map",
                value=bad[0],
            )
        return self


def check_labels(names: Sequence[str]) -> tuple[str, ...]:
    """Label columns as given (``--label campaign``): trimmed, each once, none blank."""
    if isinstance(names, str):
        names = [names]
    out: list[str] = []
    for raw in names:
        name = raw.strip() if isinstance(raw, str) else ""
        if not name:
            raise InputError("a label column's name is empty", field="label", hint="e.g. --label campaign")
        if len(name) > LABEL_CHARS:
            raise InputError(
                f"a label column's name has {len(name)} characters; at most {LABEL_CHARS}",
                field="label",
                value=name[:40],
            )
        if name in out:
            raise InputError(f"label column {name!r} is named twice", field="label", value=name)
        out.append(name)
    return tuple(out)


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
