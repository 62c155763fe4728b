"""Import of our canonical CSV into the store.

The canonical columns are::

    post_id, account, text, posted_at, impressions, engagements, likes,
    reposts, replies, link_clicks, profile_clicks, has_media

``post_id``, ``text``, ``posted_at`` and at least one metric column are
required; ``account`` may come from ``account=`` instead. A column mapping
(``ours=theirs``) reads any export whose columns are named differently.

Parsing follows RFC 4180 (Python's csv module: quoted commas, doubled
quotes, line breaks inside quotes); the file is UTF-8 with or without a
byte-order mark. Problems with the file as a whole stop the import before
anything is written. Problems with a row are reported with the row's line
number, column and reason, and every valid row is still stored, in batches
that are each one transaction: an interruption loses at most the batch in
flight, never half a row.

The path is: read and validate -> embed the texts not embedded before ->
write the batch. The index is updated by the caller (``Workspace``).
"""

from __future__ import annotations

import codecs
import csv
import io
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from models.embedding import Embedder, normalise_text
from models.errors import CSVFormatError, InputError, TimeParseError
from models.metrics import METRIC_COLUMNS

from .store import PostRow, Store
from .timeparse import parse_time, zone

CANONICAL_COLUMNS: tuple[str, ...] = (
    "post_id", "account", "text", "posted_at", *METRIC_COLUMNS, "has_media",
    "draft_id",  # optional: the draft a post fulfils (service.track_record, issue 11)
)
REQUIRED_COLUMNS: tuple[str, ...] = ("post_id", "text", "posted_at")
_TRUE = {"true", "1", "yes", "y", "t"}
_FALSE = {"false", "0", "no", "n", "f", ""}
_CHUNK = 1 << 20

# Our own fields can be long, but a single field past this is not a post.
csv.field_size_limit(1 << 24)


@dataclass(frozen=True, slots=True)
class RowProblem:
    line: int
    column: str | None
    reason: str

    def __str__(self) -> str:
        col = f", column {self.column}" if self.column else ""
        return f"line {self.line}{col}: {self.reason}"


@dataclass(slots=True)
class ImportSummary:
    added: int = 0
    updated: int = 0
    unchanged: int = 0
    rejected: int = 0
    embedded: int = 0
    problems: list[RowProblem] = field(default_factory=list)
    changed_pks: list[int] = field(default_factory=list)

    def to_dict(self) -> dict[str, object]:
        return {
            "added": self.added,
            "updated": self.updated,
            "unchanged": self.unchanged,
            "rejected": self.rejected,
            "embedded": self.embedded,
            "problems": [
                {"line": p.line, "column": p.column, "reason": p.reason} for p in self.problems
            ],
        }


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
                f"mapping {pair!r}: {ours!r} is not one of our columns "
                f"({', '.join(CANONICAL_COLUMNS)})",
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
                raise CSVFormatError(
                    "the file contains NUL bytes: it is not a text CSV", where=str(path)
                )
            lines += text.count("\n")
            offset += len(chunk)
        decoder.decode(b"", final=True)
    return max(lines, line_start)


