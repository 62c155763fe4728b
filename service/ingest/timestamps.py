"""Layouts of exported times: a fixed strptime pattern, Unix times, or ISO 8601
plus a strict list of common layouts. Whether ``03/11/2026`` is 3 November or
11 March is never guessed."""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass
from datetime import UTC, datetime, time, timedelta, timezone
from decimal import Decimal, InvalidOperation
from typing import Literal

from models.errors import CSVFormatError, InputError, TimeParseError
from service.clock import check_range, localize, read_iso, refuse_bad_offset
from service.offsets import utc_offset

DateOrder = Literal["day-first", "month-first"]
DATE_ORDERS: tuple[str, ...] = ("day-first", "month-first")
#: Unix times: seconds or milliseconds since 1970-01-01T00:00Z.
EPOCH_LAYOUTS: dict[str, int] = {"epoch": 1, "epoch_ms": 1000}

#: Date layouts read without --time-format (strptime, English month names).
#: Numeric dates with the day and month both first-or-second are listed
#: under their order; the rest cannot be read two ways.
DATE_LAYOUTS: dict[str | None, tuple[str, ...]] = {
    "day-first": ("%d/%m/%Y", "%d.%m.%Y", "%d-%m-%Y", "%d/%m/%y", "%d.%m.%y"),
    "month-first": ("%m/%d/%Y", "%m-%d-%Y", "%m.%d.%Y", "%m/%d/%y"),
    None: (
        "%Y/%m/%d",
        "%Y.%m.%d",
        "%Y-%m-%d",
        "%d %b %Y",
        "%d %B %Y",
        "%d-%b-%Y",
        "%d-%b-%y",
        "%b %d %Y",
        "%B %d %Y",
        "%b %d, %Y",
        "%B %d, %Y",
        "%a %d %b %Y",
        "%a, %d %b %Y",
        "%A %d %B %Y",
        "%A, %d %B %Y",
        "%a %b %d %Y",
        "%a, %b %d, %Y",
        "%A, %B %d, %Y",
    ),
}
#: Clock layouts (24-hour, or 12-hour with AM/PM).
CLOCK_LAYOUTS: tuple[str, ...] = (
    "%H:%M",
    "%H:%M:%S",
    "%H:%M:%S.%f",
    "%I:%M %p",
    "%I:%M:%S %p",
    "%I %p",
)

# Splits "date<sep>clock[zone]" so the date and the clock are each matched
# against the short lists above (their product would be hundreds of patterns).
_SPLIT = re.compile(
    r"^(?P<date>.*?\d.*?)(?:\s*,\s*|\s+at\s+|\s+|T)"
    r"(?P<clock>\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d{1,6})?)?(?:\s*[AaPp]\.?[Mm]\.?)?"
    r"|\d{1,2}\s*[AaPp]\.?[Mm]\.?)"
    r"(?:\s*(?P<zone>[Zz]|UTC|GMT|[+-]\d{2}(?::?\d{2})?))?$"
)
_MERIDIEM = re.compile(r"\s*([AaPp])\.?[Mm]\.?$")


@dataclass(frozen=True, slots=True)
class TimeLayout:
    """How an export writes its times.

    ``pattern`` is a strptime pattern, ``"epoch"`` or ``"epoch_ms"``; without
    it, ISO 8601 and the common layouts are read, and ``date_order`` settles
    numeric dates that read two ways.
    """

    pattern: str | None = None
    date_order: DateOrder | None = None

    def __post_init__(self) -> None:
        if self.date_order is not None and self.date_order not in DATE_ORDERS:
            raise InputError(
                f"date order {self.date_order!r} is not day-first or month-first",
                field="date_order",
                value=self.date_order,
            )
        if self.pattern is not None:
            if self.date_order is not None:
                raise InputError(
                    "give either a time format or a date order, not both: the format already fixes the order",
                    field="time_format",
                    value=self.pattern,
                )
            if self.pattern not in EPOCH_LAYOUTS:
                _check_pattern(self.pattern)

    def describe(self) -> str:
        if self.pattern in EPOCH_LAYOUTS:
            unit = "seconds" if self.pattern == "epoch" else "milliseconds"
            return f"Unix time in {unit}"
        if self.pattern:
            return f"strptime pattern {self.pattern!r}"
        order = f", numeric dates {self.date_order}" if self.date_order else ""
        return f"ISO 8601 or a common layout{order}"


