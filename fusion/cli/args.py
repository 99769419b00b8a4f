"""Argument types and small parsing helpers of the command line: numbers, bounded counts, seeds, and
the values that start with a minus sign (a pose west of the origin)."""

from __future__ import annotations

import argparse

__all__ = [
    "seed_value",
    "count_up_to",
    "positive_int",
    "number",
    "joined_values",
    "replace_option",
    "MAX_SEED",
    "VALUE_OPTIONS",
]


MAX_SEED = 2**63 - 1


def replace_option(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--replace",
        action="store_true",
        help="the output folder may hold other results of fusion: delete them and write these",
    )


def number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None


def _whole(text: str, low: int, high: int | None, expected: str) -> int:
    """``text`` as a whole number in [low, high]; ``argparse.ArgumentTypeError`` saying ``expected`` otherwise."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected {expected}, got {text!r}") from None
    if value < low or (high is not None and value > high):
        raise argparse.ArgumentTypeError(f"expected {expected}, got {text!r}")
    return value


def seed_value(text: str) -> int:
    """A seed: a whole number from 0 to 2⁶³ − 1 (what numpy's and torch's generators take)."""
    return _whole(text, 0, MAX_SEED, f"a whole number from 0 to {MAX_SEED:,}")


def count_up_to(most: int):
    """A whole number from 1 to ``most`` (a bound keeps a typo such as 5000000 from running for days)."""

    def parse(text: str) -> int:
        return _whole(text, 1, most, f"a whole number from 1 to {most:,}")

    return parse


def positive_int(text: str) -> int:
    return _whole(text, 1, None, "a whole number ≥ 1")


def joined_values(argv: list[str]) -> list[str]:
    """``--start -0.5,2,90`` as ``--start=-0.5,2,90``: argparse would take a value starting with ``-`` (a pose
    west or south of the origin) for an option and say "expected one argument"."""
    out: list[str] = []
    for arg in argv:
        if out and out[-1] in VALUE_OPTIONS and arg[:1] == "-" and (arg[1:2].isdigit() or arg[1:2] == "."):
            out[-1] = f"{out[-1]}={arg}"
        else:
            out.append(arg)
    return out


VALUE_OPTIONS = {"--start", "--seed", "--first-seed"}
