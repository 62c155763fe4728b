"""Upload of a history CSV: streamed to disk under a size limit, then imported.

The body is read chunk by chunk and parsed as multipart/form-data
(RFC 7578) with python-multipart's streaming parser, so the file goes
straight to a temporary file in the data directory's ``uploads/`` and is
never held in memory whole. The size limit (SOUNDING_MAX_UPLOAD_BYTES)
bounds the whole request body: a declared Content-Length past it is
refused before a byte is read, and a body without one is cut off as soon
as the limit is passed. The temporary file is deleted afterwards, whatever
happened.
"""

from __future__ import annotations

import dataclasses
import os
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, BinaryIO

from fastapi import APIRouter, Query, Request
from python_multipart.exceptions import FormParserError
from python_multipart.multipart import MultipartParser, parse_options_header
from starlette.concurrency import run_in_threadpool
from starlette.requests import ClientDisconnect

from models.errors import AuthError, InputError, LimitExceeded, NotFound, NotReady, StoreError
from service.api.deps import Credentials, SettingsDep, WorkspaceDep, from_loopback, require_token
from service.api.responses import ERRORS
from service.api.schemas import ImportPreview, ImportSummary
from service.ingest.mappings import combine, load_mapping
from service.ingest.options import ImportOptions, parse_mapping
from service.ingest.timestamps import DateOrder
from service.storage.uploads import new_upload, release

if typing.TYPE_CHECKING:
    from python_multipart.multipart import MultipartCallbacks

router = APIRouter(prefix="/v1", tags=["imports"])

FILE_FIELD = "file"
TEXT_FIELDS = (
    "account",
    "timezone",
    "map",
    "time_format",
    "date_order",
    "decimal_comma",
    "mapping",
    "new_account",
    "encoding",
    "labels",
)
# A form field is a handle, a zone name or one mapping: never long.
MAX_FIELD_BYTES = 64 * 1024

# Declared by hand because the endpoint reads the body itself (a File/Form
# parameter would make FastAPI parse the whole form before we could count it).
UPLOAD_BODY: dict[str, Any] = {
    "required": True,
    "content": {
        "multipart/form-data": {
            "schema": {
                "type": "object",
                "required": [FILE_FIELD],
                "properties": {
                    FILE_FIELD: {
                        "type": "string",
                        "format": "binary",
                        "description": "The CSV file (UTF-8, RFC 4180), in our canonical "
                        "columns or mapped with `map`",
                    },
                    "account": {
                        "type": "string",
                        "description": "Account for rows without an account column",
                    },
                    "timezone": {
                        "type": "string",
                        "description": "IANA zone of times without an offset (default: the account's)",
                    },
                    "map": {
                        "type": "array",
                        "items": {"type": "string"},
                        "description": "Read our column from theirs: `ours=theirs`, repeatable",
                    },
                    "time_format": {
                        "type": "string",
                        "description": "How times are written: a strptime pattern, `epoch` or "
                        "`epoch_ms` (default: ISO 8601 and common layouts)",
                    },
                    "date_order": {
                        "type": "string",
                        "enum": ["day-first", "month-first"],
                        "description": "Order of numeric dates that read two ways (never guessed)",
                    },
                    "decimal_comma": {
                        "type": "string",
                        "enum": ["true", "false"],
                        "description": "Numbers use a decimal comma (1.234 is a thousand and more)",
                    },
                    "mapping": {
                        "type": "string",
                        "description": "A saved mapping's name; the other fields override it",
                    },
                    "new_account": {
                        "type": "string",
                        "enum": ["true", "false"],
                        "description": "Create the accounts the file names that the store lacks, "
                        "in `timezone` (which it needs); otherwise an unknown account is refused",
                    },
                    "encoding": {
                        "type": "string",
                        "description": "The file's text encoding, any codec Python knows (default: UTF-8)",
                    },
                    "labels": {
                        "type": "array",
                        "items": {"type": "string"},
                        "description": "A column of the file kept as each post's label (a campaign, "
                        "a series), repeatable; segments split on it with by `label:COLUMN`",
                    },
                },
            }
        }
    },
}


@dataclass(slots=True)
class Upload:
    """What the form held: the file on disk and the text fields."""

    path: Path | None = None
    held: int | None = None  # the descriptor holding the file's lock (service.storage.uploads)
    fields: dict[str, list[str]] = field(default_factory=dict)

    def one(self, name: str) -> str | None:
        values = self.fields.get(name, [])
        if len(values) > 1:
            raise InputError(f"form field {name!r} is given {len(values)} times", field=name)
        if not values:
            return None
        # An empty field is a field left blank in a form: not given.
        return values[0].strip() or None


