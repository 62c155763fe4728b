"""Alternative phrases (a | b | ...) count towards the topic limits: each is embedded."""

from __future__ import annotations

import pytest

from models.errors import InputError
from service.segments.request import MAX_PHRASES, MAX_TOPICS, parse_topics


def test_many_alternatives_are_refused_before_embedding() -> None:
    raw = [" | ".join(f"t{i} p{j}" for j in range(1000)) for i in range(MAX_TOPICS)]
    with pytest.raises(InputError, match="topic phrases") as err:
        parse_topics(raw)
    assert err.value.field == "topics"


def test_phrases_up_to_the_limit_are_taken() -> None:
    per = MAX_PHRASES // MAX_TOPICS
    raw = [" | ".join(f"t{i} p{j}" for j in range(per)) for i in range(MAX_TOPICS)]
    assert sum(len(t.phrases) for t in parse_topics(raw)) == MAX_PHRASES
    with pytest.raises(InputError):
        parse_topics([*raw[:-1], raw[-1] + " | one more"])
