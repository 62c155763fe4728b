"""Importing our canonical CSV: RFC 4180 parsing, times, mappings and bad input.

Every bad-input test imports a good file first and then checks that the bad
file lost nothing already stored.
"""

from __future__ import annotations

import json
import struct
import zlib
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd
import pytest

from models.errors import CSVFormatError, InputError
from service.ingest.answers import RowProblem
from service.ingest.importer import check_encoding
from service.ingest.options import ImportOptions, parse_mapping
from service.workspace import Workspace

# These tests run on SQLite, then again on PostgreSQL when a server is set.
pytestmark = pytest.mark.both_backends

HEADER = "post_id,account,text,posted_at,impressions,engagements,has_media"
GOOD = (
    HEADER + "\n"
    "g1,garden,Spring tulips are open in the walled garden,2026-04-01T10:00:00Z,1200,40,true\n"
    "g2,garden,Volunteers wanted for the seed library,2026-04-02T11:30:00+01:00,800,12,false\n"
    "g3,garden,The glasshouse cactus flowered overnight,2026-04-03T09:15:00-04:00,1500,66,\n"
)


def write(path: Path, content: str | bytes, *, newline: str = "\n") -> Path:
    if isinstance(content, str):
        content = content.replace("\n", newline).encode("utf-8")
    path.write_bytes(content)
    return path


def state(ws: Workspace) -> tuple[dict[str, int], list[dict[str, object]]]:
    """Counts and every stored post with its current metrics, for before/after checks."""
    df = ws.store.posts_frame()
    cols = ["account", "post_id", "text", "posted_at", "impressions", "engagements", "has_media"]
    df = df[cols].astype(object)
    return ws.store.counts(), df.where(df.notna(), None).to_dict("records")  # NaN != NaN


def by_id(ws: Workspace) -> dict[str, pd.Series]:
    return {r.post_id: r for r in ws.store.posts_frame().itertuples(index=False)}


@pytest.fixture()
def loaded(workspace: Workspace, tmp_path: Path) -> Workspace:
    """A workspace holding the three GOOD posts."""
    s = workspace.import_csv(write(tmp_path / "good.csv", GOOD), ImportOptions(new_accounts="UTC"))
    assert (s.added, s.rejected) == (3, 0)
    return workspace


# RFC 4180 ------------------------------------------------------------------------


def test_rfc4180_quoting_is_read_exactly(workspace: Workspace, tmp_path: Path) -> None:
    # RFC 4180 section 2, rules 5-7: fields with commas, double quotes or line
    # breaks are enclosed in double quotes; a quote inside is doubled;
    # lines end with CRLF (rule 1).
    body = (
        "post_id,account,text,posted_at,impressions\n"
        '"q1",garden,"Roses, lilies, and ferns",2026-04-01T10:00:00Z,10\n'
        'q2,garden,"She said ""bring a hat"" today",2026-04-01T11:00:00Z,20\n'
        'q3,garden,"first line\nsecond line",2026-04-01T12:00:00Z,30\n'
        'q4,garden,"",2026-04-01T13:00:00Z,40\n'
        'q5,garden,"after the multi-line row",not-a-time,50\n'
    )
    s = workspace.import_csv(
        write(tmp_path / "rfc.csv", body, newline="\r\n"), ImportOptions(new_accounts="UTC")
    )
    posts = by_id(workspace)
    assert posts["q1"].text == "Roses, lilies, and ferns"
    assert posts["q2"].text == 'She said "bring a hat" today'
    # The line break inside quotes is kept as written (CRLF here, RFC 4180 rule 6).
    assert posts["q3"].text == "first line\r\nsecond line"
    assert posts["q3"].impressions == 30
    assert s.added == 3
    # Line numbers are physical lines: q3 spans lines 4-5, so q4 is on 6 and q5 on 7.
    assert s.problems == [
        RowProblem(line=6, column="text", reason="is empty", post_id="q4"),
        RowProblem(
            line=7, column="posted_at", reason=s.problems[1].reason, hint=s.problems[1].hint, post_id="q5"
        ),
    ]
    assert "cannot read time 'not-a-time'" in s.problems[1].reason


