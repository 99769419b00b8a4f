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


_CHUNK = 64  # values per bit mask of the gathering passes (a 64-bit word)


@numba.njit(cache=True, nogil=True)
def region_bracket(values, scale, lo, hi, out, acc):  # pragma: no cover - compiled
    """For ``fusion.backends.region``, in one pass: the values in [lo, hi) gathered into ``out`` in their order (as
    many as fit), how many are ≥ hi (acc[0]) and the sum of their fixed-point masses int64(v · scale) (acc[1]), and
    the sum over all (acc[2]).  Returns how many values lie in [lo, hi), whether or not they all fit."""
    return _bracket_pass(values, 1.0, False, scale, lo, hi, True, out, acc)


@numba.njit(cache=True, nogil=True)
def region_bracket_scaling(values, factor, scale, lo, hi, out, acc):  # pragma: no cover - compiled
    """``region_bracket`` of the values once multiplied by ``factor``, which it does in place as it goes (numpy's
    ``values *= factor``): a normalisation and the count's last pass in one pass over the belief."""
    return _bracket_pass(values, factor, True, scale, lo, hi, True, out, acc)


@numba.njit(cache=True, nogil=True)
def region_above(values, scale, lo, out, acc):  # pragma: no cover - compiled
    """``region_bracket`` with no top (hi = +inf, acc[0] and acc[1] left 0), for a tracked belief's cells above the
    floor: less work a cell (0.088 against 0.125 ms a count on 300 beliefs of the depot replay, measured)."""
    return _bracket_pass(values, 1.0, False, scale, lo, np.inf, False, out, acc)


@numba.njit(cache=True, nogil=True)
def region_above_scaling(values, factor, scale, lo, out, acc):  # pragma: no cover - compiled
    """``region_above`` of the values once multiplied by ``factor``, which it does in place as it goes."""
    return _bracket_pass(values, factor, True, scale, lo, np.inf, False, out, acc)


@numba.njit(inline="always")
def _bracket_pass(values, factor, scaling, scale, lo, hi, capped, out, acc):  # pragma: no cover - compiled
    """Each chunk of 64 values is tallied (vectorised: the chunk's length is a constant) into a bit mask of the values
    inside the bracket, and only the set bits are visited: a gather's cost no longer grows with the cells it keeps
    (0.43 ms for 1.4 M cells whether it keeps 0 or 32,000, against 0.45 to 0.76 ms for 0 to 8,000 when each chunk
    with a hit was scanned again, measured)."""
    n, tally = 0, (0, 0, 0)
    end = values.size - values.size % _CHUNK
    for start in range(0, end, _CHUNK):
        tally, bits = _chunk(values, start, start + _CHUNK, factor, scaling, scale, lo, hi, capped, tally)
        if bits:
            n = _keep(values, start, bits, out, n)
    tally, bits = _chunk(values, end, values.size, factor, scaling, scale, lo, hi, capped, tally)
    n = _keep(values, end, bits, out, n)
    acc[0], acc[1], acc[2] = tally
    return n


@numba.njit(inline="always")
def _chunk(values, start, stop, factor, scaling, scale, lo, hi, capped, tally):  # pragma: no cover - compiled
    """Values [start, stop), at most 64 (scaled in place first when ``scaling``): ``tally`` (how many ≥ hi, their mass,
    the whole mass) with them added, and the bit mask of those in [lo, hi).  ``scaling`` and ``capped`` (whether hi is
    finite) are constants at each call, so the code for the other case is dropped where it is compiled."""
    above, mass, whole = tally
    bits = np.uint64(0)
    for i in range(start, stop):
        v = values[i]
        if scaling:
            v = v * factor
            values[i] = v
        q = np.int64(v * scale)
        whole += q
        if capped:
            top = v >= hi
            inside = (v >= lo) & (v < hi)
            above += top
            mass += q if top else 0
        else:
            inside = v >= lo
        bits |= np.uint64(inside) << np.uint64(i - start)
    return (above, mass, whole), bits


@numba.njit(inline="always")
def _keep(values, start, bits, out, n):  # pragma: no cover - compiled
    """The values at the set bits of ``bits`` (offsets from ``start``, in order) into ``out`` from slot n while there is
    room; n plus how many.  The lowest set bit's offset is a de Bruijn multiply and a table look-up (Leiserson, Prokop
    & Randall 1998, "Using de Bruijn sequences to index a 1 in a computer word")."""
    room = out.size
    while bits:
        low = bits & (~bits + np.uint64(1))
        if n < room:
            out[n] = values[start + _DE_BRUIJN_INDEX[(low * _DE_BRUIJN) >> np.uint64(58)]]
        n += 1
        bits ^= low
    return n


_DE_BRUIJN = np.uint64(0x022FDD63CC95386D)
_DE_BRUIJN_INDEX = np.zeros(64, dtype=np.int64)
for _bit in range(64):
    _DE_BRUIJN_INDEX[((1 << _bit) * 0x022FDD63CC95386D % 2**64) >> 58] = _bit


