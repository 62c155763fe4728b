"""Import of a history CSV into the store.

The canonical columns are::

    post_id, account, text, posted_at, impressions, engagements, likes,
    reposts, replies, link_clicks, profile_clicks, has_media, engagement_rate

``post_id``, ``text``, ``posted_at`` and at least one metric column are
required; ``account`` may come from ``account=`` instead. A column mapping
(``ours=theirs``) reads any export whose columns are named differently, and
:class:`ImportOptions` say how its times and numbers are written: a strptime
pattern or Unix times, the order of numeric dates, a decimal comma. Counts
may carry thousands separators and abbreviations (``1.2K``, marked
approximate); an ``engagement_rate`` column is checked against engagements
/ impressions, or fills in the one of them a row leaves out.

Parsing follows RFC 4180 (``service.csvread``: quoted commas, doubled
quotes, line breaks inside quotes); the file is UTF-8 with or without a
byte-order mark. Problems with the file as a whole (encoding, header,
dates that read two ways) stop the import before anything is written.
Problems with a row, including a record the CSV reader cannot read, are
reported with the row's line number, column, reason and a fix to try, and
every valid row is still stored, in batches that are each one transaction:
an interruption loses at most the batch in flight, never half a row.

The path is: read and validate -> embed the texts not embedded before ->
write the batch. The index is updated by the caller (``Workspace``).
:func:`preview_csv` runs the same reading and validation and writes nothing.
"""

from __future__ import annotations

import codecs
import csv
from collections import Counter
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from decimal import ROUND_HALF_EVEN, Decimal
from pathlib import Path
from typing import Any, Literal, TextIO

import numpy as np
from pydantic import BaseModel, ConfigDict, Field

from models.embedding import Embedder, normalise_text
from models.errors import CSVFormatError, InputError, TimeParseError
from models.metrics import METRIC_COLUMNS, Metric
from service.answers import Instant, MetricValues
from service.csvread import Abandoned, BadRecord, Record, RecordReader
from service.numbers import MAX_COUNT, NumberError, Reading, read_count, read_rate
from service.store import PostRow, Store
from service.timeparse import UTC, DateOrder, TimeLayout, TimeReader, check_date_order, zone

RATE_COLUMN = Metric.ENGAGEMENT_RATE.value
CANONICAL_COLUMNS: tuple[str, ...] = (
    "post_id",
    "account",
    "text",
    "posted_at",
    *METRIC_COLUMNS,
    "has_media",
    RATE_COLUMN,
    "draft_id",  # optional: the draft a post fulfils (service.track_record, issue 11)
)
REQUIRED_COLUMNS: tuple[str, ...] = ("post_id", "text", "posted_at")
_TRUE = {"true", "1", "yes", "y", "t"}
_FALSE = {"false", "0", "no", "n", "f", ""}
_CHUNK = 1 << 20
PREVIEW_ROWS = 5
QUOTE_HINT = "check the quotes of this row: a quote inside a quoted field is written twice (RFC 4180)"

# Our own fields can be long, but a single field past this is not a post.
csv.field_size_limit(1 << 24)


@dataclass(frozen=True, slots=True)
class ImportOptions:
    """How to read one export: column mapping, account, and how its times
    and numbers are written. A saved mapping (``service.mappings``) holds
    exactly these."""

    mapping: dict[str, str] = field(default_factory=dict)
    account: str | None = None
    timezone: str | None = None
    time_format: str | None = None
    date_order: DateOrder | None = None
    decimal_comma: bool = False

    def kwargs(self) -> dict[str, Any]:
        """As keyword arguments of :func:`import_csv` and :func:`preview_csv`."""
        return {
            "account": self.account,
            "mapping": self.mapping,
            "timezone": self.timezone,
            "time_format": self.time_format,
            "date_order": self.date_order,
            "decimal_comma": self.decimal_comma,
        }

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


