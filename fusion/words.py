"""Counts in words: "1 fault", "2 faults", "1,200 readings"."""

from __future__ import annotations

__all__ = ["plural"]


def plural(n: int | float, noun: str, nouns: str | None = None) -> str:
    """``n`` and the noun, singular for exactly one (``nouns``: an irregular plural; default noun + "s")."""
    many = nouns or f"{noun}s"
    count = f"{n:,}" if isinstance(n, int) else f"{n:g}"
    return f"{count} {noun if n == 1 else many}"
