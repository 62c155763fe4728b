"""The text encoding of an imported file: checked whole before any write.

UTF-8 (with or without a byte-order mark) is the default; any text codec
Python knows can be named instead (``cp1252``, ``latin-1``, ``utf-16``...).
A file that does not decode is refused with the line and column of the
first byte that cannot be read, and, when the file reads cleanly as
Windows-1252, a hint to say so: spreadsheet programs on Windows still save
"CSV" that way.
"""

from __future__ import annotations

import codecs
import unicodedata
from pathlib import Path

from models.errors import CSVFormatError, InputError

_CHUNK = 1 << 20
#: How much of a file the Windows-1252 guess reads.
SAMPLE = 1 << 20
#: Punctuation Windows-1252 puts in 0x80-0x9F (quotes, dashes, the euro sign...).
_CP1252_PUNCT = set("€‚„…†‡ˆ‰‹›‘’“”•–—˜™")


def codec_of(name: str | None) -> str:
    """The codec to open a file with: ``utf-8-sig`` for UTF-8 (drops a
    byte-order mark), else the named one; an unknown or non-text codec is
    an InputError on the ``encoding`` field."""
    if name is None or not name.strip():
        return "utf-8-sig"
    try:
        info = codecs.lookup(name.strip())
    except LookupError:
        raise InputError(
            f"{name!r} is not an encoding Python knows",
            field="encoding",
            value=name,
            hint="e.g. utf-8, cp1252 (Windows), latin-1, utf-16",
        ) from None
    if not getattr(info, "_is_text_encoding", True):  # base64, zlib: bytes to bytes
        raise InputError(f"{name!r} is not a text encoding", field="encoding", value=name)
    return "utf-8-sig" if info.name == "utf-8" else info.name


def looks_like_cp1252(sample: bytes) -> bool:
    """Whether bytes that are not UTF-8 read as Windows-1252 text: every byte
    defined there, and the non-ASCII characters letters or its punctuation
    (common practice, no source: the shape of a Windows spreadsheet export)."""
    try:
        text = sample.decode("cp1252")
    except UnicodeDecodeError:  # 0x81, 0x8D, 0x8F, 0x90, 0x9D are undefined
        return False
    odd = [c for c in text if ord(c) > 127]
    if not odd:
        return False
    plain = sum(1 for c in odd if c in _CP1252_PUNCT or unicodedata.category(c)[0] in "LNZP" or c in "°±×÷·")
    return plain >= 0.9 * len(odd)


def _position(path: Path, bad_at: int, codec: str) -> tuple[int, int]:
    """(line, column) of the byte at ``bad_at``, both from 1; the column
    counts characters, as an editor does."""
    with path.open("rb") as f:
        before = f.read(bad_at).decode(codec, errors="replace")
    line_start = before.rfind("\n") + 1
    return before.count("\n") + 1, len(before) - line_start + 1


def check_text(path: Path, encoding: str | None = None) -> int:
    """Check the whole file decodes in ``encoding`` (default UTF-8), reading
    it in chunks; return its line count. Done before any write, so a file
    with bad bytes halfway stores nothing of itself rather than its first half.
    """
    codec = codec_of(encoding)
    decoder = codecs.getincrementaldecoder(codec)()
    lines, offset = 0, 0
    with path.open("rb") as f:
        while True:
            chunk = f.read(_CHUNK)
            try:
                text = decoder.decode(chunk, final=not chunk)
            except UnicodeDecodeError as exc:
                _refuse(path, offset + exc.start, codec, exc.object[exc.start : exc.start + 1])
            if "\x00" in text:
                raise CSVFormatError("the file contains NUL bytes: it is not a text CSV", where=str(path))
            lines += text.count("\n")
            offset += len(chunk)
            if not chunk:
                break
    return max(lines, 1)


def _refuse(path: Path, bad_at: int, codec: str, byte: bytes) -> None:
    line, column = _position(path, bad_at, codec)
    name = "UTF-8" if codec == "utf-8-sig" else codec
    hint = f"save it as {name} or name its encoding"
    if codec == "utf-8-sig":
        with path.open("rb") as f:
            sample = f.read(SAMPLE)
        if looks_like_cp1252(sample):
            latin = all(not 0x80 <= b <= 0x9F for b in sample)
            which = "Windows-1252 or Latin-1 (the two agree on its bytes)" if latin else "Windows-1252"
            hint = f"it looks like {which}: name that encoding (cp1252), or save it as UTF-8"
        else:
            hint = "save it as UTF-8, or name the encoding it was saved in"
    raise CSVFormatError(
        f"the file is not {name} text: line {line}, column {column} cannot be read "
        f"(the byte there is 0x{byte.hex().upper() or '??'})",
        where=str(path),
        field="encoding",
        hint=hint,
    )