_BUCKETS = 1024  # value ranges per pass of ``region_crossing`` (our choice)
_SORTED = 256  # candidates from which ``region_crossing`` sorts instead of dividing further (our choice)


@numba.njit(cache=True, nogil=True)
def region_crossing(values, scale, need):  # pragma: no cover - compiled
    """For ``fusion.backends.region``: (the sum of the values' fixed-point masses int64(v · scale), k), k the fewest
    of the largest values whose masses add up to at least ``need`` (≥ 1); k = −1 when all of them fall short.

    The values' range is cut into 1,024 equal ranges and each range's count and mass added up in one pass; walking
    down from the top range, whole ranges are taken while they fall short, and only the range where the sum crosses
    is kept, and cut again, until a few hundred values are left to sort (or all are equal).  The range of a value
    rises with it and so does its mass (both are monotone in v, IEEE 754 rounding included), so taking ranges top
    down takes the values largest first: the count is the one a full sort gives, ties included."""
    n = values.size
    total, low, high = 0, np.inf, -np.inf
    for i in range(n):
        v = values[i]
        total += np.int64(v * scale)
        low = min(low, v)
        high = max(high, v)
    if total < need:
        return total, -1
    counts = np.empty(_BUCKETS, np.int64)
    masses = np.empty(_BUCKETS, np.int64)
    pool, size = values, n
    scratch = np.empty(n)  # the kept values, compacted in place from the second cut on (never written ahead of read)
    taken, rest = 0, need
    while size > _SORTED and high > low:
        inv = (_BUCKETS - 1) / (high - low)
        if not np.isfinite(inv):  # a range too narrow to divide: sorted below
            break
        counts[:] = 0
        masses[:] = 0
        for i in range(size):
            v = pool[i]
            b = _range_of(v, low, inv)
            counts[b] += 1
            masses[b] += np.int64(v * scale)
        b = _BUCKETS - 1
        while masses[b] < rest:  # the pool holds at least ``rest``: this stops inside it
            rest -= masses[b]
            taken += counts[b]
            b -= 1
        kept, new_low, new_high = 0, np.inf, -np.inf
        for i in range(size):
            v = pool[i]
            if _range_of(v, low, inv) == b:
                scratch[kept] = v
                kept += 1
                new_low = min(new_low, v)
                new_high = max(new_high, v)
        pool, size = scratch, kept
        low, high = new_low, new_high
    if not high > low:  # all equal: the same mass each
        each = np.int64(low * scale)
        return total, taken + (rest + each - 1) // each
    return total, taken + _largest_reaching(pool[:size], scale, rest)


@numba.njit(inline="always")
def _range_of(v, low, inv):  # pragma: no cover - compiled
    """Which of ``region_crossing``'s ranges the value v falls in: one expression for both of its passes, so the
    values kept are exactly those the range's tally counted."""
    return min(np.int64((v - low) * inv), _BUCKETS - 1)


@numba.njit(inline="always")
def _largest_reaching(values, scale, need):  # pragma: no cover - compiled
    """How many of the largest ``values`` add up to at least ``need`` in fixed point (they hold it): by a sort."""
    fixed = np.empty(values.size, np.int64)
    for i in range(values.size):
        fixed[i] = np.int64(values[i] * scale)
    fixed.sort()
    count = 0
    for i in range(fixed.size - 1, -1, -1):
        count += 1
        need -= fixed[i]
        if need <= 0:
            break
    return count


@numba.njit(cache=True, nogil=True)
def region_sorted(keys):  # pragma: no cover - compiled
    """The int64 ``keys`` sorted ascending, for the bit patterns of non-negative floats (which order as the values do,
    IEEE 754): a radix sort, least significant byte first (Knuth, TAOCP vol. 3, §5.2.5), a pass skipped when every
    key has the same byte there.  It makes no comparisons, so no branch on the data to mispredict: 38 against 137 µs
    for numpy's stable sort of 4,096 values the sort has not seen before (numpy's time falls to 50 µs only when the
    same values are sorted again and again, as a timing loop does; measured).  An empty array when a key is negative
    (a sign bit set: −0.0 or a negative value), for the caller to sort otherwise."""
    n = keys.size
    for i in range(n):
        if keys[i] < 0:
            return np.empty(0, np.int64)
    a, b = keys.copy(), np.empty(n, np.int64)
    counts = np.zeros(256, np.int64)
    for shift in range(0, 64, 8):
        counts[:] = 0
        for i in range(n):
            counts[(a[i] >> shift) & 255] += 1
        if n == 0 or counts[(a[0] >> shift) & 255] == n:  # one byte value throughout: the order stands
            continue
        start = 0
        for d in range(256):
            c = counts[d]
            counts[d] = start
            start += c
        for i in range(n):
            d = (a[i] >> shift) & 255
            b[counts[d]] = a[i]
            counts[d] += 1
        a, b = b, a
    return a