def check_encoding(path: Path) -> int:
    """Check the file is UTF-8 text, reading it in chunks; return its line count.

    Done before any write, so a file with bad bytes halfway stores nothing
    of itself rather than its first half.
    """
    decoder = codecs.getincrementaldecoder("utf-8")()
    lines, offset, line_start = 0, 0, 1
    with path.open("rb") as f:
        while chunk := f.read(_CHUNK):
            try:
                text = decoder.decode(chunk)
            except UnicodeDecodeError as exc:
                bad_at = offset + exc.start
                with path.open("rb") as g:
                    line = g.read(bad_at).count(b"\n") + 1
                raise CSVFormatError(
                    f"the file is not UTF-8 text (byte {bad_at} on line {line} cannot be read)",
                    where=str(path),
                    hint="save it as UTF-8 CSV",
                ) from None
            if "\x00" in text:
                raise CSVFormatError("the file contains NUL bytes: it is not a text CSV", where=str(path))
            lines += text.count("\n")
            offset += len(chunk)
        decoder.decode(b"", final=True)
    return max(lines, line_start)


class _Reject(Exception):
    def __init__(self, column: str | None, reason: str, hint: str | None = None) -> None:
        self.column, self.reason, self.hint = column, reason, hint


class _Rows:
    """Validates the rows of an open CSV one at a time."""

    def __init__(
        self,
        handle: TextIO,
        *,
        where: str,
        options: ImportOptions,
        account_zones: dict[str, str],
        embedder: Embedder,
    ) -> None:
        self.records = RecordReader(handle)
        self._items = iter(self.records)
        self.where = where
        self.options = options
        self.account = options.account
        self.timezone = options.timezone
        self.account_zones = account_zones
        self.embedder = embedder
        self.times = TimeReader(layout=options.layout())
        self.seen: dict[tuple[str, str], int] = {}
        self.abandoned: Abandoned | None = None
        first = next(self._items, None)
        if first is None:
            raise CSVFormatError("the file is empty", where=where)
        if not isinstance(first, Record):
            reason = first.reason if isinstance(first, BadRecord | Abandoned) else "unreadable"
            raise CSVFormatError(f"the header is not readable as CSV: {reason}", where=where)
        self.header = [h.strip() for h in first.fields]
        self.positions = self._resolve(self.header, options.mapping)
        self.metric_positions = [(m, self.positions[m]) for m in METRIC_COLUMNS if m in self.positions]

    def _resolve(self, header: list[str], mapping: dict[str, str]) -> dict[str, int]:
        # One pass with a Counter and a dict: a list.count per column made
        # this quadratic (100,000 columns took minutes).
        counts = Counter(h for h in header if h)
        dupes = sorted(h for h, n in counts.items() if n > 1)
        if dupes:
            shown = ", ".join(dupes[:10]) + (f" and {len(dupes) - 10} more" if len(dupes) > 10 else "")
            raise CSVFormatError(f"the header names {shown} more than once", where=self.where)
        where_is = {h: i for i, h in enumerate(header)}
        pos: dict[str, int] = {}
        for ours, theirs in mapping.items():
            if theirs not in where_is:
                listed = ", ".join(header[:50]) + (" ..." if len(header) > 50 else "")
                raise CSVFormatError(
                    f"the mapping {ours}={theirs} names column {theirs!r}, which is not in "
                    f"the file (its columns: {listed or 'none'})",
                    where=self.where,
                    field="map",
                )
            pos[ours] = where_is[theirs]
        for col in CANONICAL_COLUMNS:
            if col not in pos and col in where_is:
                pos[col] = where_is[col]
        needed = list(REQUIRED_COLUMNS) + ([] if self.account else ["account"])
        missing = [c for c in needed if c not in pos]
        if missing:
            listed = ", ".join(header[:50]) + (" ..." if len(header) > 50 else "")
            raise CSVFormatError(
                f"missing required column{'s' if len(missing) > 1 else ''} "
                f"{', '.join(missing)} (found: {listed or 'none'})",
                where=self.where,
                hint="rename with --map ours=theirs"
                + (", or give --account" if "account" in missing else ""),
            )
        if not any(m in pos for m in METRIC_COLUMNS):
            raise CSVFormatError(
                f"no metric column; need at least one of {', '.join(METRIC_COLUMNS)}",
                where=self.where,
            )
        return pos

    @property
    def line_num(self) -> int:
        return self.records.line_num

    def time_values(self) -> Iterator[tuple[int, str]]:
        """(line, text) of every readable row's time, for the date-order check."""
        i = self.positions["posted_at"]
        for item in self._items:
            if isinstance(item, Record) and len(item.fields) > i:
                yield item.line, item.fields[i]

    def zone_of(self, account: str) -> str:
        return self.timezone or self.account_zones.get(account, "UTC")

    def __iter__(self) -> Iterator[PostRow | RowProblem]:
        width = len(self.positions) and max(self.positions.values()) + 1
        id_at = self.positions["post_id"]
        for item in self._items:
            if isinstance(item, Abandoned):
                self.abandoned = item
                return
            if isinstance(item, BadRecord):
                yield RowProblem(
                    line=item.line,
                    column=None,
                    reason=item.reason,
                    hint=QUOTE_HINT if "quote" in item.reason else None,
                )
                continue
            fields, start = item.fields, item.line
            if not fields or all(not f.strip() for f in fields):
                continue  # blank line
            post_id = fields[id_at].strip() or None if len(fields) > id_at else None
            if len(fields) < width:
                yield RowProblem(
                    line=start,
                    column=None,
                    reason=f"has {len(fields)} fields, expected at least {width}",
                    post_id=post_id,
                )
                continue
            try:
                yield self._row(fields, start)
            except _Reject as r:
                yield RowProblem(line=start, column=r.column, reason=r.reason, hint=r.hint, post_id=post_id)

    def _get(self, fields: list[str], col: str) -> str | None:
        i = self.positions.get(col)
        return None if i is None else fields[i]

    def _row(self, fields: list[str], line: int) -> PostRow:
        post_id = (self._get(fields, "post_id") or "").strip()
        if not post_id:
            raise _Reject("post_id", "is empty")
        account = (self._get(fields, "account") or "").strip() or self.account
        if not account:
            raise _Reject("account", "is empty and no --account was given")
        if any(c.isspace() for c in account):
            raise _Reject("account", f"handle {account!r} contains spaces")
        text = self._get(fields, "text") or ""
        if not normalise_text(text):
            raise _Reject("text", "is empty")
        try:
            posted_at = self.times.read(self._get(fields, "posted_at") or "", tz=self.zone_of(account))
        except TimeParseError as exc:
            hint = exc.hint or (
                "check that this column holds the post's time" if "accepted range" in exc.message else None
            )
            raise _Reject("posted_at", exc.message, hint) from None
        readings: dict[str, Reading | None] = dict.fromkeys(METRIC_COLUMNS)
        for m, i in self.metric_positions:
            raw = fields[i]
            if not raw or raw.isspace():
                continue
            try:
                readings[m] = read_count(raw, decimal_comma=self.options.decimal_comma)
            except NumberError as exc:
                raise _Reject(m, exc.reason, exc.hint) from None
        self._rate(fields, readings)
        if all(v is None for v in readings.values()):
            raise _Reject(None, "has no metric value")
        media_raw = self._get(fields, "has_media")
        has_media: bool | None = None
        if media_raw is not None:
            v = media_raw.strip().lower()
            if v in _TRUE:
                has_media = True
            elif v in _FALSE:
                has_media = False if v else None
            else:
                raise _Reject("has_media", f"{media_raw!r} is not true or false")
        first = self.seen.setdefault((account, post_id), line)
        if first != line:
            raise _Reject("post_id", f"{post_id!r} of {account} already appears on line {first}")
        return PostRow(
            account=account,
            post_id=post_id,
            text=text,
            posted_at=posted_at,
            metrics={m: None if r is None else int(r.value) for m, r in readings.items()},
            has_media=has_media,
            vector_key=self.embedder.key(text),
            line=line,
            approximate=frozenset(m for m, r in readings.items() if r is not None and r.approximate),
        )

    def _rate(self, fields: list[str], readings: dict[str, Reading | None]) -> None:
        """Check an engagement rate against engagements / impressions, or
        fill in the one of the two a row leaves out (marked approximate)."""
        raw = self._get(fields, RATE_COLUMN)
        if raw is None or not raw.strip():
            return
        try:
            rate = read_rate(raw, decimal_comma=self.options.decimal_comma)
        except NumberError as exc:
            raise _Reject(RATE_COLUMN, exc.reason, exc.hint) from None
        eng, imp = readings.get("engagements"), readings.get("impressions")
        if eng is not None and imp is not None:
            if imp.high <= 0:
                if rate.value == 0 and eng.value == 0:
                    return
                raise _Reject(RATE_COLUMN, f"{raw.strip()!r} is given for a post with 0 impressions")
            # Every pair of counts the written digits allow, against every
            # rate the written digits allow: they must overlap.
            lowest = eng.low / imp.high
            highest = eng.high / imp.low if imp.low > 0 else Decimal("Infinity")
            if rate.high < lowest or rate.low > highest:
                ratio = eng.value / imp.value if imp.value else Decimal(0)
                raise _Reject(
                    RATE_COLUMN,
                    f"{raw.strip()!r} does not match engagements / impressions = "
                    f"{int(eng.value):,} / {int(imp.value):,} = {float(ratio):.3%}",
                    "check that the column is engagement rate (engagements / impressions); "
                    "a rate without a % sign is read as a fraction",
                )
            return
        if imp is not None:
            name, value = "engagements", rate.value * imp.value
        elif eng is not None and rate.value > 0:
            name, value = "impressions", eng.value / rate.value
        else:
            raise _Reject(
                RATE_COLUMN,
                "a rate needs impressions or engagements beside it to be stored",
                "map impressions or engagements too, or leave engagement_rate unmapped",
            )
        value = value.quantize(Decimal(1), ROUND_HALF_EVEN)
        if value > MAX_COUNT:
            raise _Reject(RATE_COLUMN, f"{name} from this rate would be {value:,}, above 2^53")
        readings[name] = Reading(value=value, half_width=Decimal(0), approximate=True)