def too_large(maximum: int) -> LimitExceeded:
    return LimitExceeded(
        f"the upload is larger than the limit of {maximum} bytes (SOUNDING_MAX_UPLOAD_BYTES)",
        limit="max_upload_bytes",
        maximum=maximum,
        field=FILE_FIELD,
    )


class _FormReader:
    """Callbacks for python-multipart: file data to disk, small fields to memory."""

    def __init__(self, upload: Upload, directory: Path) -> None:
        self.upload = upload
        self.directory = directory
        self.file: BinaryIO | None = None
        self.name: str | None = None
        self.data = bytearray()
        self.header_name = bytearray()
        self.header_value = bytearray()
        self.disposition = b""
        self.ended = False

    def callbacks(self) -> MultipartCallbacks:
        return {
            "on_part_begin": self.on_part_begin,
            "on_part_data": self.on_part_data,
            "on_part_end": self.on_part_end,
            "on_header_field": lambda d, s, e: self.header_name.extend(d[s:e]),
            "on_header_value": lambda d, s, e: self.header_value.extend(d[s:e]),
            "on_header_end": self.on_header_end,
            "on_headers_finished": self.on_headers_finished,
            "on_end": self.on_end,
        }

    def on_part_begin(self) -> None:
        self.name, self.disposition = None, b""
        self.data.clear()

    def on_header_end(self) -> None:
        if bytes(self.header_name).strip().lower() == b"content-disposition":
            self.disposition = bytes(self.header_value)
        self.header_name.clear()
        self.header_value.clear()

    def on_headers_finished(self) -> None:
        _, options = parse_options_header(self.disposition)
        raw = options.get(b"name")
        if raw is None:
            raise InputError("a part of the form has no name in its Content-Disposition")
        name = raw.decode("latin-1")
        if name == FILE_FIELD:
            if self.upload.path is not None:
                raise InputError("the form holds more than one file; send one per import", field=FILE_FIELD)
            path, fd, self.upload.held = new_upload(self.directory)
            self.upload.path = path
            self.file = os.fdopen(fd, "wb")
        elif name not in TEXT_FIELDS:
            raise InputError(
                f"unknown form field {name!r} (expected {FILE_FIELD}, {', '.join(TEXT_FIELDS)})",
                field=name,
            )
        self.name = name

    def on_part_data(self, data: bytes, start: int, end: int) -> None:
        if self.name == FILE_FIELD and self.file is not None:
            # A plain write: chunks are at most a network read, and a
            # local-disk write of that size does not hold up the event loop.
            self.file.write(data[start:end])
            return
        if len(self.data) + (end - start) > MAX_FIELD_BYTES:
            raise InputError(
                f"form field {self.name!r} is longer than {MAX_FIELD_BYTES} bytes", field=self.name
            )
        self.data.extend(data[start:end])

    def on_part_end(self) -> None:
        if self.name == FILE_FIELD:
            if self.file is not None:
                self.file.close()
                self.file = None
            return
        try:
            value = bytes(self.data).decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(f"form field {self.name!r} is not UTF-8 text", field=self.name) from None
        self.upload.fields.setdefault(str(self.name), []).append(value)

    def on_end(self) -> None:
        self.ended = True

    def close(self) -> None:
        if self.file is not None:
            self.file.close()
            self.file = None


async def receive_upload(request: Request, *, directory: Path, max_bytes: int) -> Upload:
    """Stream a multipart body to ``directory``; raise LimitExceeded past
    ``max_bytes``. On any error nothing is left on disk."""
    declared = request.headers.get("content-length")
    if declared is not None and declared.strip().isdigit() and int(declared) > max_bytes:
        raise too_large(max_bytes)  # refused before reading a byte of the body
    ctype, options = parse_options_header(request.headers.get("content-type"))
    if ctype != b"multipart/form-data":
        raise InputError(
            "the upload must be sent as multipart/form-data with the CSV in the field 'file'",
            field="content-type",
        )
    boundary = options.get(b"boundary")
    if not boundary:
        raise InputError("the multipart/form-data upload has no boundary", field="content-type")
    directory.mkdir(parents=True, exist_ok=True)
    upload = Upload()
    reader = _FormReader(upload, directory)
    received = 0
    try:
        try:
            parser = MultipartParser(boundary, reader.callbacks())
        except (FormParserError, ValueError) as exc:
            raise InputError(f"the multipart boundary is not usable: {exc}", field="content-type") from None
        async for chunk in request.stream():
            received += len(chunk)
            if received > max_bytes:
                raise too_large(max_bytes)
            try:
                parser.write(chunk)
            except FormParserError as exc:
                raise InputError(f"the upload is not valid multipart/form-data: {exc}") from None
        parser.finalize()
        if not reader.ended:
            raise InputError("the upload ended before the form's closing boundary")
        if upload.path is None:
            raise InputError(
                f"the form has no file; send the CSV in the field {FILE_FIELD!r}", field=FILE_FIELD
            )
    except ClientDisconnect:
        reader.close()
        _remove(upload)
        raise InputError("the client went away before the upload was complete") from None
    except BaseException:
        reader.close()
        _remove(upload)
        raise
    return upload