def test_utf8_bom_is_ignored(workspace: Workspace, tmp_path: Path) -> None:
    # Unicode FAQ / RFC 3629 section 6: U+FEFF at the start is a signature, not text.
    path = write(tmp_path / "bom.csv", b"\xef\xbb\xbf" + GOOD.encode("utf-8"))
    s = workspace.import_csv(path, ImportOptions(new_accounts="UTC"))
    assert (s.added, s.rejected) == (3, 0)
    assert set(by_id(workspace)) == {"g1", "g2", "g3"}


def test_non_ascii_text_is_kept(workspace: Workspace, tmp_path: Path) -> None:
    body = HEADER + "\nu1,garden,Café terrace 🌷 reopens — ñ,2026-04-01T10:00:00Z,5,1,false\n"
    workspace.import_csv(write(tmp_path / "u.csv", body), ImportOptions(new_accounts="UTC"))
    assert by_id(workspace)["u1"].text == "Café terrace 🌷 reopens — ñ"


def test_stored_values_and_times(loaded: Workspace) -> None:
    posts = by_id(loaded)
    # ISO 8601 offsets, hand-computed: 11:30+01:00 = 10:30Z, 09:15-04:00 = 13:15Z.
    assert posts["g1"].posted_at == pd.Timestamp(datetime(2026, 4, 1, 10, 0, tzinfo=UTC))
    assert posts["g2"].posted_at == pd.Timestamp(datetime(2026, 4, 2, 10, 30, tzinfo=UTC))
    assert posts["g3"].posted_at == pd.Timestamp(datetime(2026, 4, 3, 13, 15, tzinfo=UTC))
    assert (posts["g1"].impressions, posts["g1"].engagements) == (1200, 40)
    assert (posts["g1"].has_media, posts["g2"].has_media, posts["g3"].has_media) == (
        True,
        False,
        False,
    )
    assert pd.isna(posts["g1"].likes)  # a metric column absent from the file is unknown


# Times in the account's zone ------------------------------------------------------------


def test_naive_times_use_the_account_zone(workspace: Workspace, tmp_path: Path) -> None:
    workspace.store.set_account("lab", timezone="America/New_York")
    body = (
        "post_id,account,text,posted_at,impressions\n"
        "t1,lab,Seed bank tour,2026-03-08T02:30:00,10\n"  # skipped by DST: refused
        "t2,lab,Night walk,2026-11-01T01:30:00,20\n"  # happens twice: first one
        "t3,lab,Morning dew,2026-01-10T08:00:00,30\n"  # plain EST
    )
    s = workspace.import_csv(write(tmp_path / "tz.csv", body), ImportOptions(new_accounts="UTC"))
    posts = by_id(workspace)
    # IANA tz via zoneinfo: 02:30 on 2026-03-08 does not exist in New York.
    assert "t1" not in posts
    assert len(s.problems) == 1
    p = s.problems[0]
    assert (p.line, p.column) == (2, "posted_at")
    assert "does not exist in America/New_York" in p.reason
    assert str(p).startswith("line 2, column posted_at: ")
    # First occurrence of 01:30 on 2026-11-01 is EDT (UTC-4): 05:30Z.
    assert posts["t2"].posted_at == pd.Timestamp(datetime(2026, 11, 1, 5, 30, tzinfo=UTC))
    # EST is UTC-5: 08:00 -> 13:00Z.
    assert posts["t3"].posted_at == pd.Timestamp(datetime(2026, 1, 10, 13, 0, tzinfo=UTC))


def test_timezone_option_overrides_account_zone(workspace: Workspace, tmp_path: Path) -> None:
    body = "post_id,account,text,posted_at,impressions\nz1,garden,Frost fair,2026-07-01T12:00,5\n"
    workspace.import_csv(
        write(tmp_path / "z.csv", body), ImportOptions(timezone="Europe/London", new_accounts="UTC")
    )
    # IANA tz: London is on BST (UTC+1) in July.
    assert by_id(workspace)["z1"].posted_at == pd.Timestamp(datetime(2026, 7, 1, 11, tzinfo=UTC))