ProgressFn = Callable[[int, int], None]
#: Embeds a batch of new texts into unit float32 rows (default: ``embedder.encode``);
#: service.cluster passes one that embeds on a Ray cluster.
EmbedFn = Callable[[list[str]], np.ndarray]


def _options(
    account: str | None,
    mapping: dict[str, str] | None,
    timezone: str | None,
    time_format: str | None,
    date_order: DateOrder | None,
    decimal_comma: bool,
) -> ImportOptions:
    return ImportOptions(
        mapping=dict(mapping or {}),
        account=account,
        timezone=timezone,
        time_format=time_format,
        date_order=date_order,
        decimal_comma=decimal_comma,
    ).check()


@contextmanager
def _open_rows(
    path: Path, options: ImportOptions, store: Store, embedder: Embedder
) -> Iterator[tuple[_Rows, int]]:
    """The file's rows, after every whole-file check (encoding, header, date
    order); nothing is written before this yields. Also the file's line count."""
    if not path.is_file():
        raise InputError(f"no such file: {path}", where=str(path))
    total_lines = check_encoding(path)
    zones = {a.handle: a.timezone for a in store.accounts()}

    def rows(handle: TextIO) -> _Rows:
        return _Rows(handle, where=str(path), options=options, account_zones=zones, embedder=embedder)

    # utf-8-sig drops a byte-order mark; newline="" lets csv see quoted line breaks.
    if options.time_format is None and options.date_order is None:
        with path.open("r", encoding="utf-8-sig", newline="") as handle:
            r = rows(handle)
            check_date_order(
                r.times,
                r.time_values(),
                where=str(path),
                column=options.mapping.get("posted_at", "posted_at"),
            )
    with path.open("r", encoding="utf-8-sig", newline="") as handle:
        yield rows(handle), total_lines


