"""The compiled loops of the grid prediction (numba; imported through ``fusion.compiled.loops``).

Every loop keeps the numpy prediction's order of operations (``fusion.motion._predict_numpy``: each product rounded,
then added), so the results are the same to the last bit; ``tests/test_compiled.py`` checks that.
"""

from __future__ import annotations

import math

import numba
import numpy as np

_ADD, _ZERO, _PRODUCT = 0, 1, 2  # how a sum of taps starts: onto what is there, onto 0.0, or as the bare product
_ROWS = 16  # grid rows per block of the prediction: every heading's moved rows of a block stay in cache (measured)


@numba.njit(cache=True, nogil=True)
def tap_tables(across, along, gauss, rolled, offsets, weights, counts):  # pragma: no cover - compiled
    """``fusion.motion._tap_tables`` into ``offsets``, ``weights`` (zeros on entry, a row per shift of ``across`` then
    of ``along``, as many columns as ``gauss``) and ``counts``: per shift s, the weights (1 − f)·gauss + f·rolled with
    f = s − ⌊s⌋, those above 1e-15 in order, at offsets ⌊s⌋ + column − radius.  The same operations on the same
    numbers as numpy's table, so the same weights; 3 against 23 µs for 36 headings (measured), and the prediction
    after it runs 0.16–0.18 ms faster than after numpy's (paired rounds: numpy's small-array calls slow the loop that
    follows them, by more than their own time; we did not find why)."""
    n = across.size
    radius = gauss.size // 2
    for row in range(n + along.size):
        shift = across[row] if row < n else along[row - n]
        whole = math.floor(shift)
        frac = shift - whole
        keep = 1 - frac
        count = 0
        for k in range(gauss.size):
            w = keep * gauss[k] + frac * rolled[k]
            if w > 1e-15:
                weights[row, count] = w
                offsets[row, count] = int(whole) + k - radius
                count += 1
        counts[row] = count


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
    span = 0  # the most rows a heading's y taps reach beyond a block's: the x pass's rows are at most _ROWS + span
    for h in range(headings):
        lo, hi = _taps_span(oy[h], cy[h])
        span = max(span, hi - lo)
    across = np.empty((_ROWS + span, nx))
    moved = np.empty((headings, _ROWS * nx))
    total = 0
    for y0 in range(0, ny, _ROWS):
        y1 = min(ny, y0 + _ROWS)
        for h in range(headings):
            first, last = _rows_read(oy[h], cy[h], y0, y1, ny)
            _across_block(across, belief[h], first, last, ox[h], wx[h], cx[h], rows_buf, shifts_buf)
            _along_block(moved[h], across, ny, y0, y1, first, oy[h], wy[h], cy[h], rows_buf, shifts_buf, weights_buf)
        total += _mix_block(out, moved, free, y0, y1, turn_offsets, turn_weights, rows_buf, shifts_buf, unit)
    return total


@numba.njit(inline="always")
def _rows_read(offsets, count, y0, y1, ny):  # pragma: no cover - compiled
    """The rows [first, last) that the y pass of rows [y0, y1) reads with one heading's taps: the block's rows moved by
    that heading's own offsets, not by the widest of all headings' (on the bench's move, 17 rows through the x pass for
    each block of 16 instead of 20)."""
    lo, hi = _taps_span(offsets, count)
    return max(0, y0 - hi), max(0, min(ny, y1 - lo))


@numba.njit(inline="always")
def _taps_span(offsets, count):  # pragma: no cover - compiled
    """(the lowest, the highest) of a heading's first ``count`` tap offsets; (0, 0) when it has none."""
    if count == 0:
        return 0, 0
    lo, hi = offsets[0], offsets[0]
    for k in range(1, count):
        lo = min(lo, offsets[k])
        hi = max(hi, offsets[k])
    return lo, hi


