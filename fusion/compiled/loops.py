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
)
from fusion.compiled.region_loops import (  # noqa: F401  (loops of this module too)
    region_above,
    region_above_scaling,
    region_bracket,
    region_bracket_scaling,
    region_counts,
    region_crossing,
)

_ADD, _ZERO, _PRODUCT = 0, 1, 2  # how a sum of taps starts: onto what is there, onto 0.0, or as the bare product
_ROWS = 16  # grid rows per block of the prediction: every heading's moved rows of a block stay in cache (measured)


@numba.njit(cache=True, nogil=True)
def predict_density(belief, ox, wx, cx, oy, wy, cy, turn_offsets, turn_weights, free, out, unit):  # pragma: no cover
    """``fusion.motion.predict_density`` into ``out``: per heading h, Σ_k wx[h,k]·(slice moved by ox[h,k] along x),
    zero-filled; the same along y; then headings mixed by the turn taps (wrapping round); then cells where ``free``
    is False set to 0 (``free`` empty: no mask).  The taps are padded tables: heading h uses the first cx[h] (cy[h])
    entries of its row.

    The grid is done a block of rows at a time, for every heading, so what one heading's slice moved to is still in
    cache when the headings are mixed, instead of a whole moved belief going out to memory and back.  Returns the
    sum of what it wrote in fixed point, Σ int64(v · unit) (``fusion.motion.predict_into``, which sets the unit):
    integer sums are exact in any order, so this one is added as the values are written.
    """
    headings, ny, nx = belief.shape
    taps = max(ox.shape[1], oy.shape[1], turn_offsets.size, 1)
    rows_buf = np.empty(taps, np.int64)
    shifts_buf = np.zeros(taps, np.int64)
    weights_buf = np.empty(taps)
    lowest, highest = 0, 0
    for h in range(headings):
        for k in range(cy[h]):
            lowest = min(lowest, oy[h, k])
            highest = max(highest, oy[h, k])
    across = np.empty((_ROWS + highest - lowest, nx))
    moved = np.empty((headings, _ROWS * nx))
    masked = free.size > 0
    total = 0
    for y0 in range(0, ny, _ROWS):
        y1 = min(ny, y0 + _ROWS)
        first, last = max(0, y0 - highest), min(ny, y1 - lowest)  # the rows the block's y pass reads
        for h in range(headings):
            _across_block(across, belief[h], first, last, ox[h], wx[h], cx[h], rows_buf, shifts_buf)
            _along_block(moved[h], across, ny, y0, y1, first, oy[h], wy[h], cy[h], rows_buf, shifts_buf, weights_buf)
        cells = (y1 - y0) * nx
        for t in range(turn_offsets.size):
            shifts_buf[t] = 0
        for h in range(headings):
            dst = out[h, y0:y1].reshape(cells)
            for t in range(turn_offsets.size):
                rows_buf[t] = (h - turn_offsets[t]) % headings
            if masked and 1 <= turn_offsets.size <= 4:  # the usual case: one pass, the mask applied as it writes
                allowed = free[h, y0:y1].reshape(cells)
                total += _mix_masked(dst, moved, rows_buf, turn_weights, turn_offsets.size, allowed, unit)
                continue
            _combine(dst, moved, rows_buf, shifts_buf, turn_weights, turn_offsets.size, 0, cells, _PRODUCT)
            if masked:  # times 1.0 or 0.0, as numpy multiplies by a boolean mask
                allowed = free[h, y0:y1].reshape(cells)
                for i in range(cells):
                    dst[i] = dst[i] * allowed[i]
            for i in range(cells):
                total += np.int64(dst[i] * unit)
    return total


