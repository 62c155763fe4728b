"""A file hashed and found whole is trusted while its state is unchanged,
and hashed again after any write to it.

Reference: the checksums are SHA-256 (FIPS 180-4) computed here with
hashlib over the file's bytes, not with the code under test.
"""

from __future__ import annotations

import hashlib
import json
import os
import time
from pathlib import Path

import pytest

from models import integrity
from models.integrity import SEEN_NAME, SETTLE_SECONDS, mismatch


def _files(d: Path, name: str) -> dict[str, dict[str, object]]:
    data = (d / name).read_bytes()
    return {name: {"bytes": len(data), "sha256": hashlib.sha256(data).hexdigest()}}


@pytest.fixture()
def counted(monkeypatch: pytest.MonkeyPatch) -> list[Path]:
    hashed: list[Path] = []
    real = integrity.sha256_file

    def counting(path: Path) -> str:
        hashed.append(Path(path))
        return real(path)

    monkeypatch.setattr(integrity, "sha256_file", counting)
    return hashed


def _later(monkeypatch: pytest.MonkeyPatch) -> None:
    """As if the files had settled: the clock reads past the settle time."""
    now = time.time() + SETTLE_SECONDS + 1
    monkeypatch.setattr(integrity.time, "time", lambda: now)


def test_a_whole_file_is_hashed_once_then_trusted(
    tmp_path: Path, counted: list[Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    (tmp_path / "graph.bin").write_bytes(os.urandom(3 << 20))
    files = _files(tmp_path, "graph.bin")
    _later(monkeypatch)
    assert mismatch(tmp_path, files) is None
    assert len(counted) == 1
    seen = json.loads((tmp_path / SEEN_NAME).read_text())
    assert seen["graph.bin"]["sha256"] == files["graph.bin"]["sha256"]
    assert mismatch(tmp_path, files) is None
    assert len(counted) == 1  # not hashed the second time


def test_a_write_that_keeps_size_and_modification_time_is_still_caught(
    tmp_path: Path, counted: list[Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    path = tmp_path / "graph.bin"
    path.write_bytes(os.urandom(1 << 20))
    files = _files(tmp_path, "graph.bin")
    _later(monkeypatch)
    assert mismatch(tmp_path, files) is None
    before = path.stat()
    time.sleep(0.05)  # past the file system's time tick
    data = bytearray(path.read_bytes())
    data[1000:1256] = b"x" * 256  # same size
    path.write_bytes(bytes(data))
    os.utime(path, ns=(before.st_atime_ns, before.st_mtime_ns))  # as a copying tool may do
    assert path.stat().st_mtime_ns == before.st_mtime_ns
    assert mismatch(tmp_path, files) == "graph.bin does not match its checksum"
    assert len(counted) == 2


def test_a_freshly_written_file_is_not_trusted_yet(tmp_path: Path, counted: list[Path]) -> None:
    (tmp_path / "graph.bin").write_bytes(b"weights" * 1000)
    files = _files(tmp_path, "graph.bin")
    assert mismatch(tmp_path, files) is None
    assert mismatch(tmp_path, files) is None
    assert len(counted) == 2  # changed within the settle time: hashed each time
    assert not (tmp_path / SEEN_NAME).exists()


def test_a_copy_is_hashed_afresh(
    tmp_path: Path, counted: list[Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    a, b = tmp_path / "a", tmp_path / "b"
    a.mkdir()
    (a / "graph.bin").write_bytes(os.urandom(1 << 16))
    files = _files(a, "graph.bin")
    _later(monkeypatch)
    assert mismatch(a, files) is None
    b.mkdir()
    for name in ("graph.bin", SEEN_NAME):  # the record travels with the copy
        (b / name).write_bytes((a / name).read_bytes())
    assert mismatch(b, files) is None
    assert counted == [a / "graph.bin", b / "graph.bin"]  # another inode: hashed again


def test_a_directory_that_cannot_be_written_is_checked_all_the_same(
    tmp_path: Path, counted: list[Path], monkeypatch: pytest.MonkeyPatch
) -> None:
    (tmp_path / "graph.bin").write_bytes(os.urandom(1 << 16))
    files = _files(tmp_path, "graph.bin")
    _later(monkeypatch)

    def refused(*_a: object, **_k: object) -> None:  # a read-only or full disk
        raise OSError(30, "Read-only file system")

    monkeypatch.setattr(integrity, "write_config", refused)
    assert mismatch(tmp_path, files) is None
    assert mismatch(tmp_path, files) is None
    assert len(counted) == 2  # nothing recorded: hashed each time
    assert not (tmp_path / SEEN_NAME).exists()
