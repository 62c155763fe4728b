"""Reading ISO 8601 / RFC 3339 times and IANA zones (service.clock)."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from zoneinfo import ZoneInfo

import pytest

from models.errors import InputError, TimeParseError
from service.clock import as_utc, localize, parse_time, to_naive_utc, zone


def utc(*args: int) -> datetime:
    return datetime(*args, tzinfo=UTC)


# Expected instants are hand-computed from the offset (UTC = local - offset).
@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # RFC 3339 section 5.8, first example: "20 minutes and 50.52 seconds after the
        # 23rd hour of April 12th, 1985 in UTC".
        ("1985-04-12T23:20:50.52Z", utc(1985, 4, 12, 23, 20, 50, 520000)),
        # RFC 3339 section 5.8: "1996-12-19T16:39:57-08:00 ... is equivalent to
        # 1996-12-20T00:39:57Z in UTC".
        ("1996-12-19T16:39:57-08:00", utc(1996, 12, 20, 0, 39, 57)),
        # RFC 3339 section 5.8: Netherlands time 1937, offset +00:20 -> 11:40:27.87 UTC.
        ("1937-01-01T12:00:27.87+00:20", utc(1937, 1, 1, 11, 40, 27, 870000)),
        # ISO 8601 extended format with a positive offset: 10:00+01:00 is 09:00Z.
        ("2026-12-02T10:00:00+01:00", utc(2026, 12, 2, 9, 0)),
        # An offset with half hours: 10:00+05:30 is 04:30Z.
        ("2026-12-02T10:00+05:30", utc(2026, 12, 2, 4, 30)),
        # An offset crossing midnight backwards: 23:30-02:00 is 01:30Z next day.
        ("2026-12-31T23:30:00-02:00", utc(2027, 1, 1, 1, 30)),
        # RFC 3339 section 5.6 NOTE: a space may replace 'T' "for the sake of readability".
        ("2026-12-02 10:00:00Z", utc(2026, 12, 2, 10, 0)),
        # RFC 3339 section 5.6 NOTE: 'T' and 'Z' "may alternatively be lower case".
        ("2026-12-02t10:00:00z", utc(2026, 12, 2, 10, 0)),
        # ISO 8601 basic format (no separators) with Z.
        ("20261202T100000Z", utc(2026, 12, 2, 10, 0)),
    ],
)
def test_times_with_offsets_are_exact(text: str, expected: datetime) -> None:
    # check=False: the RFC's own examples lie before sounding's accepted range.
    got = parse_time(text, tz="America/New_York", check=False)  # the zone must not matter here
    assert got == expected
    assert got.utcoffset() == timedelta(0)


def test_naive_time_is_wall_clock_in_the_zone() -> None:
    # Europe/London is on BST (UTC+1) in July and GMT (UTC+0) in January
    # (IANA tz rules via zoneinfo; hand-computed instants).
    assert parse_time("2026-07-01T12:00:00", tz="Europe/London") == utc(2026, 7, 1, 11, 0)
    assert parse_time("2026-01-15 12:00", tz="Europe/London") == utc(2026, 1, 15, 12, 0)
    # America/New_York on EST (UTC-5) in January.
    assert parse_time("2026-01-15T08:15", tz="America/New_York") == utc(2026, 1, 15, 13, 15)
    # Default zone is UTC.
    assert parse_time("2026-01-15T08:15") == utc(2026, 1, 15, 8, 15)


def test_skipped_local_time_is_refused_not_shifted() -> None:
    # IANA tz (via zoneinfo): US clocks jump 02:00 EST -> 03:00 EDT on 2026-03-08,
    # so 02:30 never happens in America/New_York that day.
    z = ZoneInfo("America/New_York")
    assert datetime(2026, 3, 8, 1, 59, tzinfo=z).utcoffset() == timedelta(hours=-5)
    assert datetime(2026, 3, 8, 3, 0, tzinfo=z).utcoffset() == timedelta(hours=-4)
    with pytest.raises(TimeParseError) as exc:
        parse_time("2026-03-08T02:30:00", tz="America/New_York", where="line 7")
    msg = str(exc.value)
    assert "does not exist" in msg and "America/New_York" in msg and "2026-03-08 02:30" in msg
    assert msg.startswith("line 7: ")
    # Either side of the gap is fine.
    assert parse_time("2026-03-08T01:59", tz="America/New_York") == utc(2026, 3, 8, 6, 59)
    assert parse_time("2026-03-08T03:00", tz="America/New_York") == utc(2026, 3, 8, 7, 0)


def test_skipped_time_in_europe_is_refused() -> None:
    # IANA tz: the UK goes 01:00 GMT -> 02:00 BST on the last Sunday of March (2026-03-29).
    with pytest.raises(TimeParseError, match="does not exist in Europe/London"):
        localize(datetime(2026, 3, 29, 1, 30), "Europe/London")


def test_ambiguous_time_reads_as_first_occurrence() -> None:
    # IANA tz (via zoneinfo): on 2026-11-01 New York goes 02:00 EDT -> 01:00 EST, so
    # 01:30 happens twice; the first occurrence is EDT (UTC-4), i.e. 05:30Z
    # (the second, EST, would be 06:30Z). zoneinfo's fold=0 is the first one.
    first = datetime(2026, 11, 1, 1, 30, tzinfo=ZoneInfo("America/New_York"), fold=0)
    assert first.astimezone(UTC) == utc(2026, 11, 1, 5, 30)
    assert parse_time("2026-11-01T01:30:00", tz="America/New_York") == utc(2026, 11, 1, 5, 30)


@pytest.mark.parametrize(
    "text", ["", "   ", "yesterday", "2026-13-01T10:00", "2026-02-30T10:00", "10:00", "2026-12-02"]
)
def test_unreadable_times_are_refused(text: str) -> None:
    with pytest.raises(TimeParseError):
        parse_time(text)


def test_date_without_time_says_so() -> None:
    with pytest.raises(TimeParseError, match="no time of day"):
        parse_time("2026-12-02")


@pytest.mark.parametrize("name", ["Mars/Olympus", "", " UTC", "../etc/passwd", "/etc/localtime"])
def test_unknown_zones_are_refused(name: str) -> None:
    with pytest.raises(InputError, match="unknown time zone") as exc:
        zone(name)
    assert exc.value.field == "timezone"
    with pytest.raises(InputError, match="unknown time zone"):
        parse_time("2026-01-01T10:00", tz=name)


KOLKATA = timedelta(hours=5, minutes=30)


@pytest.mark.parametrize(
    ("name", "before", "after", "change_utc"),
    [
        # IANA tz database, rule "EU": clocks go forward on the last Sunday of
        # March at 01:00 UTC (2026-03-29), GMT +00:00 -> BST +01:00.
        ("Europe/London", timedelta(0), timedelta(hours=1), datetime(2026, 3, 29, 1, 0, tzinfo=UTC)),
        # IANA rule "US": second Sunday of March at 02:00 local standard time
        # (2026-03-08, 07:00 UTC), EST -05:00 -> EDT -04:00.
        ("America/New_York", -timedelta(hours=5), -timedelta(hours=4), datetime(2026, 3, 8, 7, tzinfo=UTC)),
        # Asia/Kolkata has kept +05:30 since 1945: no change in 2026.
        ("Asia/Kolkata", KOLKATA, KOLKATA, datetime(2026, 3, 29, 1, 0, tzinfo=UTC)),
    ],
)
def test_zones_follow_the_iana_rules_at_an_offset_change(
    name: str, before: timedelta, after: timedelta, change_utc: datetime
) -> None:
    # The offsets on either side of a known change, read through sounding's own
    # parsing of a naive local time in that zone (values from the IANA rules above).
    tz = zone(name)
    assert (change_utc - timedelta(minutes=1)).astimezone(tz).utcoffset() == before
    assert change_utc.astimezone(tz).utcoffset() == after
    local_after = (change_utc + timedelta(hours=1)).astimezone(tz).replace(tzinfo=None)
    assert parse_time(local_after.isoformat(), tz=name) == change_utc + timedelta(hours=1)
    local_before = (change_utc - timedelta(hours=1)).astimezone(tz).replace(tzinfo=None)
    assert parse_time(local_before.isoformat(), tz=name) == change_utc - timedelta(hours=1)


def test_naive_utc_round_trip() -> None:
    aware = datetime(2026, 5, 1, 10, 0, tzinfo=ZoneInfo("Europe/London"))  # BST
    naive = to_naive_utc(aware)
    assert naive == datetime(2026, 5, 1, 9, 0) and naive.tzinfo is None
    assert as_utc(naive) == aware
