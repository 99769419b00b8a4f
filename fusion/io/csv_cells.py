"""How numbers are written into the per-tick tables (``steps.csv``).

Six significant digits for figures; times to the microsecond, whatever their size: a robot's log
is often stamped in seconds since 1970, and at six significant digits every tick of a day would
read ``1.24845e+09``.
"""

from __future__ import annotations

__all__ = ["number_cell", "TIME_COLUMNS"]

TIME_COLUMNS = frozenset({"t"})


def number_cell(key: str, value: float) -> str:
    if key in TIME_COLUMNS:
        return f"{value:.6f}"
    return f"{value:.6g}"