def _check_pattern(pattern: str) -> None:
    """A strptime pattern must read back a full date and a time of day."""
    ref = datetime(2026, 11, 3, 14, 5, 9, tzinfo=UTC)
    try:
        back = datetime.strptime(ref.strftime(pattern), pattern)
    except ValueError as exc:
        raise InputError(
            f"time format {pattern!r} is not a usable strptime pattern: {exc}",
            field="time_format",
            value=pattern,
            hint="e.g. '%d/%m/%Y %H:%M' for 03/11/2026 14:05",
        ) from None
    if (back.year, back.month, back.day) != (2026, 11, 3):
        raise InputError(
            f"time format {pattern!r} does not hold a full date (day, month, year)",
            field="time_format",
            value=pattern,
        )
    if (back.hour, back.minute) != (14, 5):
        raise InputError(
            f"time format {pattern!r} has no time of day (hours and minutes)",
            field="time_format",
            value=pattern,
        )


@dataclass(frozen=True, slots=True)
class DateReading:
    """What the common layouts make of one value, before any zone."""

    naive: datetime
    offset: timezone | None
    orders: frozenset[str]  # numeric orders it reads in; empty = not order-dependent
    ambiguous: bool  # reads as two different dates


class TimeReader:
    """Reads one column's times in one layout; every result is aware UTC in
    the accepted range, and naive times go through :func:`localize`."""

    def __init__(self, *, layout: TimeLayout) -> None:
        self.layout = layout

    def read(self, text: str, *, tz: str, where: str | None = None) -> datetime:
        raw = (text or "").strip()
        if not raw:
            raise TimeParseError("empty time", where=where, value=text)
        pattern = self.layout.pattern
        if pattern in EPOCH_LAYOUTS:
            dt = _epoch(raw, EPOCH_LAYOUTS[pattern], where=where)
        elif pattern:
            try:
                parsed = datetime.strptime(raw, pattern)
            except ValueError:
                raise TimeParseError(
                    f"cannot read time {raw!r} with format {pattern!r}", where=where, value=text
                ) from None
            dt = _to_utc(parsed, tz, raw=raw, where=where)
        else:
            dt = self._common(raw, tz=tz, where=where)
        return check_range(dt, where=where, value=raw)

    def _common(self, raw: str, *, tz: str, where: str | None) -> datetime:
        if (raw[:4].isdigit() and raw[4:5] == "-") or raw[:8].isdigit():
            try:
                return read_iso(raw, tz=tz, where=where)  # ISO 8601 first: the canonical case
            except TimeParseError as exc:
                if "no time of day" in exc.message or "out of range" in exc.message:
                    raise
        reading = self.reading(raw)
        if reading is None:
            refuse_bad_offset(raw, where=where)
            raise TimeParseError(
                f"cannot read time {raw!r}",
                where=where,
                value=raw,
                hint="use ISO 8601 (2026-12-02T10:00:00+01:00) or give --time-format with a "
                "strptime pattern, e.g. '%d/%m/%Y %H:%M'",
            )
        order = self.layout.date_order
        if reading.orders and order is not None and order not in reading.orders:
            raise TimeParseError(
                f"{raw!r} cannot be read {order}, as asked; it reads only {next(iter(reading.orders))}",
                where=where,
                value=raw,
                hint="check --day-first / --month-first",
            )
        if reading.ambiguous and order is None:
            raise TimeParseError(
                f"{raw!r} reads both day-first and month-first",
                where=where,
                value=raw,
                hint="give --day-first or --month-first",
            )
        naive = reading.naive
        if reading.ambiguous and order is not None:
            naive = self._read_in(raw, order)
        if reading.offset is not None:
            return _to_utc(naive.replace(tzinfo=reading.offset), tz, raw=raw, where=where)
        return _to_utc(naive, tz, raw=raw, where=where)

    def reading(self, raw: str) -> DateReading | None:
        """The value under the common layouts, or None when none reads it."""
        m = _SPLIT.match(raw.strip())
        if m is None:
            return None
        clock = _clock(m["clock"])
        if clock is None:
            return None
        try:
            offset = _offset(m["zone"])
        except ValueError:
            return None  # the caller names the offset (offset_problem)
        found: dict[str | None, datetime] = {}
        for order, layouts in DATE_LAYOUTS.items():
            for layout in layouts:
                try:
                    found[order] = datetime.strptime(m["date"], layout)
                    break
                except ValueError:
                    continue
        if not found:
            return None
        if None in found:
            day = found[None]
            orders: frozenset[str] = frozenset()
            ambiguous = False
        else:
            day = next(iter(found.values()))
            orders = frozenset(str(o) for o in found)
            ambiguous = len(set(found.values())) > 1
        return DateReading(
            naive=datetime.combine(day.date(), clock), offset=offset, orders=orders, ambiguous=ambiguous
        )

    def _read_in(self, raw: str, order: str) -> datetime:
        m = _SPLIT.match(raw)
        assert m is not None
        clock = _clock(m["clock"])
        assert clock is not None
        for layout in DATE_LAYOUTS[order]:
            try:
                return datetime.combine(datetime.strptime(m["date"], layout).date(), clock)
            except ValueError:
                continue
        raise AssertionError(raw)


