"""The start pose given on a command line: ``x,y,heading_deg``, or ``anywhere``."""

from __future__ import annotations

import math

from fusion.errors import ObservationError

__all__ = ["parse_start", "ANYWHERE"]

ANYWHERE = "anywhere"
"""``--start anywhere``: start from ignorance over free space, also when true poses are given."""


def parse_start(text: str) -> tuple[float, float, float] | str:
    """``x,y,heading_deg`` (metres, degrees) from the command line, or ``anywhere`` (``ANYWHERE``: start from
    ignorance even when a truth file is given, to score a localization from an unknown start)."""
    if text.strip().lower() == ANYWHERE:
        return ANYWHERE
    try:
        x, y, h = (float(v) for v in text.split(","))
    except ValueError:
        raise ObservationError(
            f"--start must be x,y,heading_deg in metres and degrees, or 'anywhere', got {text!r}"
        ) from None
    if not all(math.isfinite(v) for v in (x, y, h)):
        raise ObservationError(f"--start must be finite numbers, got {text!r}")
    return x, y, h