def _finish(summary: ImportSummary, rows: _Rows) -> None:
    if rows.abandoned is not None:
        a = rows.abandoned
        summary.skipped_lines = a.lines_left
        summary.stopped = f"stopped reading at line {a.line}: {a.reason}; {a.lines_left} lines were not read"


def import_csv(
    store: Store,
    embedder: Embedder,
    path: str | Path,
    *,
    account: str | None = None,
    mapping: dict[str, str] | None = None,
    timezone: str | None = None,
    time_format: str | None = None,
    date_order: DateOrder | None = None,
    decimal_comma: bool = False,
    batch_rows: int = 500,
    progress: ProgressFn | None = None,
    embed: EmbedFn | None = None,
) -> ImportSummary:
    """Import one CSV file; see the module docstring for the rules."""
    options = _options(account, mapping, timezone, time_format, date_order, decimal_comma)
    summary = ImportSummary()
    batch: list[PostRow] = []

    def flush() -> None:
        keys: dict[str, str] = {}
        missing = store.missing_vectors(r.vector_key for r in batch)
        for r in batch:
            if r.vector_key in missing:
                keys.setdefault(r.vector_key, r.text)
        vectors = {}
        if keys:
            vecs = (embed or embedder.encode)(list(keys.values()))
            vectors = dict(zip(keys.keys(), vecs, strict=True))
            summary.embedded += len(keys)
        res = store.write_batch(batch, vectors, model_id=embedder.model_id)
        summary.added += res.added
        summary.updated += res.updated
        summary.unchanged += res.unchanged
        summary.changed_pks.extend(res.changed_pks)
        batch.clear()

    with _open_rows(Path(path), options, store, embedder) as (rows, total_lines):
        for item in rows:
            if isinstance(item, RowProblem):
                summary.rejected += 1
                summary.problems.append(item)
            else:
                summary.approximate += bool(item.approximate)
                batch.append(item)
                if len(batch) >= batch_rows:
                    flush()
                    if progress:
                        progress(rows.line_num, total_lines)
        if batch:
            flush()
        _finish(summary, rows)
        if progress:
            progress(total_lines, total_lines)
    return summary


