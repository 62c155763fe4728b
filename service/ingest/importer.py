"""Import of a history CSV into the store.

The canonical columns are::

    post_id, account, text, posted_at, impressions, engagements, likes,
    reposts, replies, link_clicks, profile_clicks, has_media, engagement_rate

``post_id``, ``text``, ``posted_at`` and at least one metric column are
required (a file of reference accounts' posts only may have none: their
metrics are never read); ``account`` may come from ``account=`` instead. An
optional ``followers`` column gives the account's follower count at the
post's time (service.storage.followers). A column mapping
(``ours=theirs``) reads any export whose columns are named differently, and
:class:`ImportOptions` say how its times and numbers are written: a strptime
pattern or Unix times, the order of numeric dates, a decimal comma. Counts
may carry thousands separators and abbreviations (``1.2K``, marked
approximate); an ``engagement_rate`` column is checked against engagements
/ impressions, or fills in the one of them a row leaves out.

Parsing follows RFC 4180 (``service.ingest.csvread``: quoted commas, doubled
quotes, line breaks inside quotes); the file is UTF-8 with or without a
byte-order mark, or in the codec named by ``encoding``
(service.ingest.encodings). Problems with the file as a whole (encoding, header,
dates that read two ways, unknown accounts) stop the import before anything is written.
Problems with a row, including a record the CSV reader cannot read, are
reported with the row's line number, column, reason and a fix to try, and
every valid row is still stored, in batches that are each one transaction:
an interruption loses at most the batch in flight, never half a row.

The path is: read and validate -> embed the texts not embedded before ->
write the batch. The index is updated by the caller (``Workspace``).
:func:`preview_csv` runs the same reading and validation and writes nothing.
"""

from __future__ import annotations

import csv
from collections import Counter
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from decimal import ROUND_HALF_EVEN, Decimal
from pathlib import Path
from typing import TextIO

import numpy as np

from models.embedding import Embedder, normalise_text
from models.errors import CSVFormatError, InputError, TimeParseError
from models.metrics import METRIC_COLUMNS
from service.ingest.accounts import accounts_to_create, handles_in
from service.ingest.answers import ImportSummary, RowProblem
from service.ingest.csvread import Abandoned, BadRecord, Record, RecordReader
from service.ingest.encodings import check_text, codec_of
from service.ingest.flags import read_flag
from service.ingest.header import LabelTooLong, label_positions, listed_columns, read_labels
from service.ingest.numbers import MAX_COUNT, NumberError, Reading, read_count, read_rate
from service.ingest.options import CANONICAL_COLUMNS, RATE_COLUMN, REQUIRED_COLUMNS, ImportOptions
from service.ingest.timestamps import TimeReader, check_date_order
from service.settings import DEFAULT_MAX_TEXT_CHARS
from service.storage.followers import MAX_FOLLOWERS
from service.storage.handles import HANDLE_RULE, fold_handle, handle_problem
from service.storage.post_writes import PostRow
from service.storage.store import Store

_CHUNK = 1 << 20
PREVIEW_ROWS = 5
QUOTE_HINT = "check the quotes of this row: a quote inside a quoted field is written twice (RFC 4180)"

# Our own fields can be long, but a single field past this is not a post.
csv.field_size_limit(1 << 24)


def check_encoding(path: Path, encoding: str | None = None) -> int:
    """Check the file decodes (UTF-8 unless ``encoding`` names another) and
    return its line count; see :mod:`service.ingest.encodings`."""
    return check_text(path, encoding)


class _Reject(Exception):
    def __init__(self, column: str | None, reason: str, hint: str | None = None) -> None:
        self.column, self.reason, self.hint = column, reason, hint


