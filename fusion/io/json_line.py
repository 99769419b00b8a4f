"""One JSON value per line, decoded with the failures a hostile or broken line can cause turned into our error.

``json.loads`` alone lets through ``NaN``/``Infinity`` (not JSON), raises ``RecursionError`` on a line of
nested brackets and ``ValueError`` on an integer of more than 4,300 digits; a log reader or the stream
must set such a line aside with a reason, never crash on it.
"""

from __future__ import annotations

import json
import math

from fusion.errors import ObservationError

__all__ = ["decode_line", "finite_number", "number_field", "shown"]


def _no_constant(name: str):
    raise ObservationError(f"not JSON: {name} is not a number a record may hold")


def decode_line(text: str):
    """The JSON value on ``text``; ``ObservationError`` saying why when there is none."""
    try:
        return json.loads(text, parse_constant=_no_constant)
    except ObservationError:
        raise
    except json.JSONDecodeError as err:
        raise ObservationError(f"not JSON ({err.msg} at column {err.colno})") from None
    except RecursionError:
        raise ObservationError("not JSON we accept: nested too deeply") from None
    except ValueError as err:  # e.g. an integer too long to convert
        raise ObservationError(f"not JSON we accept ({err})") from None


def finite_number(value) -> float | None:
    """``value`` as a float when it is a finite number (booleans are not numbers here), else None."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    try:
        f = float(value)
    except OverflowError:  # an integer beyond the float range
        return None
    return f if math.isfinite(f) else None


def shown(value) -> str:
    """A value for an error message, cut short (a hostile line may hold a megabyte in one field)."""
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def number_field(rec: dict, key: str, where: str) -> float:
    """Field ``key`` of a record as a finite number; ``ObservationError`` naming it otherwise."""
    if key not in rec:
        raise ObservationError(f"{where}: the field '{key}' is missing")
    v = finite_number(rec[key])
    if v is None:
        raise ObservationError(f"{where}: field '{key}' must be a finite number, got {shown(rec[key])}")
    return v


def flag_field(rec: dict, key: str, where: str) -> bool:
    """Field ``key`` of a record as true or false; ``ObservationError`` naming it otherwise."""
    value = rec.get(key)
    if not isinstance(value, bool):
        raise ObservationError(f"{where}: field '{key}' must be true or false, got {shown(value)}")
    return value