# Dry run --------------------------------------------------------------------


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


def preview_csv(
    store: Store,
    embedder: Embedder,
    path: str | Path,
    *,
    account: str | None = None,
    mapping: dict[str, str] | None = None,
    timezone: str | None = None,
    time_format: str | None = None,
    date_order: DateOrder | None = None,
    decimal_comma: bool = False,
    rows: int = PREVIEW_ROWS,
) -> ImportPreview:
    """Read and check a file as :func:`import_csv` would; write nothing.

    Reads the store only for the accounts' zones; the embedder only hashes
    texts (no model is loaded).
    """
    options = _options(account, mapping, timezone, time_format, date_order, decimal_comma)
    with _open_rows(Path(path), options, store, embedder) as (reader, _):
        columns = _column_uses(reader)
        used = set(reader.positions.values())
        unused = [h for i, h in enumerate(reader.header) if i not in used]
        s = ImportSummary()
        shown: list[PreviewRow] = []
        would_import = 0
        for item in reader:
            if isinstance(item, RowProblem):
                s.rejected += 1
                s.problems.append(item)
                continue
            would_import += 1
            s.approximate += bool(item.approximate)
            if len(shown) < rows:
                tz = reader.zone_of(item.account)
                shown.append(
                    PreviewRow(
                        line=item.line,
                        account=item.account,
                        post_id=item.post_id,
                        text=item.text,
                        posted_at=item.posted_at.astimezone(UTC),
                        local_time=item.posted_at.astimezone(zone(tz)).isoformat(),
                        zone=tz,
                        metrics=item.metrics,
                        approximate=sorted(item.approximate),
                        has_media=item.has_media,
                    )
                )
        _finish(s, reader)
    return ImportPreview(
        columns=columns,
        unused_columns=unused,
        time_layout=options.layout().describe(),
        rows=shown,
        would_import=would_import,
        approximate=s.approximate,
        rejected=s.rejected,
        skipped_lines=s.skipped_lines,
        stopped=s.stopped,
        problems=s.problems,
        fixes=fixes_of(s.problems),
    )


def _column_uses(rows: _Rows) -> list[ColumnUse]:
    o = rows.options
    zone_text = f"naive times in {o.timezone}" if o.timezone else "naive times in the account's zone"
    number = "count, decimal comma" if o.decimal_comma else "count"
    reads = {
        "post_id": "identifier, unique within an account",
        "account": "account handle",
        "text": "post text",
        "posted_at": f"time: {o.layout().describe()}; {zone_text}",
        "has_media": "true or false",
        RATE_COLUMN: "rate (4.5% or 0.045), checked against engagements / impressions",
        **dict.fromkeys(METRIC_COLUMNS, number + " (1,234, 1.2K marked approximate)"),
    }
    out = []
    for col in CANONICAL_COLUMNS:
        i = rows.positions.get(col)
        if i is not None:
            out.append(ColumnUse(ours=col, theirs=rows.header[i], reads=reads[col]))
        elif col == "account" and o.account:
            out.append(ColumnUse(ours=col, theirs=None, reads=f"every row: {o.account} (--account)"))
        else:
            out.append(ColumnUse(ours=col, theirs=None, reads="not in the file"))
    return out