@numba.njit(inline="always")
def _mix_masked(dst, moved, rows, weights, count, allowed, unit):  # pragma: no cover - compiled
    """dst = (Σ_k weights[k]·moved[rows[k]]) · allowed for 1 to 4 taps: ``_combine``'s bare-product sum, in its order,
    times the mask (1.0 or 0.0) in the same pass instead of a second one over dst (9% of the prediction, measured).
    Returns the fixed-point sum of what it wrote (see ``predict_density``)."""
    w0, a = weights[0], moved[rows[0]]
    total = 0
    if count == 1:
        for i in range(dst.size):
            v = (w0 * a[i]) * allowed[i]
            dst[i] = v
            total += np.int64(v * unit)
        return total
    w1, b = weights[1], moved[rows[1]]
    if count == 2:
        for i in range(dst.size):
            v = (w0 * a[i] + w1 * b[i]) * allowed[i]
            dst[i] = v
            total += np.int64(v * unit)
        return total
    w2, c = weights[2], moved[rows[2]]
    if count == 3:
        for i in range(dst.size):
            v = ((w0 * a[i] + w1 * b[i]) + w2 * c[i]) * allowed[i]
            dst[i] = v
            total += np.int64(v * unit)
        return total
    w3, e = weights[3], moved[rows[3]]
    for i in range(dst.size):
        v = (((w0 * a[i] + w1 * b[i]) + w2 * c[i]) + w3 * e[i]) * allowed[i]
        dst[i] = v
        total += np.int64(v * unit)
    return total


@numba.njit(inline="always")
def _across_block(across, plane, first, last, offsets, weights, count, rows_buf, shifts_buf):  # pragma: no cover
    """across[r − first] = Σ_k weights[k]·(plane[r] moved by offsets[k]), zero-filled, for rows r in [first, last) (numpy's
    ``_convolve_zero`` along x).  The cells every tap reaches from its own row are done as one run over the rows laid
    end to end, in passes of up to four taps; that run also fills each row's edge cells from the next row's, and
    those cells are then done again tap by tap (same sums, a fifth of the time of a call per row, measured)."""
    ny, nx = plane.shape
    lo, hi = 0, nx
    for k in range(count):
        lo = max(lo, offsets[k])
        hi = min(hi, nx + offsets[k])
        rows_buf[k] = 0
        shifts_buf[k] = offsets[k] - first * nx  # across's cell j reads the plane's flat cell j + first·nx − offset
    if lo >= hi or count == 0:  # no cell that every tap reaches: all are edge cells
        lo, hi = nx, nx
    else:
        dst, source, run = across.reshape(across.size), plane.reshape(1, ny * nx), (last - first - 1) * nx + hi
        _combine(dst, source, rows_buf, shifts_buf, weights, count, lo, run, _ZERO)
    for r in range(first, last):
        _edge_cells(across[r - first], plane[r], offsets, weights, count, 0, lo)
        _edge_cells(across[r - first], plane[r], offsets, weights, count, hi, nx)


@numba.njit(inline="always")
def _along_block(
    moved, across, ny, y0, y1, first, offsets, weights, count, rows_buf, shifts_buf, weights_buf
):  # pragma: no cover
    """moved's rows y − y0 for y in [y0, y1) = Σ_k weights[k]·across[y − offsets[k] − first], the taps whose source row
    is on the grid, in order, onto 0.0 (numpy's ``_convolve_zero`` along y).  The rows every tap's source is on the grid
    for are one run; the others (next to the grid's top and bottom) are done a row at a time with their own taps."""
    nx = across.shape[1]
    ya, yb = y0, y1
    for k in range(count):
        ya = max(ya, offsets[k])
        yb = min(yb, ny + offsets[k])
        rows_buf[k] = 0
        shifts_buf[k] = (offsets[k] + first - y0) * nx  # cell j reads across's flat j + (y0 − first − offset)·nx
    if ya < yb and count > 0:
        source = across.reshape(1, across.size)
        _combine(moved, source, rows_buf, shifts_buf, weights, count, (ya - y0) * nx, (yb - y0) * nx, _ZERO)
    else:
        ya, yb = y1, y1
    for y in range(y0, y1):
        if ya <= y < yb:
            continue
        used = 0
        for k in range(count):
            source = y - offsets[k]
            if 0 <= source < ny:
                rows_buf[used] = source - first
                shifts_buf[used] = 0
                weights_buf[used] = weights[k]
                used += 1
        row = moved[(y - y0) * nx : (y - y0 + 1) * nx]
        if used == 0:
            row[:] = 0.0
        else:
            _combine(row, across, rows_buf, shifts_buf, weights_buf, used, 0, nx, _ZERO)


