"""Reading our TOML files (cases, calibrations, log layouts) with errors that name file, line and field.

``load_toml`` parses text and turns a syntax error into ``InputFileError`` with its line;
``TomlReader`` gives typed access to the parsed tables, each refusal naming the file, the line
of the offending key and the dotted field.
"""

from __future__ import annotations

import math
import re
import sys

from fusion.errors import InputFileError
from fusion.io.json_line import shown
from fusion.io.toml_lines import key_lines
from fusion.text import MAX_NAME_CHARS, plain

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - exercised on Python 3.10 only
    import tomli as tomllib

__all__ = ["TomlReader", "load_toml", "finite_numbers", "field_name", "kind_of"]


def load_toml(text: str, path) -> dict:
    """The parsed TOML of ``text``; ``InputFileError`` with the line of a syntax error."""
    try:
        return tomllib.loads(text)
    except RecursionError:
        raise InputFileError(path, None, None, "not TOML we accept: brackets nested too deeply") from None
    except tomllib.TOMLDecodeError as err:
        line = getattr(err, "lineno", None)
        message = str(err)
        if line is None:  # older tomllib: "... (at line 3, column 7)"
            found = re.search(r"line (\d+)", message)
            line = int(found.group(1)) if found else None
        raise InputFileError(path, line, None, f"not valid TOML: {message}") from None


class TomlReader:
    """Typed access to parsed TOML with errors that name file, line and field."""

    def __init__(self, path: str, text: str):
        self.path = path
        self.lines = key_lines(text)

    def fail(self, where: tuple, problem: str):
        line = None
        for cut in range(len(where), 0, -1):
            line = self.lines.get(tuple(where[:cut]))
            if line:
                break
        raise InputFileError(self.path, line, field_name(where), problem)

    def table(self, data: dict, where: tuple, key: str, required: bool = True) -> dict:
        if key not in data:
            if required:
                self.fail(where, f"the [{field_name((*where, key))}] table is missing")
            return {}
        value = data[key]
        if not isinstance(value, dict):
            self.fail((*where, key), f"must be a table, got {kind_of(value)}")
        return value

    def tables(self, data: dict, where: tuple, key: str) -> list[dict]:
        value = data.get(key, [])
        if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
            self.fail((*where, key), f"must be an array of tables ([[{key}]]), got {kind_of(value)}")
        return value

    def number(self, data, where, key, default=None, *, low=None, high=None, positive=False, whole=False):
        if key not in data:
            if default is None:
                self.fail(where, f"the field '{key}' is missing (a number)")
            return default
        value = data[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            self.fail((*where, key), f"must be a number, got {kind_of(value)}")
        if whole and not isinstance(value, int):
            self.fail((*where, key), f"must be a whole number, got {value!r}")
        if not math.isfinite(value):
            self.fail((*where, key), f"must be finite, got {value!r}")
        if positive and value <= 0:
            self.fail((*where, key), f"must be greater than 0, got {value!r}")
        if low is not None and value < low:
            self.fail((*where, key), f"must be at least {low}, got {value!r}")
        if high is not None and value > high:
            self.fail((*where, key), f"must be at most {high}, got {value!r}")
        return value

    def text(self, data, where, key, default=None, choices=None):
        if key not in data:
            if default is None:
                self.fail(where, f"the field '{key}' is missing (a string)")
            return default
        value = data[key]
        if not isinstance(value, str) or not value.strip():
            self.fail((*where, key), f"must be a non-empty string, got {kind_of(value)}")
        if choices is not None and value not in choices:
            self.fail((*where, key), f"unknown value {value!r}; choose one of: {', '.join(choices)}")
        return value

    def name(self, data, where, key, default=None, choices=None) -> str:
        """A name (of the case, the site, a sensor, door or marker): as ``text``, at most ``MAX_NAME_CHARS``
        characters, no control characters (a name reaches terminals, files and plots)."""
        value = self.text(data, where, key, default, choices)
        if len(value) > MAX_NAME_CHARS:
            self.fail((*where, key), f"is {len(value):,} characters long; names are limited to {MAX_NAME_CHARS}")
        if plain(value) != value:
            self.fail((*where, key), f"holds control characters ({shown(value)}); names must be printable text")
        return value

    def flag(self, data, where, key, default=None):
        if key not in data:
            if default is None:
                self.fail(where, f"the field '{key}' is missing (true or false)")
            return default
        if not isinstance(data[key], bool):
            self.fail((*where, key), f"must be true or false, got {kind_of(data[key])}")
        return data[key]

    def numbers(self, data, where, key, length=None, default=None):
        if key not in data:
            if default is None:
                self.fail(where, f"the field '{key}' is missing (an array of numbers)")
            return default
        value = data[key]
        if not finite_numbers(value):
            self.fail((*where, key), f"must be an array of finite numbers, got {kind_of(value)}")
        if length is not None and len(value) != length:
            self.fail((*where, key), f"must hold {length} numbers, got {len(value)}")
        return tuple(float(v) for v in value)

    def only(self, data: dict, where: tuple, allowed) -> None:
        for key in data:
            if key not in allowed:
                self.fail((*where, key), f"unknown field '{key}'; known fields here: {', '.join(sorted(allowed))}")


def finite_numbers(value, length: int | None = None) -> bool:
    """An array of finite numbers (booleans are not numbers here), of ``length`` items if given."""
    return (
        isinstance(value, list)
        and (length is None or len(value) == length)
        and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in value)
    )


def field_name(where: tuple) -> str:
    out = ""
    for part in where:
        out += f"[{part}]" if isinstance(part, int) else (f".{part}" if out else str(part))
    return out


def kind_of(value) -> str:
    if isinstance(value, bool):
        return f"a boolean ({value})"
    if isinstance(value, (int, float)):
        return f"a number ({value!r})"
    if isinstance(value, str):
        return f"a string ({value!r})"
    if isinstance(value, list):
        return "an array"
    if isinstance(value, dict):
        return "a table"
    return type(value).__name__
