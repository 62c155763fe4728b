"""UTC offsets as written after a time of day (ISO 8601 ``±hh:mm``, ``±hhmm``, ``±hh``).

Python's ``timezone`` holds offsets strictly inside ±24 hours and raises a bare
ValueError past them; an offset is read here and checked against ±23:59 first,
so a row that names one beyond gets its own message instead of failing the file.
"""

from __future__ import annotations

import re
from datetime import timedelta, timezone

# An offset after a clock time; the date's own dashes are never taken for one.
_TRAILING = re.compile(r"\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?\s*(?P<zone>[+-]\d{2}(?::?\d{2})?)$")
_PARTS = re.compile(r"^(?P<sign>[+-])(?P<hh>\d{2}):?(?P<mm>\d{2})?$")

HINT = "a UTC offset lies between -23:59 and +23:59, e.g. 2026-06-30T10:00:00+02:00"


def utc_offset(text: str) -> timezone:
    """The offset ``±hh[:mm]``; ValueError when it is not one or lies beyond ±23:59."""
    m = _PARTS.match(text)
    if m is None:
        raise ValueError(f"{text!r} is not a UTC offset")
    hours, minutes = int(m["hh"]), int(m["mm"] or 0)
    if hours > 23 or minutes > 59:
        raise ValueError(f"UTC offset {text!r} is beyond ±23:59")
    delta = timedelta(hours=hours, minutes=minutes)
    return timezone(-delta if m["sign"] == "-" else delta)


def offset_problem(raw: str) -> str | None:
    """Why the UTC offset that ends ``raw`` cannot be one, or None when it can (or there is none)."""
    m = _TRAILING.search(raw.strip())
    if m is None:
        return None
    try:
        utc_offset(m["zone"])
    except ValueError as exc:
        return f"{exc} in time {raw.strip()!r}"
    return None
