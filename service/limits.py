"""Request limits: draft length and drafts per request (SOUNDING_MAX_*).

Checked where drafts enter the forecast path, so the API, the CLI and the
plan file refuse the same things with the same message.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from models.errors import InputError, LimitExceeded
from service.settings import Settings

#: Python's whitespace (``str.isspace``: what ``strip`` and ``re``'s ``\s``
#: remove), written out so that JSON Schema (ECMA-262) means the same set.
SPACE_CLASS = r"\t-\r\u001c-\u0020\u0085\u00a0\u1680\u2000-\u200a\u2028\u2029\u202f\u205f\u3000"
#: A text that is more than whitespace: it holds a character outside that set
#: (a JSON Schema pattern, which matches anywhere). ``check_draft`` applies the
#: same rule with ``strip``.
VISIBLE_PATTERN = f"[^{SPACE_CLASS}]"


@dataclass(frozen=True, slots=True)
class Limits:
    max_draft_chars: int
    max_batch: int

    @classmethod
    def from_settings(cls, settings: Settings) -> Limits:
        return cls(max_draft_chars=settings.max_draft_chars, max_batch=settings.max_batch)

    def check_draft(self, text: str) -> str:
        """The draft text, or a clear error when it is empty or too long."""
        if not text or not text.strip():
            raise InputError("the draft text is empty", field="text")
        if len(text) > self.max_draft_chars:
            raise LimitExceeded(
                f"the draft has {len(text)} characters; the limit is "
                f"{self.max_draft_chars} (SOUNDING_MAX_DRAFT_CHARS)",
                limit="max_draft_chars",
                maximum=self.max_draft_chars,
                field="text",
            )
        return text

    def check_batch(self, n: int) -> int:
        """Refuse more drafts in one request than SOUNDING_MAX_BATCH."""
        if n > self.max_batch:
            raise LimitExceeded(
                f"{n} drafts in one request; the limit is {self.max_batch} (SOUNDING_MAX_BATCH)",
                limit="max_batch",
                maximum=self.max_batch,
                field="drafts",
            )
        return n

    def check_drafts(self, texts: Sequence[str]) -> None:
        self.check_batch(len(texts))
        for t in texts:
            self.check_draft(t)
