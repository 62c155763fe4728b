"""True/false cells (has_media in an import, in a plan file): the words read
as true or false, one rule for both."""

from __future__ import annotations

TRUE_WORDS = frozenset({"true", "1", "yes", "y", "t"})
FALSE_WORDS = frozenset({"false", "0", "no", "n", "f", ""})


def read_flag(raw: str) -> bool | None:
    """True or False for a cell's word (an empty cell is False), None when it
    is neither."""
    v = raw.strip().lower()
    if v in TRUE_WORDS:
        return True
    if v in FALSE_WORDS:
        return False
    return None
