"""The compiled loops of the best-region count (numba; imported through ``fusion.compiled.loops``).

They add masses in fixed point (integers), so their sums are numpy's in any order; ``tests/test_compiled.py`` checks
the counts against numpy's.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def region_counts(values, scale, trials, out):  # pragma: no cover - compiled
    """For ``fusion.backends.region``: per trial value t (four), how many values are ≥ t (out[0:4]) and the sum of their
    fixed-point masses int64(v · scale), truncated as numpy's ``astype`` does (out[4:8]); out[8] the sum over all.
    Integer sums are exact in any order, so this vectorised pass gives numpy's sums."""
    t = (trials[0], trials[1], trials[2], trials[3])
    acc = (0, 0, 0, 0, 0, 0, 0, 0, 0)
    for i in range(values.size):
        acc = _tally(values[i], scale, t, acc)
    for k in range(9):
        out[k] = acc[k]


@numba.njit(cache=True, nogil=True)
def region_counts_scaling(values, factor, scale, trials, out):  # pragma: no cover - compiled
    """``region_counts`` of the values once multiplied by ``factor``, which it does in place as it goes (numpy's
    ``values *= factor``): a normalisation and the first counting pass in one pass over the belief."""
    t = (trials[0], trials[1], trials[2], trials[3])
    acc = (0, 0, 0, 0, 0, 0, 0, 0, 0)
    for i in range(values.size):
        v = values[i] * factor
        values[i] = v
        acc = _tally(v, scale, t, acc)
    for k in range(9):
        out[k] = acc[k]


@numba.njit(inline="always")
def _tally(v, scale, t, acc):  # pragma: no cover - compiled
    """``acc`` (counts at or above each trial, their masses, the whole mass) with the value ``v`` added."""
    q = np.int64(v * scale)
    a0, a1, a2, a3 = v >= t[0], v >= t[1], v >= t[2], v >= t[3]
    c0, c1, c2, c3, m0, m1, m2, m3, whole = acc
    return (
        c0 + a0,
        c1 + a1,
        c2 + a2,
        c3 + a3,
        m0 + (q if a0 else 0),
        m1 + (q if a1 else 0),
        m2 + (q if a2 else 0),
        m3 + (q if a3 else 0),
        whole + q,
    )


_CHUNK = 64  # values checked at once by ``region_gather`` and ``region_above`` before it looks at them one by one


@numba.njit(cache=True, nogil=True)
def region_above(values, scale, floor, out):  # pragma: no cover - compiled
    """For ``fusion.backends.region``: the values ≥ ``floor`` into ``out`` in their order, and the sum of every value's
    fixed-point mass int64(v · scale), in one pass: (how many, the sum).  How many is −1 when more than out.size − 1
    are found (the gather writes one slot ahead of what it keeps)."""
    n, whole = 0, 0
    room = out.size - 1
    end = values.size - values.size % _CHUNK
    for start in range(0, end, _CHUNK):
        hits = 0
        for i in range(start, start + _CHUNK):  # a constant count: vectorised
            v = values[i]
            whole += np.int64(v * scale)
            hits += v >= floor
        if hits and n >= 0:
            n = _gather_run(values, floor, np.inf, start, start + _CHUNK, out, n) if n + hits <= room else -1
    for i in range(end, values.size):
        v = values[i]
        whole += np.int64(v * scale)
        if v >= floor and n >= 0:
            if n < room:
                out[n] = v
                n += 1
            else:
                n = -1
    return n, whole


@numba.njit(cache=True, nogil=True)
def region_gather(values, lo, hi, out):  # pragma: no cover - compiled
    """The values in [lo, hi), in their order, into ``out``; returns how many.  A bracket holds a few thousand of a
    belief's cells, so a chunk of ``_CHUNK`` is first only counted (vectorised: its length must be a constant, or
    the count runs a value at a time, 6× slower, measured) and copied from only when it has one."""
    n = 0
    end = values.size - values.size % _CHUNK
    for start in range(0, end, _CHUNK):
        hits = 0
        for i in range(start, start + _CHUNK):
            v = values[i]
            hits += (v >= lo) & (v < hi)
        if hits:
            n = _gather_run(values, lo, hi, start, start + _CHUNK, out, n)
    return _gather_run(values, lo, hi, end, values.size, out, n)


@numba.njit(inline="always")
def _gather_run(values, lo, hi, start, stop, out, n):  # pragma: no cover - compiled
    for i in range(start, stop):
        v = values[i]
        out[n] = v  # written always, kept when inside: no branch to mispredict (``out`` has room for one more)
        n += (v >= lo) & (v < hi)
    return n
