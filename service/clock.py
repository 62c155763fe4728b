"""The clock, IANA zones and ISO 8601 times.

Times are ISO 8601 / RFC 3339. A time with an offset (``+01:00`` or ``Z``)
is exact. A naive time is local wall-clock time in a named IANA zone; one
that does not exist there (skipped by a daylight-saving change) is refused
rather than shifted, and one that occurs twice (clocks going back) is read
as the first occurrence, as ``zoneinfo`` does with ``fold=0``.

Every time that enters sounding (an imported post, a planned time, a range
bound) must lie in the years :data:`FIRST_YEAR` to :data:`LAST_YEAR`: a stray
year 1 or 9999 would otherwise break every later computation that turns
times into numbers. The bounds are fixed years rather than "so long from
now" so that the API's schema can state them exactly (:data:`YEAR_PATTERN`).

The layouts of exported spreadsheets are read in :mod:`service.ingest.timestamps`.
"""

from __future__ import annotations

import os
import re
from datetime import UTC as UTC  # re-exported: the service modules take UTC from here
from datetime import date, datetime
from functools import lru_cache
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from models.errors import InputError, TimeParseError
from service.offsets import HINT as OFFSET_HINT
from service.offsets import offset_problem

#: The first and last years sounding accepts anywhere (import, requests, options).
FIRST_YEAR, LAST_YEAR = 1990, 2199
#: The earliest instant accepted, and the first one past the range.
EARLIEST = datetime(FIRST_YEAR, 1, 1, tzinfo=UTC)
PAST_LAST = datetime(LAST_YEAR + 1, 1, 1, tzinfo=UTC)
#: A written time or date whose year is in the range starts so (JSON Schema
#: ``pattern``, which matches anywhere unless anchored).
YEAR_PATTERN = r"^(199[0-9]|2[01][0-9][0-9])-"
RANGE_TEXT = f"the years {FIRST_YEAR} to {LAST_YEAR}"


def year_in_range(value: datetime | date) -> bool:
    """Whether a time or date, as written (its own offset or none), falls in the range."""
    return FIRST_YEAR <= value.year <= LAST_YEAR


def check_range(dt: datetime, *, where: str | None = None, value: str | None = None) -> datetime:
    """``dt`` (aware) if it lies in the accepted range, else a clear error."""
    if not EARLIEST <= dt < PAST_LAST:
        raise TimeParseError(
            f"time {dt.isoformat()} is outside the accepted range, {RANGE_TEXT}",
            where=where,
            value=value or dt.isoformat(),
        )
    return dt


def zone(name: str) -> ZoneInfo:
    """The IANA zone ``name``, or a clear error."""
    try:
        if not name or name != name.strip() or name.startswith("/") or ".." in name:
            raise ValueError
        return ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError, OSError):
        raise InputError(
            f"unknown time zone {name!r}",
            field="timezone",
            value=name,
            hint="use an IANA zone name such as Europe/London or America/New_York",
        ) from None


def parse_time(text: str, *, tz: str = "UTC", where: str | None = None, check: bool = True) -> datetime:
    """Parse an ISO 8601 time; return an aware datetime in UTC. Unless
    ``check`` is false, its year as written (before any offset is applied)
    must be in the accepted range, as the API schema's pattern states."""
    written = read_written(text, where=where)
    if check and not year_in_range(written):
        raise TimeParseError(
            f"time {text.strip()!r} is outside the accepted range, {RANGE_TEXT}", where=where, value=text
        )
    return in_utc(written, text, tz=tz, where=where)


def read_iso(text: str, *, tz: str, where: str | None) -> datetime:
    """An ISO 8601 time in UTC, a naive one read in zone ``tz``."""
    return in_utc(read_written(text, where=where), text, tz=tz, where=where)