def test_unknown_timezone_option_is_refused(loaded: Workspace, tmp_path: Path) -> None:
    before = state(loaded)
    path = write(tmp_path / "more.csv", GOOD.replace("g1", "g9"))
    with pytest.raises(InputError, match="unknown time zone 'Mars/Olympus'"):
        loaded.import_csv(path, ImportOptions(timezone="Mars/Olympus", new_accounts="UTC"))
    assert state(loaded) == before


# Mapping and --account ------------------------------------------------------------


def test_mapping_reads_other_column_names(workspace: Workspace, tmp_path: Path) -> None:
    body = (
        "Handle,Post body,When,Views,ID,Unrelated\n"
        "garden,Moss garden at dawn,2026-05-01T06:00:00Z,321,m1,ignored\n"
    )
    mapping = parse_mapping(
        ["account=Handle", "text=Post body", "posted_at=When", "impressions=Views", "post_id=ID"]
    )
    s = workspace.import_csv(
        write(tmp_path / "m.csv", body), ImportOptions(mapping=mapping, new_accounts="UTC")
    )
    assert (s.added, s.rejected) == (1, 0)
    p = by_id(workspace)["m1"]
    assert (p.account, p.text, p.impressions) == ("garden", "Moss garden at dawn", 321)


def test_account_option_supplies_missing_column(workspace: Workspace, tmp_path: Path) -> None:
    body = "post_id,text,posted_at,impressions\na1,Bees in the lavender,2026-05-01T06:00:00Z,99\n"
    path = write(tmp_path / "a.csv", body)
    with pytest.raises(CSVFormatError, match="missing required column account"):
        workspace.import_csv(path, ImportOptions(new_accounts="UTC"))
    s = workspace.import_csv(path, ImportOptions(account="garden_team", new_accounts="UTC"))
    assert s.added == 1
    assert by_id(workspace)["a1"].account == "garden_team"


@pytest.mark.parametrize(
    ("pairs", "message"),
    [
        (["text"], "must look like ours=theirs"),
        (["=Body"], "must look like ours=theirs"),
        (["body=Body"], "'body' is not one of our columns"),
        (["text=A", "text=B"], "mapped twice"),
    ],
)
def test_bad_mapping_is_refused(pairs: list[str], message: str) -> None:
    with pytest.raises(InputError, match=message):
        parse_mapping(pairs)


# Bad files: stop before writing anything ---------------------------------------------------


def _png_bytes() -> bytes:
    # A real 1x1 PNG (PNG spec: signature, IHDR, IDAT, IEND chunks with CRC-32).
    def chunk(kind: bytes, data: bytes) -> bytes:
        return (
            struct.pack(">I", len(data))
            + kind
            + data
            + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)
        )

    ihdr = struct.pack(">IIBBBBB", 1, 1, 8, 0, 0, 0, 0)
    return (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", ihdr)
        + chunk(b"IDAT", zlib.compress(b"\x00\x00"))
        + chunk(b"IEND", b"")
    )


BAD_FILES: dict[str, tuple[bytes, str]] = {
    "missing_column": (
        b"post_id,account,posted_at,impressions\nb1,garden,2026-04-01T10:00:00Z,5\n",
        "missing required column text",
    ),
    "no_metric": (
        b"post_id,account,text,posted_at\nb1,garden,Hello,2026-04-01T10:00:00Z\n",
        "no metric column",
    ),
    "duplicate_header": (
        b"post_id,account,text,text,posted_at,impressions\n",
        "names text more than once",
    ),
    "empty": (b"", "the file is empty"),
    "png": (_png_bytes(), "not UTF-8"),
    "json": (
        json.dumps({"posts": [{"post_id": "b1", "text": "hi", "impressions": 3}]}).encode(),
        "missing required columns",
    ),
    "nul": (b"post_id,account,text,posted_at,impressions\n\x00\x00\x00\n", "NUL bytes"),
    # Latin-1 'e acute' (0xE9) on line 3: nothing of the file may be stored.
    "latin1_halfway": (
        GOOD.replace("g1", "n1")
        .replace("g2", "n2")
        .replace("g3", "n3")
        .replace("Volunteers", "Volunt\u00e9ers")
        .encode("latin-1"),
        "not UTF-8 text: line 3, column 17",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD_FILES))
