"""Compiled loops over a reading's values (numba; loaded through ``fusion.compiled.kernels``): its likelihood, the
share of cells it rules out, the contour filter's product with it, and its best value over a belief's support.

Each keeps numpy's arithmetic, value for value, in one pass where numpy takes two or three.  The maxima come from
bit patterns: non-negative float64 values order as their bits do (IEEE 754), and an integer maximum vectorises where
a float one, NaN-aware, does not.  A negative value (sign bit set) has a negative pattern and never wins; a caller
that gets −1 back (nothing non-negative met) lets numpy decide."""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def discounted_product(belief, contour, r, out):  # pragma: no cover - compiled
    """out = belief · (r · contour + (1 − r)) cell by cell: the contour filter's product with a reading discounted
    at reliability r (``Evidence.likelihood``'s arithmetic, in its order, without writing the likelihood out), and
    the bit pattern of the largest product."""
    keep = 1.0 - r
    bits = out.view(np.int64)
    hi = np.int64(-1)
    for i in range(out.size):
        out[i] = belief[i] * (r * contour[i] + keep)
        hi = max(hi, bits[i])
    return hi


@numba.njit(cache=True, nogil=True)
def plain_product(belief, likelihood, out):  # pragma: no cover - compiled
    """out = belief · likelihood cell by cell, and the bit pattern of the largest product."""
    bits = out.view(np.int64)
    hi = np.int64(-1)
    for i in range(out.size):
        out[i] = belief[i] * likelihood[i]
        hi = max(hi, bits[i])
    return hi


@numba.njit(cache=True, nogil=True)
def support_best(p, threshold, values):  # pragma: no cover - compiled
    """The bit pattern of the largest of ``values`` over the cells with p ≥ ``threshold``: ``values[np.flatnonzero(p
    >= threshold)].max()`` in one pass that writes nothing; −1 when no such cell holds a non-negative value."""
    bits = values.view(np.int64)
    hi = np.int64(-1)
    for i in range(p.size):
        hi = max(hi, bits[i] if p[i] >= threshold else np.int64(-1))
    return hi


@numba.njit(cache=True, nogil=True)
def discounted(contour, r, out):  # pragma: no cover - compiled
    """out = r · contour + (1 − r) cell by cell: ``Evidence.likelihood``, numpy's two passes in one."""
    keep = 1.0 - r
    for i in range(out.size):
        out[i] = r * contour[i] + keep


@numba.njit(cache=True, nogil=True)
def count_below(values, level):  # pragma: no cover - compiled
    """How many values are < ``level`` (``np.count_nonzero(values < level)``, with no array of flags written)."""
    count = 0
    for i in range(values.size):
        if values[i] < level:
            count += 1
    return count
