"""Files that are not UTF-8: refused by line and column with a hint, or read
in the encoding named."""

from __future__ import annotations

from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from models.errors import CSVFormatError, InputError
from service.api.app import create_app
from service.ingest.encodings import check_text, codec_of, looks_like_cp1252
from service.ingest.options import ImportOptions
from service.workspace import Workspace

TEXT = (
    "post_id,account,text,posted_at,impressions\n"
    "w1,garden,Plain first row,2026-04-01T10:00:00Z,10\n"
    "w2,garden,Caf\u00e9 \u201cLa Serre\u201d opens \u2013 10 \u20ac a pot,2026-04-02T10:00:00Z,20\n"
)
# Bytes of the second row's first non-ASCII characters in Windows-1252, from
# the Unicode consortium's mapping table CP1252.TXT (from memory):
# e-acute 0xE9, left double quote 0x93, en dash 0x96, euro sign 0x80.
CP1252_BYTES = {"\u00e9": 0xE9, "\u201c": 0x93, "\u2013": 0x96, "\u20ac": 0x80}


@pytest.fixture()
def cp1252_file(tmp_path: Path) -> Path:
    data = TEXT.encode("cp1252")
    for ch, byte in CP1252_BYTES.items():  # one byte a character: indexes agree
        assert data[TEXT.index(ch)] == byte
    path = tmp_path / "windows.csv"
    path.write_bytes(data)
    return path


def test_cp1252_file_is_refused_by_line_and_column_with_a_hint(cp1252_file: Path) -> None:
    with pytest.raises(CSVFormatError) as exc:
        check_text(cp1252_file)
    # Line 3; "w2,garden,Caf" is 13 characters, so the e-acute is column 14.
    assert "line 3, column 14 cannot be read" in exc.value.message
    assert "0xE9" in exc.value.message and "byte 1" not in exc.value.message
    assert "Windows-1252" in (exc.value.hint or "") and "Latin-1" not in (exc.value.hint or "")


def test_latin1_only_bytes_name_both(tmp_path: Path) -> None:
    path = tmp_path / "latin.csv"
    path.write_bytes("post_id,text\np1,Gew\u00e4chshaus \u00f6ffnet\n".encode("latin-1"))
    with pytest.raises(CSVFormatError) as exc:
        check_text(path)
    assert "line 2, column 7" in exc.value.message
    assert "Windows-1252 or Latin-1" in (exc.value.hint or "")


def test_binary_is_not_called_windows_1252() -> None:
    assert not looks_like_cp1252(bytes(range(0x80, 0x100)) * 4)  # 0x81 is undefined in cp1252
    assert not looks_like_cp1252(b"plain ascii")


def test_cp1252_file_imports_when_named(workspace: Workspace, cp1252_file: Path) -> None:
    s = workspace.import_csv(cp1252_file, ImportOptions(encoding="cp1252", new_accounts="UTC"))
    assert (s.added, s.rejected) == (2, 0)
    texts = set(workspace.store.posts_frame()["text"])
    assert "Caf\u00e9 \u201cLa Serre\u201d opens \u2013 10 \u20ac a pot" in texts


def test_a_cp1252_file_stores_nothing_without_the_encoding(workspace: Workspace, cp1252_file: Path) -> None:
    with pytest.raises(CSVFormatError):
        workspace.import_csv(cp1252_file, ImportOptions(new_accounts="UTC"))
    assert workspace.store.counts()["posts"] == 0


def test_codec_names() -> None:
    assert codec_of(None) == codec_of("UTF-8") == codec_of("utf8") == "utf-8-sig"
    assert codec_of("Windows-1252") == "cp1252"
    assert codec_of("latin-1") == "iso8859-1"
    with pytest.raises(InputError, match="not an encoding Python knows") as exc:
        codec_of("klingon-8")
    assert exc.value.field == "encoding"
    with pytest.raises(InputError, match="not a text encoding"):
        codec_of("base64")


def test_utf16_file_reads_when_named(workspace: Workspace, tmp_path: Path) -> None:
    path = tmp_path / "u16.csv"
    path.write_bytes(TEXT.encode("utf-16"))  # with a byte-order mark
    s = workspace.import_csv(path, ImportOptions(encoding="utf-16", new_accounts="UTC"))
    assert s.added == 2


def test_form_field_encoding(workspace: Workspace, cp1252_file: Path) -> None:
    workspace.store.set_account("garden")
    # A preview from this machine needs no token (it stores nothing).
    client = TestClient(create_app(workspace=workspace), client=("127.0.0.1", 50000))
    data = cp1252_file.read_bytes()
    r = client.post("/v1/imports?dry_run=true", files={"file": ("w.csv", data, "text/csv")})
    assert r.status_code == 422 and "line 3, column 14" in r.json()["error"]["message"]
    r = client.post(
        "/v1/imports?dry_run=true",
        files={"file": ("w.csv", data, "text/csv")},
        data={"encoding": "cp1252"},
    )
    assert r.status_code == 200, r.text
    assert r.json()["would_import"] == 2


def test_import_preview_needs_no_token_on_loopback_but_importing_does(
    workspace: Workspace, cp1252_file: Path
) -> None:
    workspace.store.set_account("garden")
    data = cp1252_file.read_bytes()
    local = TestClient(create_app(workspace=workspace), client=("127.0.0.1", 50000))
    far = TestClient(create_app(workspace=workspace), client=("192.0.2.7", 50000))  # RFC 5737 address
    form = {"encoding": "cp1252"}
    assert (
        local.post("/v1/imports?dry_run=true", files={"file": ("w.csv", data)}, data=form).status_code == 200
    )
    assert far.post("/v1/imports?dry_run=true", files={"file": ("w.csv", data)}, data=form).status_code == 401
    assert local.post("/v1/imports", files={"file": ("w.csv", data)}, data=form).status_code == 401
    assert workspace.store.counts()["posts"] == 0