@numba.njit(inline="always")
def _mix_block(out, moved, free, y0, y1, turn_offsets, turn_weights, rows_buf, shifts_buf, unit):  # pragma: no cover
    """out's rows [y0, y1) of every heading h = Σ_t turn_weights[t]·moved[(h − turn_offsets[t]) mod headings], in tap
    order, onto the bare first product, times the mask (``free`` empty: none); returns the fixed-point sum of what it
    wrote.  With 1 to 4 taps whose offsets run on by one (as ``fusion.motion._turn_taps`` makes them) two headings are
    mixed in one pass (``_mix_pair``)."""
    headings = out.shape[0]
    cells = (y1 - y0) * out.shape[2]
    count = turn_offsets.size
    masked = free.size > 0
    paired = masked and 1 <= count <= 4
    for t in range(count):
        shifts_buf[t] = 0
        paired = paired and (turn_offsets[t] - turn_offsets[0] - t) % headings == 0
    total = 0
    h = 0
    while h < headings:
        dst = out[h, y0:y1].reshape(cells)
        allowed = free[h, y0:y1].reshape(cells) if masked else free.reshape(0)
        if paired and h + 1 < headings:
            top = h + 1 - turn_offsets[0]
            later, allowed_later = out[h + 1, y0:y1].reshape(cells), free[h + 1, y0:y1].reshape(cells)
            total += _mix_pair(dst, later, moved, top, turn_weights, count, allowed, allowed_later, unit)
            h += 2
            continue
        for t in range(count):
            rows_buf[t] = (h - turn_offsets[t]) % headings
        if masked and 1 <= count <= 4:  # the usual case: one pass, the mask applied as it writes
            total += _mix_masked(dst, moved, rows_buf, turn_weights, count, allowed, unit)
        else:
            _combine(dst, moved, rows_buf, shifts_buf, turn_weights, count, 0, cells, _PRODUCT)
            for i in range(cells):
                if masked:  # times 1.0 or 0.0, as numpy multiplies by a boolean mask
                    dst[i] = dst[i] * allowed[i]
                total += np.int64(dst[i] * unit)
        h += 1
    return total


@numba.njit(inline="always")
def _mix_pair(dst, later, moved, top, weights, count, allowed, allowed_later, unit):  # pragma: no cover - compiled
    """``_mix_masked`` of two neighbouring headings h (into ``dst``) and h + 1 (into ``later``) in one pass, for 1 to 4
    taps whose offsets run on by one: with s_j = moved[(top − j) mod headings], top = h + 1 − offset₀, heading h sums
    s_1 … s_count and heading h + 1 sums s_0 … s_count−1, so each source row is read once for both (the same sums in
    the same order as one heading at a time; a pass costs 0.49 against 0.67 ms for two, measured on 240×160×36 with
    four taps).  Returns the fixed-point sum of what it wrote."""
    headings = moved.shape[0]
    w0, s0, s1 = weights[0], moved[top % headings], moved[(top - 1) % headings]
    total = 0
    if count == 1:
        for i in range(dst.size):
            v, u = (w0 * s1[i]) * allowed[i], (w0 * s0[i]) * allowed_later[i]
            dst[i], later[i] = v, u
            total += np.int64(v * unit) + np.int64(u * unit)
        return total
    w1, s2 = weights[1], moved[(top - 2) % headings]
    if count == 2:
        for i in range(dst.size):
            v = (w0 * s1[i] + w1 * s2[i]) * allowed[i]
            u = (w0 * s0[i] + w1 * s1[i]) * allowed_later[i]
            dst[i], later[i] = v, u
            total += np.int64(v * unit) + np.int64(u * unit)
        return total
    w2, s3 = weights[2], moved[(top - 3) % headings]
    if count == 3:
        for i in range(dst.size):
            v = ((w0 * s1[i] + w1 * s2[i]) + w2 * s3[i]) * allowed[i]
            u = ((w0 * s0[i] + w1 * s1[i]) + w2 * s2[i]) * allowed_later[i]
            dst[i], later[i] = v, u
            total += np.int64(v * unit) + np.int64(u * unit)
        return total
    w3, s4 = weights[3], moved[(top - 4) % headings]
    for i in range(dst.size):
        v = (((w0 * s1[i] + w1 * s2[i]) + w2 * s3[i]) + w3 * s4[i]) * allowed[i]
        u = (((w0 * s0[i] + w1 * s1[i]) + w2 * s2[i]) + w3 * s3[i]) * allowed_later[i]
        dst[i], later[i] = v, u
        total += np.int64(v * unit) + np.int64(u * unit)
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
    pass (``_taps_onto``); ``start_as``: onto dst (_ADD), onto 0.0 (_ZERO) or the bare first product (_PRODUCT).  Each
    product is rounded and then added, in the order numpy adds the taps one array at a time, so the sums are numpy's
    to the last bit."""
    if hi <= lo:
        return
    k = 0
    mode = start_as
    d = dst[lo:hi]
    while k < count:
        group = min(4, count - k)
        _taps_onto(d, table, rows, shifts, weights, k, group, lo, hi, mode)
        k += group
        mode = _ADD


@numba.njit(inline="always")
def _taps_onto(d, table, rows, shifts, weights, k, group, lo, hi, mode):  # pragma: no cover - compiled
    """One pass of ``_combine``: taps k … k + group − 1 (group 1 to 4) added onto d, which starts as ``mode`` says."""
    m = hi - lo
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
