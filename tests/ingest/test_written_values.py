"""Numbers and times as people write them (service.ingest.numbers, service.clock),
checked against independent readers: babel's locale-aware number parsing and
python-dateutil's date parser."""

from __future__ import annotations

from datetime import UTC, datetime
from decimal import Decimal

import pytest
from babel.numbers import NumberFormatError, parse_decimal
from dateutil import parser as dateutil_parser

from models.errors import InputError, TimeParseError
from service.ingest.mappings import combine, from_toml, to_toml
from service.ingest.numbers import MAX_COUNT, NumberError, read_count, read_rate
from service.ingest.options import ImportOptions
from service.ingest.timestamps import TimeLayout, TimeReader


# Counts against babel (CLDR number formats): en groups with ',' and a decimal point,
# de groups with '.' and a decimal comma, fr groups with a narrow no-break space.
@pytest.mark.parametrize(
    ("text", "locale", "comma"),
    [
        ("1,234", "en", False),
        ("12,345,678", "en", False),
        ("987", "en", False),
        ("1,234.0", "en", False),
        ("1.234", "de", True),
        ("2.345.678", "de", True),
        ("1.234,0", "de", True),
        ("1\u202f234", "fr", False),
        ("1\u202f234", "fr", True),
    ],
)
def test_counts_read_as_babel_reads_them(text: str, locale: str, comma: bool) -> None:
    assert Decimal(read_count(text, decimal_comma=comma).value) == parse_decimal(
        text, locale=locale, strict=True
    )


@pytest.mark.parametrize(("text", "locale"), [("1,23", "en"), ("1,2345", "en"), ("12,34,567", "en")])
def test_misgrouped_counts_are_refused_as_babel_refuses_them(text: str, locale: str) -> None:
    with pytest.raises(NumberFormatError):
        parse_decimal(text, locale=locale, strict=True)
    with pytest.raises(NumberError):
        read_count(text)


def test_abbreviations_are_approximate_and_2_53_is_the_limit() -> None:
    r = read_count("1.2K")
    assert (r.value, r.approximate, r.low, r.high) == (1200, True, 1150, 1250)
    assert read_count("3M").value == 3_000_000 and read_count("3M").approximate
    assert not read_count("1200").approximate
    # 2**53 is the last integer a float64 holds exactly (IEEE 754 binary64).
    assert float(2**53) + 1 == float(2**53)
    assert read_count(str(2**53)).value == MAX_COUNT
    for big in (2**53 + 1, 2**63, 10**30):
        with pytest.raises(NumberError, match="2\\^53"):
            read_count(str(big))


def test_rates_carry_the_precision_they_are_written_with() -> None:
    r = read_rate("4.5%")
    assert (r.value, r.low, r.high) == (Decimal("0.045"), Decimal("0.0445"), Decimal("0.0455"))
    assert read_rate("0.045").value == Decimal("0.045")
    assert read_rate("4,5%", decimal_comma=True).value == Decimal("0.045")


# Times against dateutil, on values that read only one way ---------------------------------

UNAMBIGUOUS = [
    "25/11/2026 09:30",
    "11/25/2026 9:30 PM",
    "Nov 3, 2026 2:05 PM",
    "3 November 2026 14:05",
    "2026/11/25 14:05",
    "Tue, 03 Nov 2026 14:05:00",
    "28.03.2026 23:15",
    "12/31/2026 11:59 PM",
    "31-Dec-2026 00:01",
]


@pytest.mark.parametrize("text", UNAMBIGUOUS)
def test_unambiguous_layouts_read_as_dateutil_reads_them(text: str) -> None:
    # dateutil falls back to the only valid order by itself, so both of its readings agree.
    expected = dateutil_parser.parse(text, dayfirst=True)
    assert expected == dateutil_parser.parse(text, dayfirst=False)
    got = TimeReader(layout=TimeLayout()).read(text, tz="UTC")
    assert got == expected.replace(tzinfo=UTC)


@pytest.mark.parametrize("text", ["03/11/2026 14:05", "1/2/2026 10:00", "05.06.2026 08:00"])
def test_ambiguous_values_need_an_order_and_then_read_as_dateutil_does(text: str) -> None:
    # dateutil reads these differently with dayfirst True and False: ambiguous.
    day, month = (dateutil_parser.parse(text, dayfirst=d) for d in (True, False))
    assert day != month
    with pytest.raises(TimeParseError, match="--day-first or --month-first"):
        TimeReader(layout=TimeLayout()).read(text, tz="UTC")
    assert TimeReader(layout=TimeLayout(date_order="day-first")).read(text, tz="UTC") == day.replace(
        tzinfo=UTC
    )
    assert TimeReader(layout=TimeLayout(date_order="month-first")).read(text, tz="UTC") == month.replace(
        tzinfo=UTC
    )


def test_unix_times() -> None:
    # 1,800,000,000 s after 1970-01-01T00:00Z (POSIX time) is 2027-01-15T08:00:00Z.
    expected = datetime(1970, 1, 1, tzinfo=UTC).timestamp() + 1_800_000_000
    assert TimeReader(layout=TimeLayout(pattern="epoch")).read(
        "1800000000", tz="UTC"
    ) == datetime.fromtimestamp(expected, UTC)
    assert TimeReader(layout=TimeLayout(pattern="epoch_ms")).read(
        "1800000000000", tz="UTC"
    ) == datetime.fromtimestamp(expected, UTC)
    with pytest.raises(TimeParseError, match="outside the accepted range"):
        TimeReader(layout=TimeLayout(pattern="epoch")).read("0", tz="UTC")


# Saved mappings --------------------------------------------------------------------------


def test_a_mapping_round_trips_through_toml_and_options_given_now_win() -> None:
    saved = ImportOptions(
        mapping={"text": "Post body", "posted_at": "Date"},
        account="loomhaven",
        timezone="Europe/London",
        time_format="%d/%m/%Y %H:%M",
        decimal_comma=True,
    )
    assert from_toml(to_toml(saved), where="t") == saved
    now = combine(saved, ImportOptions(mapping={"text": "Body"}, date_order="day-first"))
    assert now.mapping == {"text": "Body", "posted_at": "Date"}
    assert (now.time_format, now.date_order, now.account) == (None, "day-first", "loomhaven")


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("[columns]\nnot_ours = 'X'\n", "not one of our columns"),
        ("colour = 'green'\n", "unknown keys"),
        ("[times]\nformat = '%d/%m/%Y'\n", "no time of day"),
        ("[times\n", "not valid TOML"),
    ],
)
def test_bad_mapping_files_are_refused(text: str, fragment: str) -> None:
    with pytest.raises(InputError, match=fragment):
        from_toml(text, where="mapping x")
