"""Reading counts and rates as people write them in exports.

Counts may carry thousands separators (``1,234``, ``1 234``, ``1.234`` with a
decimal comma), an exponent (``1.2e3``) or an abbreviation (``1.2K``,
``3M``, ``2B``). An abbreviated count is only known to the shown digits, so
it comes back marked approximate, with the interval it stands for. Rates
are fractions (``0.045``) or percentages (``4.5%``).

Numbers are read as :class:`~decimal.Decimal`, never through a float, so a
count above 2**53 is refused rather than rounded: the store and the
forecasts hold counts exactly only up to :data:`MAX_COUNT`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from decimal import Decimal, InvalidOperation

#: The largest count stored: every integer up to 2**53 is exact as a
#: float64 (IEEE 754 has a 53-bit significand), which the models use.
MAX_COUNT = 2**53

_ZERO = Decimal(0)
_SCALE = {"": 1, "K": 10**3, "M": 10**6, "B": 10**9}
# Separators a person may group thousands with: comma, full stop, space,
# no-break space, narrow no-break space, thin space, apostrophe, underscore.
_SPACES = " \u00a0\u202f\u2009"
_SUFFIX = re.compile(r"^(?P<num>.*?)\s*(?P<suffix>[KkMmBb])$")


class NumberError(ValueError):
    """A value that is not a number of the kind asked for; ``hint`` says what to try."""

    def __init__(self, reason: str, *, hint: str | None = None) -> None:
        super().__init__(reason)
        self.reason, self.hint = reason, hint


@dataclass(frozen=True, slots=True)
class Reading:
    """A number as read: its value and how far the written digits pin it down."""

    value: Decimal
    half_width: Decimal  # the true value lies within value +- half_width
    approximate: bool
    place: Decimal = Decimal(1)  # the unit of the last written digit, before any K/M/B

    @property
    def low(self) -> Decimal:
        return self.value - self.half_width

    @property
    def high(self) -> Decimal:
        return self.value + self.half_width


def _grammar(*, decimal_comma: bool) -> re.Pattern[str]:
    point, group = (
        (",", r"[.'_ \u00a0\u202f\u2009]") if decimal_comma else (r"\.", r"[,'_ \u00a0\u202f\u2009]")
    )
    return re.compile(
        rf"^(?P<sign>[+-]?)(?P<int>\d{{1,3}}(?:(?P<sep>{group})\d{{3}})?(?:(?P=sep)\d{{3}})*|\d+)"
        rf"(?:{point}(?P<frac>\d+))?(?:[eE](?P<exp>[+-]?\d+))?$"
    )


_POINT = _grammar(decimal_comma=False)
_COMMA = _grammar(decimal_comma=True)


def read_number(raw: str, *, decimal_comma: bool = False, allow_suffix: bool = True) -> Reading:
    """Read one written number (no percent sign); raise NumberError."""
    s = raw.strip().strip(_SPACES)
    scale = 1
    m = _SUFFIX.match(s)
    if m and allow_suffix:
        s, scale = m["num"].strip(), _SCALE[m["suffix"].upper()]
    g = (_COMMA if decimal_comma else _POINT).match(s)
    if g is None:
        hint = None
        if not decimal_comma and re.fullmatch(r"[+-]?\d{1,3}(?:\.\d{3})+(?:,\d+)?", s):
            hint = "if the file writes 1.234 for a thousand and more, give --decimal-comma"
        elif not decimal_comma and re.fullmatch(r"[+-]?\d+,\d{1,2}", s):
            hint = "if the file writes decimals with a comma, give --decimal-comma"
        elif decimal_comma and re.fullmatch(r"[+-]?\d{1,3}(?:,\d{3})+(?:\.\d+)?", s):
            hint = "this looks like a decimal point: leave out --decimal-comma"
        raise NumberError(f"{raw!r} is not a number", hint=hint)
    digits = g["int"].replace(g["sep"] or "\0", "")
    frac = g["frac"] or ""
    try:
        value = Decimal(f"{g['sign']}{digits}.{frac or '0'}e{g['exp'] or 0}")
    except InvalidOperation:
        raise NumberError(f"{raw!r} is not a number") from None
    if not value.is_finite() or abs(value.adjusted()) > 40:
        raise NumberError(f"{raw!r} is not a number of a usable size")
    # The last written digit's place: 1.2K is known to the hundred.
    place = Decimal(1).scaleb(-len(frac) + int(g["exp"] or 0)) * scale
    approximate = scale > 1 and place > 1
    return Reading(
        value=value * scale,
        half_width=place / 2 if approximate else Decimal(0),
        approximate=approximate,
        place=place / scale,
    )


def _odd_writing(raw: str) -> NumberError | None:
    # Python's int() and \\d read every script's digits and 1_000; an export never
    # writes those, so a count in them is more likely a damaged field than a number.
    if any(c.isdigit() and not c.isascii() for c in raw):
        return NumberError(f"{raw!r} uses digits other than 0-9", hint="write counts with the digits 0-9")
    if "_" in raw:
        return NumberError(f"{raw!r} has an underscore in it", hint="write 1000 or 1,000")
    if re.search(r"[0-9.][eE][+-]?[0-9]", raw):
        return NumberError(f"{raw!r} is written with an exponent", hint="write the count out, e.g. 1500")
    return None


def read_count(raw: str, *, decimal_comma: bool = False) -> Reading:
    """A non-negative whole count up to MAX_COUNT; abbreviations are approximate."""
    plain = raw.strip()
    odd = None if plain.isascii() and plain.isdigit() else _odd_writing(plain)
    if odd is not None:
        raise odd
    if plain.isascii() and plain.isdigit():  # the common case, without the grammar
        if len(plain) > 15 and int(plain) > MAX_COUNT:
            raise NumberError(f"{raw!r} is above {MAX_COUNT:,} (2^53), the largest count stored exactly")
        return Reading(value=Decimal(int(plain)), half_width=_ZERO, approximate=False)
    if plain.endswith("%"):
        raise NumberError(
            f"{raw!r} is a percentage, not a count",
            hint="map the rate to engagement_rate, counts to count columns",
        )
    r = read_number(raw, decimal_comma=decimal_comma)
    if r.value < 0:
        raise NumberError(f"{raw!r} is negative")
    whole = r.value.to_integral_value()
    if r.value != whole:
        if not r.approximate:
            hint = None
            if not decimal_comma and re.fullmatch(r"\s*\d{1,3}\.\d{3}\s*", raw):
                hint = "if the file writes 1.234 for a thousand and more, give --decimal-comma"
            raise NumberError(f"{raw!r} is not a whole number", hint=hint)
        r = Reading(value=whole, half_width=r.half_width, approximate=True)
    if r.value > MAX_COUNT:
        raise NumberError(f"{raw!r} is above {MAX_COUNT:,} (2^53), the largest count stored exactly")
    return Reading(value=r.value.to_integral_value(), half_width=r.half_width, approximate=r.approximate)


def read_rate(raw: str, *, decimal_comma: bool = False) -> Reading:
    """A rate as a fraction: ``4.5%`` is 0.045, ``0.045`` stays 0.045.

    The half-width is half a unit of the last written digit, since exports
    round rates to the digits they show.
    """
    s = raw.strip()
    percent = s.endswith("%")
    if percent:
        s = s[:-1]
    r = read_number(s, decimal_comma=decimal_comma, allow_suffix=False)
    if r.value < 0:
        raise NumberError(f"{raw!r} is negative")
    div = Decimal(100) if percent else Decimal(1)
    return Reading(value=r.value / div, half_width=r.place / 2 / div, approximate=False, place=r.place / div)
