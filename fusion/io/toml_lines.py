"""Line numbers of the keys of a TOML file, so that errors can point at a line.

``tomllib`` returns plain values without positions; this scans the text once and
maps each key path — e.g. ``("sensors", 2, "rate_hz")`` for the third
``[[sensors]]`` table — to the line where it is written.  It understands table
headers, arrays of tables and dotted keys; a value that spans lines is located
at its first line.
"""

from __future__ import annotations

import re

__all__ = ["key_lines"]

_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(r"""^\s*((?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*')(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|"[^"]*"|'[^']*'))*)\s*=""")


def _parts(dotted: str) -> list[str]:
    return [p.strip().strip("\"'") for p in re.findall(r"""(?:"[^"]*"|'[^']*'|[^.]+)""", dotted)]


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
            header = _HEADER.match(line)
            if header:
                names = tuple(_parts(header.group(2)))
                if header.group(1) == "[[":
                    base = (*_resolve(names[:-1], counters), names[-1])
                    index = counters.get(base, -1) + 1
                    counters[base] = index
                    table = (*base, index)
                else:
                    table = _resolve(names, counters)
                lines.setdefault(table, number)
                continue
            key = _KEY.match(line)
            if key:
                path = (*table, *_parts(key.group(1)))
                lines.setdefault(path, number)
                value = line[key.end() :]
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
