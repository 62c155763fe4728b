"""Sentences for the terminal: counted nouns with the right plural, and
prose wrapped at word boundaries to the terminal's width.

Tables go through ``render.print_table``; everything that reads as a
sentence (verdicts, examples, cautions, notes) goes through ``say``.
"""

from __future__ import annotations

import textwrap

from rich.console import Console
from rich.text import Text


def plural(n: int, noun: str, many: str | None = None) -> str:
    """``n`` with its noun: "1 account", "2 accounts", "1,234 posts"."""
    word = noun if n == 1 else (many or noun + "s")
    return f"{n:,} {word}"


def wrap(text: str, width: int, *, indent: str = "", hanging: str | None = None) -> str:
    """``text`` broken at spaces into lines of at most ``width`` characters;
    the first line starts with ``indent``, the others with ``hanging``
    (default: ``indent``). A word longer than a line is left whole."""
    return textwrap.fill(
        " ".join(text.split()),
        width=max(width, 20),
        initial_indent=indent,
        subsequent_indent=indent if hanging is None else hanging,
        break_long_words=False,
        break_on_hyphens=False,
    )


def say(
    console: Console,
    text: str,
    *,
    indent: str = "",
    hanging: str | None = None,
    style: str | None = None,
) -> None:
    """Print ``text`` as prose: wrapped at word boundaries to the console's
    width (one column spare), taken literally (no markup: the text may hold a
    user's brackets)."""
    body = wrap(text, console.width - 1, indent=indent, hanging=hanging)
    console.print(Text(body, style=style or ""), soft_wrap=True, highlight=False)