class _Rows:
    """Validates the rows of an open CSV one at a time."""

    def __init__(
        self,
        handle: io.TextIOBase,
        *,
        where: str,
        mapping: dict[str, str],
        account: str | None,
        timezone: str | None,
        account_zones: dict[str, str],
        embedder: Embedder,
    ) -> None:
        self.reader = csv.reader(handle, strict=True)
        self.where = where
        self.account = account
        self.timezone = timezone
        self.account_zones = account_zones
        self.embedder = embedder
        self.seen: dict[tuple[str, str], int] = {}
        try:
            header = next(self.reader)
        except StopIteration:
            raise CSVFormatError("the file is empty", where=where) from None
        except csv.Error as exc:
            raise CSVFormatError(f"not a readable CSV: {exc}", where=where) from None
        header = [h.strip() for h in header]
        self.positions = self._resolve(header, mapping)

    def _resolve(self, header: list[str], mapping: dict[str, str]) -> dict[str, int]:
        dupes = {h for h in header if h and header.count(h) > 1}
        if dupes:
            raise CSVFormatError(
                f"the header names {', '.join(sorted(dupes))} more than once", where=self.where
            )
        pos: dict[str, int] = {}
        for ours, theirs in mapping.items():
            if theirs not in header:
                raise CSVFormatError(
                    f"the mapping {ours}={theirs} names column {theirs!r}, which is not in "
                    f"the file (its columns: {', '.join(header) or 'none'})",
                    where=self.where,
                    field="map",
                )
            pos[ours] = header.index(theirs)
        for col in CANONICAL_COLUMNS:
            if col not in pos and col in header:
                pos[col] = header.index(col)
        needed = list(REQUIRED_COLUMNS) + ([] if self.account else ["account"])
        missing = [c for c in needed if c not in pos]
        if missing:
            raise CSVFormatError(
                f"missing required column{'s' if len(missing) > 1 else ''} "
                f"{', '.join(missing)} (found: {', '.join(header) or 'none'})",
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
        return self.reader.line_num

    def __iter__(self) -> Iterator[PostRow | RowProblem]:
        width = len(self.positions) and max(self.positions.values()) + 1
        while True:
            start = self.reader.line_num + 1
            try:
                fields = next(self.reader)
            except StopIteration:
                return
            except csv.Error as exc:
                yield RowProblem(start, None, f"not readable as CSV: {exc}")
                return
            if not fields or all(not f.strip() for f in fields):
                continue  # blank line
            if len(fields) < width:
                yield RowProblem(start, None, f"has {len(fields)} fields, expected at least {width}")
                continue
            try:
                yield self._row(fields, start)
            except _Reject as r:
                yield RowProblem(start, r.column, r.reason)

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
        tz = self.timezone or self.account_zones.get(account, "UTC")
        try:
            posted_at = parse_time(self._get(fields, "posted_at") or "", tz=tz)
        except TimeParseError as exc:
            raise _Reject("posted_at", exc.message) from None
        metrics: dict[str, int | None] = {}
        for m in METRIC_COLUMNS:
            metrics[m] = _count(self._get(fields, m), m)
        if all(v is None for v in metrics.values()):
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
            account=account, post_id=post_id, text=text, posted_at=posted_at,
            metrics=metrics, has_media=has_media, vector_key=self.embedder.key(text), line=line,
        )


class _Reject(Exception):
    def __init__(self, column: str | None, reason: str) -> None:
        self.column, self.reason = column, reason


def _count(raw: str | None, column: str) -> int | None:
    if raw is None or not raw.strip():
        return None
    s = raw.strip().replace("_", "")
    try:
        value = float(s)
    except ValueError:
        raise _Reject(column, f"{raw!r} is not a number") from None
    if value != value or value in (float("inf"), float("-inf")):
        raise _Reject(column, f"{raw!r} is not a number")
    if value < 0:
        raise _Reject(column, f"{raw!r} is negative")
    if value != int(value):
        raise _Reject(column, f"{raw!r} is not a whole number")
    return int(value)


ProgressFn = Callable[[int, int], None]


def import_csv(
    store: Store,
    embedder: Embedder,
    path: str | Path,
    *,
    account: str | None = None,
    mapping: dict[str, str] | None = None,
    timezone: str | None = None,
    batch_rows: int = 500,
    progress: ProgressFn | None = None,
) -> ImportSummary:
    """Import one CSV file; see the module docstring for the rules."""
    path = Path(path)
    if not path.is_file():
        raise InputError(f"no such file: {path}", where=str(path))
    if timezone is not None:
        zone(timezone)
    total_lines = check_encoding(path)
    zones = {a.handle: a.timezone for a in store.accounts()}
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
            vecs = embedder.encode(list(keys.values()))
            vectors = dict(zip(keys.keys(), vecs, strict=True))
            summary.embedded += len(keys)
        res = store.write_batch(batch, vectors, model_id=embedder.model_id)
        summary.added += res.added
        summary.updated += res.updated
        summary.unchanged += res.unchanged
        summary.changed_pks.extend(res.changed_pks)
        batch.clear()

    # utf-8-sig drops a byte-order mark; newline="" lets csv see quoted line breaks.
    with path.open("r", encoding="utf-8-sig", newline="") as handle:
        rows = _Rows(
            handle, where=str(path), mapping=mapping or {}, account=account,
            timezone=timezone, account_zones=zones, embedder=embedder,
        )
        for item in rows:
            if isinstance(item, RowProblem):
                summary.rejected += 1
                summary.problems.append(item)
            else:
                batch.append(item)
                if len(batch) >= batch_rows:
                    flush()
                    if progress:
                        progress(rows.line_num, total_lines)
        if batch:
            flush()
        if progress:
            progress(total_lines, total_lines)
    return summary
