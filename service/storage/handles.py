"""What an account handle may be, and what to say when one is unknown.

A handle is 1 to 200 characters: letters (any script), the digits 0-9 and
``_ . -``, beginning with a letter or digit. Nothing else: no spaces, no
path separators, no control or invisible characters (zero-width spaces,
right-to-left marks). Handles are folded before they are stored or looked
up on import: Unicode NFC, then lower case, so ``Loomhaven`` and
``loomhaven`` are one account and a composed and a decomposed ``é`` are
one letter.

An unknown handle is never created by accident: an import that names one
is refused, naming the closest known handles (difflib's ratio, as
``difflib.get_close_matches`` ranks them).
"""

from __future__ import annotations

import difflib
import unicodedata
from collections.abc import Iterable

from models.errors import InputError, NotFound

MAX_HANDLE = 200
PUNCTUATION = "_.-"
#: What a handle can never hold, as a regular expression that means the same
#: in Python and in JSON Schema (ECMA-262): no space, control character or
#: path separator anywhere, no ``_ . -`` first. "Letters of any script" needs
#: Unicode classes that ECMA-262 patterns lack, so the rest of the rule is
#: checked by :func:`handle_problem`.
HANDLE_PATTERN = r"^[^\s_.\-/\\\u0000-\u001f\u007f-\u009f][^\s/\\\u0000-\u001f\u007f-\u009f]*$"
#: The rule in words, for messages and help.
HANDLE_RULE = "letters, digits and _ . - only, beginning with a letter or digit"
#: How a new account is made on purpose, in command-line words.
CREATE_HINT = (
    "create it with `sounding account HANDLE --timezone ZONE`, or import with --new-account --timezone ZONE"
)


def fold_handle(raw: str) -> str:
    """The stored form of a handle: trimmed, NFC, lower case."""
    return unicodedata.normalize("NFC", raw.strip()).lower()


def _shown(c: str) -> str:
    if c.isascii() and c.isprintable() and not c.isspace():
        return repr(c)
    return f"U+{ord(c):04X} ({unicodedata.name(c, 'unnamed')})"


def handle_problem(handle: str) -> str | None:
    """Why a folded handle breaks the rule, or None when it keeps it."""
    if not handle:
        return "is empty"
    if len(handle) > MAX_HANDLE:
        return f"is longer than {MAX_HANDLE} characters"
    for c in handle:
        ok = c in PUNCTUATION or ("0" <= c <= "9") or unicodedata.category(c).startswith("L")
        if not ok:
            return f"{handle!r} holds {_shown(c)}"
    if handle[0] in PUNCTUATION:
        return f"{handle!r} begins with {handle[0]!r}"
    return None


def check_handle(raw: str, *, where: str | None = None) -> str:
    """The folded handle, or an InputError naming the field (and ``where``)."""
    handle = fold_handle(raw or "")
    problem = handle_problem(handle)
    if problem:
        raise InputError(
            f"account handle {problem}",
            where=where,
            field="account",
            value=raw,
            hint=f"a handle holds {HANDLE_RULE}",
        )
    return handle


def closest(handle: str, known: Iterable[str], n: int = 3) -> list[str]:
    """The known handles nearest ``handle`` (case aside), best first."""
    by_fold: dict[str, str] = {}
    for k in known:
        by_fold.setdefault(k.lower(), k)
    got = difflib.get_close_matches(fold_handle(handle), list(by_fold), n=n, cutoff=0.6)
    return [by_fold[g] for g in got]


def suggestion(handle: str, known: Iterable[str]) -> str:
    """``did you mean a or b?``, or what the store holds when nothing is close."""
    known = list(known)
    near = closest(handle, known)
    if near:
        return "did you mean " + " or ".join(near) + "?"
    if not known:
        return "the store has no accounts yet"
    shown = ", ".join(sorted(known)[:5]) + (" ..." if len(known) > 5 else "")
    return f"known accounts: {shown}"


def unknown_account(handle: str, known: Iterable[str], *, hint: str | None = None) -> NotFound:
    """The NotFound of an unknown handle: the closest known ones in the
    message, and ``hint`` (e.g. how to create one) after them."""
    return NotFound(
        f"unknown account {handle!r}; {suggestion(handle, known)}",
        field="account",
        value=handle,
        hint=hint,
    )
