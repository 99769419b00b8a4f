"""Checks of what a mass function is built from: the frame's size, the masses, the cells named, the size
of the focal-set table; each refusal says what was wrong."""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from fusion.belief import bitset
from fusion.errors import (
    CellIndexError,
    FrameMismatchError,
    MassValueError,
    RuleError,
)

__all__ = ["MASS_TOLERANCE", "cell_vector", "check_same_frame"]

MASS_TOLERANCE = 1e-9
"""How far the masses given to a constructor may sum from 1 (they are then rescaled)."""

# Largest focal-set table a constructor will allocate, in bytes.
_MAX_TABLE_BYTES = 2 * 1024**3


def _check_frame_size(n) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or int(n) < 1:
        raise MassValueError(f"a frame needs a whole number of cells ≥ 1, got {n!r}")
    return int(n)


def _check_masses(masses: np.ndarray, keys=None) -> None:
    def where(i):
        return f"the focal set {_short(keys[i])}" if keys is not None else f"entry {i}"

    bad = ~np.isfinite(masses)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise MassValueError(f"mass {float(masses[i])!r} of {where(i)} is not a finite number")
    neg = masses < 0
    if neg.any():
        i = int(np.flatnonzero(neg)[0])
        raise MassValueError(f"mass {float(masses[i])!r} of {where(i)} is negative; masses lie in [0, 1]")
    total = float(masses.sum())
    if abs(total - 1.0) > MASS_TOLERANCE:
        raise MassValueError(
            f"masses sum to {total!r}, not 1 (tolerance {MASS_TOLERANCE:g}); "
            "rescale them, or put the missing mass on the whole frame to express ignorance"
        )


def _check_table(k: int, n: int) -> None:
    need = k * bitset.n_words(n) * 8
    if need > _MAX_TABLE_BYTES:
        raise MassValueError(
            f"{k} focal sets on {n} cells would need {need / 1024**3:.1f} GiB of packed sets "
            f"(limit {_MAX_TABLE_BYTES / 1024**3:.0f} GiB); use fewer focal sets, or the Bayesian back end"
        )


def _cells(cells):
    """Cell indices (or a boolean mask) as an array; ``pack_indices`` checks their range."""
    if isinstance(cells, (int, np.integer)) and not isinstance(cells, bool):
        return np.array([int(cells)])
    if isinstance(cells, np.ndarray):
        return cells
    if isinstance(cells, Iterable) and not isinstance(cells, (str, bytes)):
        return np.array(list(cells))
    raise CellIndexError(f"a set of cells must be a collection of whole-number indices, got {cells!r}")


def _as_float(value, key) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        raise MassValueError(f"mass of the focal set {_short(key)} must be a number, got {value!r}") from None


def _as_vector(values, name: str) -> np.ndarray:
    return cell_vector(values, name, MassValueError)


def cell_vector(values, name: str, error=MassValueError, copy: bool = False) -> np.ndarray:
    """``values`` as a non-empty 1-D float64 vector of finite numbers, one per cell (a copy when ``copy``);
    ``error`` (a ``FusionError`` type) naming ``name`` and the first bad cell otherwise."""
    try:
        v = np.array(values, dtype=np.float64) if copy else np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise error(f"{name} must be a vector of numbers, one per cell") from None
    if v.ndim != 1 or v.size == 0:
        raise error(f"{name} must be a non-empty vector with one entry per cell, got shape {v.shape}")
    if not np.isfinite(v).all():
        i = int(np.flatnonzero(~np.isfinite(v))[0])
        raise error(f"{name} has the non-finite value {float(v[i])!r} at cell {i}")
    return v


def _short(cells) -> str:
    try:
        items = sorted(int(c) for c in (np.flatnonzero(cells) if getattr(cells, "dtype", None) == np.bool_ else cells))
    except (TypeError, ValueError):
        return repr(cells)
    if len(items) > 6:
        return "{" + ", ".join(map(str, items[:3])) + f", … ({len(items)} cells)" + "}"
    return "{" + ", ".join(map(str, items)) + "}"


def check_same_frame(*ms) -> int:
    """Frame size shared by all arguments; ``FrameMismatchError`` naming the first that differs."""
    if not ms:
        raise RuleError("at least one mass function is needed")
    for i, m in enumerate(ms):
        if not all(hasattr(m, name) for name in ("n", "sets", "masses")):  # what a MassFunction offers the rules
            raise RuleError(f"argument {i + 1} is a {type(m).__name__}, not a MassFunction")
    n = ms[0].n
    for i, m in enumerate(ms[1:], start=2):
        if m.n != n:
            raise FrameMismatchError(
                f"mass function {i} is over {m.n} cells but mass function 1 is over {n}; "
                "beliefs can only be combined on the same frame of discernment"
            )
    return n
