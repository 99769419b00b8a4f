"""The compiled loops (numba; imported only through ``fusion.compiled.kernels``).

Every loop keeps its numpy twin's order of operations (each product rounded, then added), so the results
are the same to the last bit; the tests check that.  ``cache=True`` keeps the machine code on disk.
"""

from __future__ import annotations

import numba
import numpy as np

from fusion.compiled import SUM_LANES
from fusion.compiled.pair_loops import (  # noqa: F401  (loops of this module too)
    pair_marks,
    pair_or_into,
    pair_rows,
    pair_rows_equal,
    pair_sets,
    pair_union,
    word_products,
)
from fusion.compiled.predict_loops import predict_density, tap_tables  # noqa: F401  (loops of this module too)
from fusion.compiled.reading_loops import (  # noqa: F401  (loops of this module too)
    count_below,
    discounted,
    discounted_product,
    plain_product,
    support_best,
)
from fusion.compiled.region_loops import (  # noqa: F401  (loops of this module too)
    region_above,
    region_above_scaling,
    region_bracket,
    region_bracket_scaling,
    region_counts,
    region_crossing,
    region_sorted,
)


@numba.njit(cache=True, nogil=True)
def checked_product(p, likelihood, out, lanes):  # pragma: no cover - compiled
    """out = p · likelihood cell by cell (``fusion.belief.posterior.Posterior.update``'s product) and, in the same pass,
    the bit pattern of the largest likelihood; −1 instead when a likelihood is negative (−0.0 included), NaN or
    infinite, for the numpy code to find and name.  Non-negative float64 values order as their bit patterns do (IEEE
    754), and integer minima and maxima vectorise where float ones, NaN-aware, do not: one pass at about the speed
    of the product alone, against numpy's three (minimum, maximum, product).

    ``lanes`` (zeros on entry, L = ``SUM_LANES`` of them) gets the product's lane sums as
    ``fusion.belief.posterior.lane_sums`` makes them: lane j adds the cells j, j + L, j + 2L, … of the first
    n − n mod L in order, then cell n − n mod L + j; the caller adds up the lanes.  Independent lanes vectorise where
    one running sum does not, so the normalising sum costs no pass of its own."""
    bits = likelihood.view(np.int64)
    lo, hi = np.int64(0), np.int64(0)
    # A constant: the compiler unrolls the lanes into vectors (a width given at run time: 2.3× slower).
    width = SUM_LANES
    body = p.size - p.size % width
    sums = np.zeros(width)  # its own array, which ``out`` cannot overlap (``lanes`` could): the loop vectorises
    for start in range(0, body, width):
        for j in range(width):
            i = start + j
            lo = min(lo, bits[i])
            hi = max(hi, bits[i])
            v = p[i] * likelihood[i]
            out[i] = v
            sums[j] += v
    for i in range(body, p.size):
        lo = min(lo, bits[i])
        hi = max(hi, bits[i])
        v = p[i] * likelihood[i]
        out[i] = v
        sums[i - body] += v
    for j in range(width):
        lanes[j] += sums[j]
    return np.int64(-1) if lo < 0 or hi >= _INFINITY_BITS else hi


_INFINITY_BITS = np.int64(0x7FF0000000000000)  # +inf's bit pattern; positive NaNs lie above it


@numba.njit(cache=True, nogil=True)
def scan_log_likelihood(tables, field_index, sx, sy, pad, out):  # pragma: no cover - compiled
    """``fusion.sensors.ranging.RangeSensor.log_likelihood`` into ``out`` (zeros on entry): for each heading h and beam
    b in order, out[h] += tables[b][field_index[window of h, b]], the window shifted by (sx[b, h], sy[b, h]) cells."""
    headings, ny, nx = out.shape
    for h in range(headings):
        plane = out[h]
        for b in range(tables.shape[0]):
            table = tables[b]
            top = pad + sy[b, h]
            left = pad + sx[b, h]
            for y in range(ny):
                row = plane[y]
                index = field_index[top + y, left : left + nx]
                for x in range(nx):
                    row[x] += table[index[x]]


@numba.njit(cache=True, nogil=True)
def pignistic_levels(contour, bins, below, upper, counts, out):  # pragma: no cover - compiled
    """``fusion.belief.contour.ContourBelief.pignistic`` before its normalisation: per cell, below[b] + (contour −
    upper[b]) / max(counts[b], 1) with b its level bin, 0 where the contour is 0 (the numpy code's arithmetic, in
    one pass instead of five)."""
    for i in range(contour.size):
        c = contour[i]
        if c <= 0.0:
            out[i] = 0.0
        else:
            b = bins[i]
            out[i] = below[b] + (c - upper[b]) / max(counts[b], 1.0)


@numba.njit(cache=True, nogil=True)
def level_maxima(values, cells, bins, out):  # pragma: no cover - compiled
    """``np.maximum.at(out, bins, values[cells])`` (``values`` itself when ``cells`` is empty): the largest value per
    level bin, a NaN kept once met, as ``np.maximum`` keeps it."""
    gathered = cells.size > 0  # the same for every cell: the compiler hoists the branch (measured: no slower)
    for i in range(bins.size):
        v = values[cells[i]] if gathered else values[i]
        b = bins[i]
        if v > out[b] or v != v:
            out[b] = v


@numba.njit(cache=True, nogil=True)
def geometric_levels(contour, levels, out):  # pragma: no cover - compiled
    """``fusion.belief.levels.geometric_levels`` into ``out``, from the bits of each value: c = 1.f · 2^(E − 1023)
    rounds up to 2^−i with i = 1022 − E, or 1023 − E when f = 0 (c a power of two); subnormals by their top bit.
    Integer work only, so it is np.frexp's answer exactly.  Returns the levels that occur as bits of one word (bit l
    for level l, levels above 63 on bit 63): an OR that vectorises, where a flag stored per cell made the loop 3×
    slower (measured)."""
    bits = contour.view(np.int64)
    present = np.uint64(0)
    for i in range(contour.size):
        c = contour[i]
        if c <= 0.0:
            level = levels
        else:
            exponent = bits[i] >> 52
            fraction = bits[i] & 0xFFFFFFFFFFFFF
            if exponent == 0:  # subnormal: c = fraction · 2^−1074
                top = 0
                while (fraction >> (top + 1)) != 0:
                    top += 1
                index = 1073 - top + (1 if fraction == (1 << top) else 0)
            else:
                index = 1022 - exponent + (1 if fraction == 0 else 0)
            level = min(max(index, 0), levels - 1)
        out[i] = level
        present |= np.uint64(1) << np.uint64(min(level, 63))
    return present