class RowReader:
    """Validates the rows of an open CSV one at a time."""

    def __init__(
        self,
        handle: TextIO,
        *,
        where: str,
        options: ImportOptions,
        account_zones: dict[str, str],
        embedder: Embedder,
        max_text_chars: int = DEFAULT_MAX_TEXT_CHARS,
        reference: frozenset[str] = frozenset(),
    ) -> None:
        self.records = RecordReader(handle)
        self.max_text_chars = max_text_chars
        self._items = iter(self.records)
        self.where = where
        self.options = options
        self.account = options.account
        self.timezone = options.timezone
        self.account_zones = account_zones
        self.reference = reference
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
        self.label_positions = label_positions(self.header, options.labels, where=where)

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
                listed = listed_columns(header)
                raise CSVFormatError(
                    f"the mapping {ours}={theirs} names column {theirs!r}, which is not in "
                    f"the file (its columns: {listed})",
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
            listed = listed_columns(header)
            raise CSVFormatError(
                f"missing required column{'s' if len(missing) > 1 else ''} "
                f"{', '.join(missing)} (found: {listed})",
                where=self.where,
                hint="rename with --map ours=theirs"
                + (", or give --account" if "account" in missing else ""),
            )
        return pos

    def check_metric_columns(self, accounts: Iterable[str]) -> None:
        """A file without a metric column may hold reference accounts' posts only."""
        if any(m in self.positions for m in METRIC_COLUMNS):
            return
        team = sorted(set(accounts) - self.reference)
        if team or not self.reference & set(accounts):
            why = f" (only a reference account's posts may come without; {team[0]} is not one)"
            raise CSVFormatError(
                f"no metric column; need at least one of {', '.join(METRIC_COLUMNS)}" + (why if team else ""),
                where=self.where,
                hint="mark a peer's account with `sounding account HANDLE --reference` to import "
                "its posts without metrics",
            )

    @property
    def line_num(self) -> int:
        return self.records.line_num

    def rest(self) -> Iterator[object]:
        """The records after the header, unchecked (for the whole-file pass)."""
        return self._items

    def zone_of(self, account: str) -> str:
        return self.timezone or self.account_zones.get(account, "UTC")

    def __iter__(self) -> Iterator[PostRow | RowProblem]:
        used = [*self.positions.values(), *self.label_positions.values()]
        width = max(used) + 1 if used else 0
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
        account = fold_handle(self._get(fields, "account") or "") or self.account
        if not account:
            raise _Reject("account", "is empty and no --account was given")
        problem = handle_problem(account)
        if problem:
            raise _Reject("account", f"handle {problem}", f"a handle holds {HANDLE_RULE}")
        text = self._get(fields, "text") or ""
        if not normalise_text(text):
            raise _Reject("text", "is empty")
        if len(text) > self.max_text_chars:
            raise _Reject(
                "text",
                f"has {len(text):,} characters; the limit is {self.max_text_chars:,}",
                "shorten it, or raise SOUNDING_MAX_TEXT_CHARS",
            )
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
        if all(v is None for v in readings.values()) and account not in self.reference:
            raise _Reject(None, "has no metric value")
        followers = self._followers(fields)
        media_raw = self._get(fields, "has_media")
        has_media: bool | None = None
        if media_raw is not None:
            flag = read_flag(media_raw)
            if flag is None:
                raise _Reject("has_media", f"{media_raw!r} is not true or false")
            # An empty cell says nothing: the post's media stays as stored.
            has_media = flag if media_raw.strip() else None
        try:
            labels = read_labels(fields, self.label_positions)
        except LabelTooLong as exc:
            raise _Reject(exc.column, exc.reason) from None
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
            labels=labels,
            followers=followers,
        )

    def _followers(self, fields: list[str]) -> int | None:
        raw = self._get(fields, "followers")
        if raw is None or not raw.strip():
            return None
        try:
            reading = read_count(raw, decimal_comma=self.options.decimal_comma)
        except NumberError as exc:
            raise _Reject("followers", exc.reason, exc.hint) from None
        if reading.value > MAX_FOLLOWERS:
            raise _Reject("followers", f"{raw.strip()!r} is above {MAX_FOLLOWERS:,}", "check the column")
        return int(reading.value)

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
#: service.ingest.ray_embedding passes one that embeds on a Ray cluster.
EmbedFn = Callable[[list[str]], np.ndarray]


@contextmanager
def open_rows(
    path: Path,
    options: ImportOptions,
    store: Store,
    embedder: Embedder,
    *,
    create: bool = True,
    max_text_chars: int = DEFAULT_MAX_TEXT_CHARS,
) -> Iterator[tuple[RowReader, int]]:
    """The file's rows, after every whole-file check (encoding, header, date
    order, unknown accounts); nothing is written before this yields, except
    the accounts asked for with ``options.new_accounts`` (their zone), made once
    every check has passed when ``create``. Also the file's line count."""
    if not path.is_file():
        raise InputError(f"no such file: {path}", where=str(path))
    new_accounts, encoding = options.new_accounts, options.encoding
    codec = codec_of(encoding)
    total_lines = check_encoding(path, encoding)
    known = store.accounts()
    zones = {a.handle: a.timezone for a in known}
    reference = frozenset(a.handle for a in known if a.reference)

    def rows(handle: TextIO) -> RowReader:
        return RowReader(
            handle,
            where=str(path),
            options=options,
            account_zones=zones,
            embedder=embedder,
            max_text_chars=max_text_chars,
            reference=reference,
        )

    # utf-8-sig drops a byte-order mark; newline="" lets csv see quoted line breaks.
    # One pass before any write: the date order (when not given) and the
    # account column's handles.
    named: dict[str, list[int]] = {}
    with path.open("r", encoding=codec, newline="") as handle:
        r = rows(handle)
        values = handles_in(
            r.rest(),
            time_at=r.positions["posted_at"],
            account_at=r.positions.get("account"),
            lines=named,
        )
        check_date_order(
            r.times, values, where=str(path), column=options.mapping.get("posted_at", "posted_at")
        )
        for _ in values:  # the date check may not need every row; the accounts do
            pass
        r.check_metric_columns([*named, *([options.account] if options.account else [])])
    new = accounts_to_create(
        store, account=options.account, column=named, new_accounts=new_accounts, where=str(path)
    )
    for h in new:
        assert new_accounts is not None  # accounts_to_create refuses new handles otherwise
        if create:
            store.set_account(h, timezone=new_accounts)
        zones[h] = new_accounts
    with path.open("r", encoding=codec, newline="") as handle:
        yield rows(handle), total_lines


def finish(summary: ImportSummary, rows: RowReader) -> None:
    if rows.abandoned is not None:
        a = rows.abandoned
        summary.skipped_lines = a.lines_left
        summary.stopped = f"stopped reading at line {a.line}: {a.reason}; {a.lines_left} lines were not read"


def import_csv(
    store: Store,
    embedder: Embedder,
    path: str | Path,
    options: ImportOptions | None = None,
    *,
    batch_rows: int = 500,
    progress: ProgressFn | None = None,
    embed: EmbedFn | None = None,
    max_text_chars: int = DEFAULT_MAX_TEXT_CHARS,
) -> ImportSummary:
    """Import one CSV file read as ``options`` say; see the module docstring for the rules.

    Every account the file names must be in the store, unless
    ``options.new_accounts`` gives the zone to create the missing ones in. The
    file is UTF-8 unless ``options.encoding`` names another codec."""
    options = (options or ImportOptions()).check()
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

    with open_rows(Path(path), options, store, embedder, max_text_chars=max_text_chars) as (
        rows,
        total_lines,
    ):
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
        finish(summary, rows)
        if progress:
            progress(total_lines, total_lines)
    return summary


# Dry run --------------------------------------------------------------------