@numba.njit(inline="always")
def _edge_cells(dst, source, offsets, weights, count, first, last):  # pragma: no cover - compiled
    """dst[i] for i in [first, last): the taps whose source cell is on the row, in order, onto 0.0."""
    n = dst.size
    for i in range(first, last):
        total = 0.0
        for k in range(count):
            j = i - offsets[k]
            if 0 <= j < n:
                total += weights[k] * source[j]
        dst[i] = total


@numba.njit(inline="always")
def _combine(dst, table, rows, shifts, weights, count, lo, hi, start_as):  # pragma: no cover - compiled
    """dst[i] for i in [lo, hi) = (start) + Σ_k weights[k]·table[rows[k], i − shifts[k]] in tap order, up to four taps a
    pass; ``start_as``: onto dst (_ADD), onto 0.0 (_ZERO) or the bare first product (_PRODUCT).  Each product is rounded
    and then added, in the order numpy adds the taps one array at a time, so the sums are numpy's to the last bit."""
    m = hi - lo
    if m <= 0:
        return
    k = 0
    mode = start_as
    d = dst[lo:hi]
    while k < count:
        group = min(4, count - k)
        w0 = weights[k]
        a = table[rows[k], lo - shifts[k] : hi - shifts[k]]
        if group == 1:
            if mode == _PRODUCT:
                for i in range(m):
                    d[i] = w0 * a[i]
            elif mode == _ZERO:
                for i in range(m):
                    d[i] = 0.0 + w0 * a[i]
            else:
                for i in range(m):
                    d[i] = d[i] + w0 * a[i]
        elif group == 2:
            w1 = weights[k + 1]
            b = table[rows[k + 1], lo - shifts[k + 1] : hi - shifts[k + 1]]
            if mode == _PRODUCT:
                for i in range(m):
                    d[i] = w0 * a[i] + w1 * b[i]
            elif mode == _ZERO:
                for i in range(m):
                    d[i] = (0.0 + w0 * a[i]) + w1 * b[i]
            else:
                for i in range(m):
                    d[i] = (d[i] + w0 * a[i]) + w1 * b[i]
        elif group == 3:
            w1, w2 = weights[k + 1], weights[k + 2]
            b = table[rows[k + 1], lo - shifts[k + 1] : hi - shifts[k + 1]]
            c = table[rows[k + 2], lo - shifts[k + 2] : hi - shifts[k + 2]]
            if mode == _PRODUCT:
                for i in range(m):
                    d[i] = (w0 * a[i] + w1 * b[i]) + w2 * c[i]
            elif mode == _ZERO:
                for i in range(m):
                    d[i] = ((0.0 + w0 * a[i]) + w1 * b[i]) + w2 * c[i]
            else:
                for i in range(m):
                    d[i] = ((d[i] + w0 * a[i]) + w1 * b[i]) + w2 * c[i]
        else:
            w1, w2, w3 = weights[k + 1], weights[k + 2], weights[k + 3]
            b = table[rows[k + 1], lo - shifts[k + 1] : hi - shifts[k + 1]]
            c = table[rows[k + 2], lo - shifts[k + 2] : hi - shifts[k + 2]]
            e = table[rows[k + 3], lo - shifts[k + 3] : hi - shifts[k + 3]]
            if mode == _PRODUCT:
                for i in range(m):
                    d[i] = ((w0 * a[i] + w1 * b[i]) + w2 * c[i]) + w3 * e[i]
            elif mode == _ZERO:
                for i in range(m):
                    d[i] = (((0.0 + w0 * a[i]) + w1 * b[i]) + w2 * c[i]) + w3 * e[i]
            else:
                for i in range(m):
                    d[i] = (((d[i] + w0 * a[i]) + w1 * b[i]) + w2 * c[i]) + w3 * e[i]
        k += group
        mode = _ADD


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