def _clock(text: str) -> time | None:
    m = _MERIDIEM.search(text)
    if m:
        text = text[: m.start()].strip() + (" AM" if m[1] in "Aa" else " PM")
    text = text.replace(",", ".")
    for layout in CLOCK_LAYOUTS:
        try:
            return datetime.strptime(text, layout).time()
        except ValueError:
            continue
    return None


def _offset(text: str | None) -> timezone | None:
    if not text:
        return None
    if text.upper() in ("Z", "UTC", "GMT"):
        return UTC
    return utc_offset(text)  # ValueError past ±23:59


def _epoch(raw: str, per_second: int, *, where: str | None) -> datetime:
    try:
        value = Decimal(raw)
        if not value.is_finite():
            raise InvalidOperation
        return datetime(1970, 1, 1, tzinfo=UTC) + timedelta(seconds=float(value / per_second))
    except (InvalidOperation, OverflowError, ValueError):
        unit = "seconds" if per_second == 1 else "milliseconds"
        raise TimeParseError(f"{raw!r} is not a Unix time in {unit}", where=where, value=raw) from None


def _to_utc(dt: datetime, tz: str, *, raw: str, where: str | None) -> datetime:
    try:
        if dt.tzinfo is not None:
            return dt.astimezone(UTC)
        return localize(dt, tz, where=where)
    except OverflowError:
        raise TimeParseError(f"time {raw!r} is out of range in UTC", where=where, value=raw) from None


def check_date_order(
    reader: TimeReader, values: Iterable[tuple[int, str]], *, where: str, column: str
) -> None:
    """Refuse a column whose numeric dates read two ways when no order was given.

    ``values`` are (line, text) pairs. Stops at the first ambiguous value:
    the error names it and the options that settle it. A column mixing
    dates that read only day-first with dates that read only month-first is
    refused too, since one of the two must then be wrong.
    """
    if reader.layout.pattern is not None or reader.layout.date_order is not None:
        return
    seen: dict[str, tuple[int, str]] = {}
    for line, text in values:
        raw = text.strip()
        if not raw or (raw[:4].isdigit() and raw[4:5] == "-"):
            continue
        reading = reader.reading(raw)
        if reading is None:
            continue
        if reading.ambiguous:
            raise CSVFormatError(
                f"the dates in column {column} can be read day-first or month-first: the "
                f"first that reads both ways is {raw!r} on line {line}",
                where=where,
                field=column,
                value=raw,
                hint="give --day-first or --month-first; sounding never guesses",
            )
        for order in reading.orders:
            seen.setdefault(order, (line, raw))
    if len(seen) > 1:
        (l1, v1), (l2, v2) = seen["day-first"], seen["month-first"]
        raise CSVFormatError(
            f"column {column} mixes day-first dates ({v1!r}, line {l1}) and month-first "
            f"dates ({v2!r}, line {l2})",
            where=where,
            field=column,
            hint="give --day-first or --month-first; rows in the other order are then rejected",
        )
