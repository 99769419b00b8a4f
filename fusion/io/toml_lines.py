"""Line numbers of the keys of a TOML file, so that errors can point at a line.

``tomllib`` returns plain values without positions; this scans the text once and
maps each key path — e.g. ``("sensors", 2, "rate_hz")`` for the third
``[[sensors]]`` table — to the line where it is written.  It understands table
headers, arrays of tables and dotted keys; a value that spans lines is located
at its first line.

It runs in time linear in the text: headers and keys are scanned character by character, with no
regular expression that could backtrack on a hostile line (thousands of spaces before a quote).
"""

from __future__ import annotations

import re

__all__ = ["key_lines"]

_BARE = frozenset("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz0123456789_-")


def _dotted_key(text: str, i: int) -> tuple[list[str], int] | None:
    """The parts of a dotted key starting at ``text[i]`` and the index just after it, or None."""
    parts: list[str] = []
    n = len(text)
    while True:
        while i < n and text[i] in " \t":
            i += 1
        if i < n and text[i] in "\"'":
            end = text.find(text[i], i + 1)
            if end < 0:
                return None
            parts.append(text[i + 1 : end])
            i = end + 1
        else:
            start = i
            while i < n and text[i] in _BARE:
                i += 1
            if i == start:
                return None
            parts.append(text[start:i])
        while i < n and text[i] in " \t":
            i += 1
        if i < n and text[i] == ".":
            i += 1
            continue
        return parts, i


def _header(line: str) -> tuple[bool, list[str]] | None:
    """``(is an array of tables, names)`` when ``line`` is a table header."""
    i = len(line) - len(line.lstrip())
    if not line.startswith("[", i):
        return None
    double = line.startswith("[[", i)
    found = _dotted_key(line, i + (2 if double else 1))
    if found is None:
        return None
    names, j = found
    close = "]]" if double else "]"
    if not line.startswith(close, j):
        return None
    rest = line[j + len(close) :].strip()
    if rest and not rest.startswith("#"):
        return None
    return double, names


def _key(line: str) -> tuple[list[str], int] | None:
    """The parts of the key of a ``key = value`` line and the index just after the ``=``."""
    found = _dotted_key(line, 0)
    if found is None:
        return None
    parts, j = found
    if not line.startswith("=", j):
        return None
    return parts, j + 1


def key_lines(text: str) -> dict[tuple, int]:
    lines: dict[tuple, int] = {}
    counters: dict[tuple, int] = {}
    table: tuple = ()
    depth = 0  # open brackets of a value spanning lines
    in_multiline_string = False
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw
        if in_multiline_string:
            if '"""' in line or "'''" in line:
                in_multiline_string = False
            continue
        if depth == 0:
            header = _header(line)
            if header:
                double, names = header
                names = tuple(names)
                if double:
                    base = (*_resolve(names[:-1], counters), names[-1])
                    index = counters.get(base, -1) + 1
                    counters[base] = index
                    table = (*base, index)
                else:
                    table = _resolve(names, counters)
                lines.setdefault(table, number)
                continue
            key = _key(line)
            if key:
                path = (*table, *key[0])
                lines.setdefault(path, number)
                value = line[key[1] :]
                if value.count('"""') == 1 or value.count("'''") == 1:
                    in_multiline_string = True
                depth += _bracket_balance(value)
            continue
        depth += _bracket_balance(line)
    return lines


def _resolve(names: tuple, counters: dict) -> tuple:
    """A header path with the current index of every enclosing array of tables filled in."""
    out: tuple = ()
    for name in names:
        out = (*out, name)
        if out in counters:
            out = (*out, counters[out])
    return out


def _bracket_balance(text: str) -> int:
    text = re.sub(r'"(?:[^"\\]|\\.)*"|\'[^\']*\'', "", text.split("#", 1)[0] if "#" in text else text)
    return text.count("[") + text.count("{") - text.count("]") - text.count("}")