def _remove(upload: Upload) -> None:
    release(upload.path, upload.held)
    upload.path = upload.held = None


def upload_options(upload: Upload, home: Path) -> ImportOptions:
    """The form's import options over a saved mapping, checked."""
    comma = upload.one("decimal_comma")
    if comma not in (None, "true", "false"):
        raise InputError("decimal_comma must be true or false", field="decimal_comma")
    order = upload.one("date_order")
    if order not in (None, "day-first", "month-first"):
        raise InputError("date_order must be day-first or month-first", field="date_order")
    given = ImportOptions(
        mapping=parse_mapping(upload.fields.get("map", [])),
        account=upload.one("account"),
        timezone=upload.one("timezone"),
        time_format=upload.one("time_format"),
        date_order=typing.cast(DateOrder | None, order),  # checked just above
        decimal_comma=comma == "true",
        # A blank field is a form's empty box: not a label asked for.
        labels=tuple(v for v in upload.fields.get("labels", []) if v.strip()),
    )
    name = upload.one("mapping")
    return combine(load_mapping(home, name) if name else None, given)


def upload_extras(upload: Upload, options: ImportOptions) -> dict[str, Any]:
    """The form's fields that are not a reading option: new accounts, encoding."""
    new = upload.one("new_account")
    if new not in (None, "true", "false"):
        raise InputError("new_account must be true or false", field="new_account")
    zone_name: str | None = None
    if new == "true":
        zone_name = options.timezone
        if not zone_name:
            raise InputError(
                "new_account needs timezone: the zone the new account's local hours are counted in",
                field="timezone",
            )
    extras: dict[str, Any] = {"new_accounts": zone_name}
    encoding = upload.one("encoding")
    if encoding is not None:
        extras["encoding"] = encoding
    return extras


@router.post(
    "/imports",
    response_model=ImportSummary | ImportPreview,
    responses=ERRORS(AuthError, NotFound, NotReady, LimitExceeded, InputError, StoreError),
    openapi_extra={"requestBody": UPLOAD_BODY},
    summary="Import past posts and their metrics from an uploaded CSV file",
)
async def create_import(
    request: Request,
    ws: WorkspaceDep,
    settings: SettingsDep,
    creds: Credentials,
    dry_run: Annotated[
        bool,
        Query(
            description="Store nothing: answer how the columns map, the "
            "first rows as read and what would be rejected"
        ),
    ] = False,
) -> ImportSummary | ImportPreview:
    """Rows with problems are reported with line, column, reason and a fix
    to try; every valid row is stored, in batches that are each one
    transaction. With dry_run=true nothing is stored, and from this machine
    (loopback) no token is needed for it: a preview changes nothing."""
    if not (dry_run and from_loopback(request)):
        require_token(settings, creds)
    if not dry_run:
        ws.check_writable("an import")  # before the upload is written into the data directory
    try:
        upload = await receive_upload(
            request, directory=ws.settings.uploads_dir, max_bytes=ws.settings.max_upload_bytes
        )
    except OSError as exc:  # a full disk while the upload is written
        raise StoreError(
            f"the upload could not be saved ({exc.strerror}); nothing was imported",
            hint="free some disk space and send it again",
        ) from None
    assert upload.path is not None  # receive_upload raises when the form has no file
    try:
        o = upload_options(upload, ws.settings.resolved_home)
        o = dataclasses.replace(o, **upload_extras(upload, o))
        # Reading, embedding and writing are slow and blocking: off the event loop.
        if dry_run:
            preview: ImportPreview = await run_in_threadpool(ws.preview_import, upload.path, o)
            return preview
        summary = await run_in_threadpool(ws.import_csv, upload.path, o)
    finally:
        _remove(upload)
    return summary