def test_bad_file_stores_nothing_and_loses_nothing(case: str, loaded: Workspace, tmp_path: Path) -> None:
    content, message = BAD_FILES[case]
    before = state(loaded)
    path = write(tmp_path / f"{case}.csv", content)
    with pytest.raises(CSVFormatError) as exc:
        loaded.import_csv(path, ImportOptions(new_accounts="UTC"))
    assert message in str(exc.value)
    assert str(path) in str(exc.value)  # says where
    assert state(loaded) == before


def test_latin1_error_names_the_line(tmp_path: Path) -> None:
    content = BAD_FILES["latin1_halfway"][0]
    # "Volunt" + the bad byte: 16 characters of "g2,garden,Volunt" come first.
    with pytest.raises(CSVFormatError, match="line 3, column 17 cannot be read"):
        check_encoding(write(tmp_path / "l.csv", content))


def test_mapping_to_absent_column(loaded: Workspace, tmp_path: Path) -> None:
    before = state(loaded)
    path = write(tmp_path / "good2.csv", GOOD.replace("g", "h"))
    with pytest.raises(CSVFormatError, match="names column 'Body', which is not in the file"):
        loaded.import_csv(path, ImportOptions(mapping={"text": "Body"}, new_accounts="UTC"))
    assert state(loaded) == before


def test_missing_file(workspace: Workspace, tmp_path: Path) -> None:
    with pytest.raises(InputError, match="no such file"):
        workspace.import_csv(tmp_path / "nope.csv", ImportOptions(new_accounts="UTC"))


def test_bad_byte_past_the_first_chunk(make_workspace, tmp_path: Path) -> None:
    """A bad byte after the first MiB is still found before any write; a valid
    two-byte character split across the chunk boundary is not a false alarm."""
    # One row a batch: rows before the bad byte would be written if the file
    # were not checked as a whole first.
    workspace = make_workspace("one-row-batches", import_batch_rows=1)
    pad = "x" * ((1 << 20) - 200)
    head = "post_id,account,text,posted_at,impressions,notes\n"
    row1 = f"c1,garden,First,2026-04-01T10:00:00Z,5,{pad}"
    # Put a two-byte 'é' so that it straddles byte 1 MiB exactly.
    prefix = (head + row1).encode()
    filler = "y" * ((1 << 20) - len(prefix) - 1)
    good = head + row1 + filler + "\u00e9" + "\nc2,garden,Second,2026-04-01T11:00:00Z,6,z\n"
    assert good.encode()[(1 << 20) - 1 : (1 << 20) + 1] == "\u00e9".encode()
    s = workspace.import_csv(write(tmp_path / "big.csv", good), ImportOptions(new_accounts="UTC"))
    assert (s.added, s.rejected) == (2, 0)

    before = state(workspace)
    bad = (
        good.replace("c1", "d1").replace("c2", "d2").encode()
        + b"d3,garden,Caf\xe9,2026-04-01T12:00:00Z,7,z\n"
    )
    with pytest.raises(CSVFormatError, match="line 4, column 15 cannot be read"):
        workspace.import_csv(write(tmp_path / "bigbad.csv", bad), ImportOptions(new_accounts="UTC"))
    assert state(workspace) == before


# Bad rows: reported with line, column and reason; valid rows still stored ------------------


