"""The request schema states the rules the server applies, value by value.

Each case is judged twice: by the `jsonschema` package, an implementation of
JSON Schema 2020-12 apart from ours, against the schema the API publishes,
and by the server's own check. They must agree both ways, so a client built
from the OpenAPI document is neither refused what it was told is valid nor
told a value is invalid that the server takes.
"""

from __future__ import annotations

import sys

import jsonschema
import pytest

from models.errors import InputError
from service.api.schemas import DraftIn, SegmentsRequest
from service.limits import VISIBLE_PATTERN, Limits
from service.segments.request import check_hour_edges, check_length_edges, parse_topics


def _property(model: type, name: str) -> dict:
    schema = model.model_json_schema()
    return schema["properties"][name]


def _valid(schema: dict, value: object) -> bool:
    validator = jsonschema.Draft202012Validator(schema, format_checker=jsonschema.FormatChecker())
    return validator.is_valid(value)


def _server_takes(check, value: object) -> bool:
    try:
        check(value)
    except InputError:
        return False
    return True


def test_the_visible_text_pattern_is_python_whitespace_exactly() -> None:
    # Every code point: the pattern (as JSON Schema reads it, through
    # jsonschema) finds a character in a one-character text exactly when
    # Python's str.strip, the server's rule, would leave something.
    schema = {"type": "string", "pattern": VISIBLE_PATTERN}
    validator = jsonschema.Draft202012Validator(schema)
    disagree = [
        hex(c)
        for c in range(sys.maxunicode + 1)
        if not 0xD800 <= c <= 0xDFFF and validator.is_valid(chr(c)) != bool(chr(c).strip())
    ]
    assert disagree == []


@pytest.mark.parametrize(
    "text",
    ["Magnolias are out", " ", "\t\n", "\u3000\u2009", "\u200b", "a", " \u00a0x ", "\u0085", "\ufeff"],
)
def test_draft_text_schema_and_server_agree(text: str) -> None:
    limits = Limits(max_draft_chars=5000, max_batch=10)
    assert _valid(_property(DraftIn, "text"), text) == _server_takes(limits.check_draft, text)


TOPICS = [
    "flowers in bloom",
    "shop offers | membership",
    "flowers | ",
    " | ",
    "|",
    "",
    "other",
    " Other |",
    "OTHER | other",
    "others",
    "another",
    "x" * 200,
    "x" * 201,
    "\u3000",
    "#seedswap",
]


@pytest.mark.parametrize("topic", TOPICS)
def test_topic_phrase_schema_and_server_agree(topic: str) -> None:
    item = _property(SegmentsRequest, "topics")["items"]
    assert _valid(item, topic) == _server_takes(parse_topics, [topic]), topic


EDGES = [
    [0, 6, 9, 12, 15, 18, 21, 24],
    [24, 0, 12],
    [0, 12, 12, 24],
    [0, 24],
    [0, 6, 12],
    [6, 12, 24],
    [0, 6, 25],
    [0],
]


@pytest.mark.parametrize("edges", EDGES)
def test_hour_edges_schema_and_server_agree(edges: list[int]) -> None:
    schema = _property(SegmentsRequest, "hour_edges")
    assert _valid(schema, edges) == _server_takes(check_hour_edges, edges)


@pytest.mark.parametrize(
    "edges", [[0, 80, 160], [160, 0, 80], [0, 80, 80], [10, 80], [0], [0, 10**9], [0, 10**9 + 1], [0, 5]]
)
def test_length_edges_schema_and_server_agree(edges: list[int]) -> None:
    schema = _property(SegmentsRequest, "length_edges")
    assert _valid(schema, edges) == _server_takes(check_length_edges, edges)


def test_edges_in_any_order_mean_the_same_buckets() -> None:
    from models.segment_bins import bucket_hours, length_band, length_labels

    hours = [0.0, 5.5, 6.0, 13.0, 23.9]
    assert list(bucket_hours(hours, [24, 12, 0, 6])) == list(bucket_hours(hours, [0, 6, 12, 24]))
    # A text past the last edge falls in an open last band.
    assert length_labels([0, 80]) == ["<80", "≥80"]
    assert list(length_band([10, 80, 5000], [80, 0])) == ["<80", "≥80", "≥80"]


def test_empty_alternatives_are_left_out_and_repeated_topics_count_once() -> None:
    topics = parse_topics(["Flowers in bloom | ", "flowers  in bloom", "shop | | offers"])
    assert [t.name for t in topics] == ["Flowers in bloom", "shop | offers"]
    assert topics[1].phrases == ("shop", "offers")


@pytest.mark.parametrize(
    "planned_at",
    [
        "2026-12-03T12:30:00+01:00",
        "2026-12-03T12:30:00.123456Z",
        "2026-12-03t12:30:00z",
        "2199-12-31T23:59:59-23:59",
        "1989-12-31T23:00:00Z",
        "2200-01-01T00:00:00Z",
    ],
)
def test_planned_time_schema_and_server_agree_on_rfc3339_times(planned_at: str) -> None:
    from service.clock import parse_time

    # RFC 3339 section 5.6 times: the schema's format and years, and the
    # server's reading, agree. (The server also reads other ISO 8601 layouts,
    # which the schema does not promise.)
    schema = _property(DraftIn, "planned_at")
    assert _valid(schema, planned_at) == _server_takes(parse_time, planned_at)
