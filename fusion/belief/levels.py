"""Each cell's geometric level: its plausibility rounded *up* to 1, 1/2, 1/4, … (``MassFunction.from_contour`` with
``spacing="geometric"``, and the conflict of two consonant beliefs level by level), read from the float's bits when
numba is installed (``fusion.compiled``), else from ``np.frexp``: the same levels either way."""

from __future__ import annotations

import numpy as np

from fusion import compiled

__all__ = ["geometric_level_index", "geometric_levels"]


def geometric_level_index(contour: np.ndarray, levels: int) -> np.ndarray:
    """Each cell's level after rounding its plausibility *up* to 1, 1/2, …, 2^−(levels−1): 0 for the top
    level, ``levels`` for a plausibility of 0 (in no focal set)."""
    return _index(contour, levels)[0]


def geometric_levels(contour: np.ndarray, levels: int) -> tuple[np.ndarray, np.ndarray]:
    """``geometric_level_index`` and which of the levels 0..``levels`` some cell has (booleans).  The compiled loop
    finds them as it goes when there are at most 64; else they are counted afterwards, as numpy does."""
    index, word = _index(contour, levels)
    if word is not None and levels < 64:
        return index, (word >> np.arange(levels + 1, dtype=np.uint64)) & np.uint64(1) == 1
    return index, np.bincount(index.reshape(-1), minlength=levels + 1) > 0


def _index(contour: np.ndarray, levels: int) -> tuple[np.ndarray, np.uint64 | None]:
    """The level index, and the compiled loop's word of the levels that occur (None from the numpy code)."""
    loops = compiled.kernels()
    if loops is not None:
        index = np.empty(np.shape(contour), dtype=np.int64)
        flat = np.ascontiguousarray(contour, dtype=np.float64)
        return index, np.uint64(loops.geometric_levels(flat, int(levels), index.reshape(-1)))
    mantissa, exponent = np.frexp(contour)  # c = mantissa · 2^exponent, mantissa in [0.5, 1)
    index = np.where(mantissa == 0.5, -exponent + 1, -exponent).astype(np.int64)
    np.clip(index, 0, levels - 1, out=index)
    index[contour <= 0] = levels
    return index, None