def test_bad_rows_are_reported_and_good_rows_stored(loaded: Workspace, tmp_path: Path) -> None:
    before_g1 = by_id(loaded)["g1"]
    counts_before = loaded.store.counts()
    body = (
        HEADER + "\n"
        "r1,garden,A fine new post,2026-05-01T10:00:00Z,100,5,false\n"  # 2: ok
        "r2,garden,   ,2026-05-01T10:00:00Z,100,5,false\n"  # 3: empty text
        "g1,garden,Spring tulips are open in the walled garden,2026-04-01T10:00:00Z,-5,40,true\n"  # 4
        "r4,garden,Another,2026-05-01T10:00:00Z,lots,5,false\n"  # 5: not a number
        "r5,garden,Yet another,2026-05-01T10:00:00Z,1.5,5,false\n"  # 6: not whole
        "r1,garden,A fine new post again,2026-05-01T10:00:00Z,100,5,false\n"  # 7: repeat id
        "r7,garden,Media flag,2026-05-01T10:00:00Z,100,5,maybe\n"  # 8: bad bool
        "r8,,No account,2026-05-01T10:00:00Z,100,5,false\n"  # 9: no account
        "r9,garden,No metrics,2026-05-01T10:00:00Z,,,false\n"  # 10: no metric
        "r10,garden,Too short\n"  # 11: few fields
        ",garden,No id,2026-05-01T10:00:00Z,1,1,false\n"  # 12: no id
        "r12,garden,Last good one,2026-05-02T10:00:00Z,7,1,true\n"  # 13: ok
    )
    s = loaded.import_csv(write(tmp_path / "rows.csv", body), ImportOptions(new_accounts="UTC"))
    got = [(p.line, p.column) for p in s.problems]
    assert got == [
        (3, "text"),
        (4, "impressions"),
        (5, "impressions"),
        (6, "impressions"),
        (7, "post_id"),
        (8, "has_media"),
        (9, "account"),
        (10, None),
        (11, None),
        (12, "post_id"),
    ]
    reasons = [p.reason for p in s.problems]
    assert reasons[0] == "is empty"
    assert "'-5' is negative" in reasons[1]
    assert "'lots' is not a number" in reasons[2]
    assert "'1.5' is not a whole number" in reasons[3]
    assert "already appears on line 2" in reasons[4]
    assert "'maybe' is not true or false" in reasons[5]
    assert "no metric value" in reasons[7]
    assert "expected at least" in reasons[8]
    assert (s.added, s.rejected) == (2, 10)
    posts = by_id(loaded)
    assert {"r1", "r12"} <= set(posts) and not {"r2", "r4", "r5", "r7", "r8", "r9"} & set(posts)
    assert posts["r1"].text == "A fine new post"  # the first of the repeated id wins
    # The stored post the bad row named kept its metrics and no snapshot was added.
    assert posts["g1"].impressions == before_g1.impressions == 1200
    after = loaded.store.counts()
    assert after["posts"] == counts_before["posts"] + 2
    assert after["snapshots"] == counts_before["snapshots"] + 2


def test_numbers_with_separators_and_exponents(workspace: Workspace, tmp_path: Path) -> None:
    body = (
        "post_id,account,text,posted_at,impressions\n"
        "n1,garden,Big day,2026-05-01T10:00Z,1_200\n"
        "n2,garden,Bigger,2026-05-01T11:00Z,1.2e3\n"
    )
    s = workspace.import_csv(write(tmp_path / "n.csv", body), ImportOptions(new_accounts="UTC"))
    # Neither is how people write counts in an export: each row is refused, by line and column.
    assert s.rejected == 2 and s.added == 0
    assert {(r.line, r.column) for r in s.problems} == {(2, "impressions"), (3, "impressions")}
    assert any("exponent" in r.reason for r in s.problems)


def test_blank_lines_are_skipped(workspace: Workspace, tmp_path: Path) -> None:
    body = GOOD.replace("\ng2", "\n\n,,,,,,\ng2")
    s = workspace.import_csv(write(tmp_path / "blank.csv", body), ImportOptions(new_accounts="UTC"))
    assert (s.added, s.rejected) == (3, 0)


def test_summary_json_shape(workspace: Workspace, tmp_path: Path) -> None:
    body = HEADER + "\nx1,garden,,2026-05-01T10:00:00Z,1,1,false\n"
    s = workspace.import_csv(write(tmp_path / "s.csv", body), ImportOptions(new_accounts="UTC"))
    assert s.model_dump(mode="json") == {
        "added": 0,
        "updated": 0,
        "unchanged": 0,
        "rejected": 1,
        "embedded": 0,
        "approximate": 0,
        "skipped_lines": 0,
        "stopped": None,
        "problems": [{"line": 2, "column": "text", "reason": "is empty", "hint": None, "post_id": "x1"}],
    }
