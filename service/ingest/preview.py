"""A dry run of an import: the same reading and validation, nothing written."""

from __future__ import annotations

from pathlib import Path

from models.embedding import Embedder
from models.metrics import METRIC_COLUMNS
from service.clock import UTC, zone
from service.ingest.answers import ColumnUse, ImportPreview, ImportSummary, PreviewRow, RowProblem, fixes_of
from service.ingest.importer import PREVIEW_ROWS, RowReader, finish, open_rows
from service.ingest.options import CANONICAL_COLUMNS, RATE_COLUMN, ImportOptions
from service.settings import DEFAULT_MAX_TEXT_CHARS
from service.storage.store import Store


def preview_csv(
    store: Store,
    embedder: Embedder,
    path: str | Path,
    options: ImportOptions | None = None,
    *,
    rows: int = PREVIEW_ROWS,
    max_text_chars: int = DEFAULT_MAX_TEXT_CHARS,
) -> ImportPreview:
    """Read and check a file as :func:`import_csv` would; write nothing.

    Reads the store only for the accounts' zones; the embedder only hashes
    texts (no model is loaded).
    """
    options = (options or ImportOptions()).check()
    with open_rows(Path(path), options, store, embedder, create=False, max_text_chars=max_text_chars) as (
        reader,
        _,
    ):
        columns = _column_uses(reader)
        used = {*reader.positions.values(), *reader.label_positions.values()}
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
        finish(s, reader)
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


def _column_uses(rows: RowReader) -> list[ColumnUse]:
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
        "followers": number + ": the account's follower count at the post's time",
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
    out += [
        ColumnUse(ours=f"label {name}", theirs=name, reads="kept as a label (an empty cell: none)")
        for name in rows.label_positions
    ]
    return out
