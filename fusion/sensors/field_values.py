"""Values of a reading as a recording gives them — a table's text cell, or a message's number, boolean or
list — turned into numbers and flags, with the field named in every refusal.  Shared by the sensor kinds'
``from_fields`` (``fusion.sensors.kinds``)."""

from __future__ import annotations

import math

from fusion.errors import ObservationError

__all__ = ["number", "flag", "values", "TRUE", "FALSE", "MISSING_WORDS"]

TRUE = {"true", "1", "yes", "on"}
FALSE = {"false", "0", "no", "off"}
MISSING_WORDS = {"", "none", "null", "nan", "-"}
"""Cells that mean "nothing here" (a marker cell holding one of these: looked, saw nothing)."""


def number(v, name: str) -> float:
    """A finite number from a number or its text; ``ObservationError`` naming ``name`` otherwise."""
    if isinstance(v, bool):
        raise ObservationError(f"'{name}' must be a finite number, got {v!r}")
    if isinstance(v, str):
        try:
            v = float(v.strip())
        except ValueError:
            raise ObservationError(f"'{name}' must be a number, got {v!r}") from None
    if not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ObservationError(f"'{name}' must be a finite number, got {v!r}")
    return float(v)


def flag(v, name: str) -> bool:
    """True or false from a boolean, 0/1, or text (true/false, 1/0, yes/no, on/off)."""
    if isinstance(v, bool):
        return v
    if isinstance(v, int) and v in (0, 1):
        return bool(v)
    text = str(v).strip().lower()
    if text in TRUE | FALSE:
        return text in TRUE
    raise ObservationError(f"'{name}' must be true or false (or 1/0), got {v!r}")


def values(v, name: str) -> list:
    """The items of a field that holds several values: a list (a message, or a table's cells from a column to
    the end of the row) or one text cell with the values separated by ``;``."""
    if isinstance(v, str):
        return v.split(";")
    if isinstance(v, (list, tuple)):
        return list(v)
    raise ObservationError(f"'{name}' must hold several values, got {v!r}")