def read_written(text: str, *, where: str | None) -> datetime:
    """An ISO 8601 time with a time of day, as written: aware when it carries an offset."""
    raw = (text or "").strip()
    if not raw:
        raise TimeParseError("empty time", where=where, value=text)
    try:
        # fromisoformat reads ISO 8601 with 'Z', offsets, 'T' or a space;
        # upper() because RFC 3339 (5.6) also allows lower-case 't' and 'z'.
        dt = datetime.fromisoformat(raw.upper())
    except ValueError:
        refuse_bad_offset(raw, where=where)
        raise TimeParseError(
            f"cannot read time {raw!r}",
            where=where,
            value=text,
            hint="use ISO 8601, e.g. 2026-12-02T10:00:00+01:00",
        ) from None
    if len(raw) <= 10:
        raise TimeParseError(f"time {raw!r} has a date but no time of day", where=where, value=text)
    return dt


def in_utc(dt: datetime, text: str, *, tz: str, where: str | None) -> datetime:
    """A time as written, in UTC: with its own offset, or read in zone ``tz``."""
    try:
        if dt.tzinfo is not None:
            return dt.astimezone(UTC)
        return localize(dt, tz, where=where)
    except OverflowError:  # e.g. 0001-01-01T00:00+05:00 is before year 1 in UTC
        problem = f"time {text.strip()!r} is out of range in UTC"
        raise TimeParseError(problem, where=where, value=text) from None


def refuse_bad_offset(raw: str, *, where: str | None) -> None:
    """A time error naming the offset, for a time whose UTC offset is past ±23:59."""
    problem = offset_problem(raw)
    if problem is not None:
        raise TimeParseError(problem, where=where, value=raw, hint=OFFSET_HINT)


def localize(naive: datetime, tz: str, *, where: str | None = None) -> datetime:
    """Attach zone ``tz`` to a wall-clock time; refuse a time that does not exist."""
    z = zone(tz)
    local = naive.replace(tzinfo=z, fold=0)
    back = local.astimezone(UTC).astimezone(z)
    if back.replace(tzinfo=None) != naive:
        raise TimeParseError(
            f"{naive.isoformat(sep=' ', timespec='minutes')} does not exist in {tz} "
            "(the clocks skip it at a daylight-saving change)",
            where=where,
            value=naive.isoformat(),
            hint="give the time with its UTC offset",
        )
    return local.astimezone(UTC)


def as_utc(dt: datetime) -> datetime:
    """A stored naive-UTC datetime as an aware one."""
    return dt.replace(tzinfo=UTC) if dt.tzinfo is None else dt.astimezone(UTC)


def to_naive_utc(dt: datetime) -> datetime:
    return as_utc(dt).replace(tzinfo=None)


def now_utc() -> datetime:
    """The one clock: SOUNDING_NOW (RFC 3339) when set, else the system clock.

    Every command and the service read "now" here, so a fixed SOUNDING_NOW
    makes runs reproducible and lets past forecasts be backfilled.
    """
    fixed = os.environ.get("SOUNDING_NOW", "").strip()
    return _fixed_now(fixed) if fixed else datetime.now(UTC)


def wall_clock() -> datetime:
    """The system clock, whatever SOUNDING_NOW says: for names of artefacts
    (model versions) that must stay unique across runs at a fixed "now"."""
    return datetime.now(UTC)


@lru_cache(maxsize=8)
def _fixed_now(raw: str) -> datetime:
    # RFC 3339 (5.6) requires the offset; a time without one is refused here.
    # Not range-checked: the accepted range is itself measured from "now".
    dt = parse_time(raw, where="SOUNDING_NOW", check=False)
    if not (raw.upper().endswith("Z") or re.search(r"[+-]\d\d:\d\d$", raw)):
        raise TimeParseError(
            f"SOUNDING_NOW {raw!r} needs a UTC offset (RFC 3339)", where="SOUNDING_NOW", value=raw
        )
    return dt


def parse_since(value: str | None) -> datetime | None:
    """``--since`` / ``?since=``: a date (UTC midnight) or an RFC 3339 time."""
    if not value:
        return None
    raw = value.strip()
    try:
        return parse_time(raw + ("T00:00:00+00:00" if len(raw) == 10 else ""), where="since")
    except InputError as exc:
        raise InputError(exc.message, field="since", value=value) from None
