"""Strings a request may carry: no lone UTF-16 surrogates.

JSON lets ``"\\ud800"`` through as a string Python holds but cannot encode
(RFC 8259 section 8.2 calls such strings unpredictable); the tokenizer, the
store and the answer all need UTF-8, so such a field is refused where it
enters, naming the field.
"""

from __future__ import annotations

from typing import Any


def has_lone_surrogate(value: Any) -> bool:
    """Whether ``value`` (a string, or a list of them) holds a lone surrogate."""
    if isinstance(value, str):
        try:
            value.encode("utf-8")
        except UnicodeEncodeError:
            return True
        return False
    if isinstance(value, list | tuple):
        return any(has_lone_surrogate(v) for v in value)
    # A nested object is a model of its own, checked there with its own field names.
    return False


def utf8_only(value: Any) -> Any:
    """A field validator: refuse a value with a lone surrogate."""
    if has_lone_surrogate(value):
        raise ValueError("holds a lone UTF-16 surrogate (e.g. \\ud800), which is not text; send UTF-8 text")
    return value
