"""Text that came from an input (a name, a reason quoting a log line, a path), made safe to show.

A case file or a log may hold anything in a name: terminal escape codes, rich markup such as
``[/]`` or ``[link=…]``, or ``$…$`` that a plot would read as mathematics.  Everything we show
of it goes through one of these, so it appears literally and cannot restyle, break or take over
the terminal or a plot.
"""

from __future__ import annotations

import unicodedata

__all__ = ["plain", "literal", "MAX_NAME_CHARS"]

MAX_NAME_CHARS = 200
"""Longest name (case, site, sensor, door, marker) accepted anywhere: in a case file and in a log alike."""


def plain(text) -> str:
    """``text`` with control characters (escape codes, bells, carriage returns, …) removed; tabs and
    newlines become spaces."""
    text = str(text)
    if text.isprintable():
        return text
    return "".join(" " if c in "\t\n" else c for c in text if c in "\t\n" or unicodedata.category(c)[0] != "C")


def literal(text) -> str:
    """``plain(text)`` with rich markup escaped: printed through rich it shows exactly these characters."""
    from rich.markup import escape

    return escape(plain(text))
