"""The compiled loops (numba; imported only through ``fusion.compiled.kernels``).

Every loop keeps its numpy twin's order of operations (each product rounded, then added), so the results
are the same to the last bit; the tests check that.  ``cache=True`` keeps the machine code on disk.
"""

from __future__ import annotations

import numba
import numpy as np

_BLOCK = 1024  # cells per block of the heading mix: 36 headings × 1,024 × 8 bytes stay in a core's cache


@numba.njit(cache=True, nogil=True)
def predict_density(belief, ox, wx, cx, oy, wy, cy, turn_offsets, turn_weights, out):  # pragma: no cover - compiled
    """``fusion.motion.predict_density`` into ``out``: per heading h, Σ_k wx[h,k]·(slice moved by ox[h,k] along x),
    zero-filled; the same along y; then headings mixed by the turn taps (wrapping round).

    The taps are padded tables: heading h uses the first cx[h] (cy[h]) entries of its row.
    """
    headings, ny, nx = belief.shape
    across = np.empty((ny, nx))
    moved = np.empty((headings, ny, nx))
    for h in range(headings):
        plane = belief[h]
        for iy in range(ny):
            row = across[iy]
            src = plane[iy]
            for ix in range(nx):
                row[ix] = 0.0
            for k in range(cx[h]):
                offset = ox[h, k]
                weight = wx[h, k]
                lo = max(0, offset)
                hi = min(nx, nx + offset)
                if lo < hi:
                    dst = row[lo:hi]
                    got = src[lo - offset : hi - offset]
                    for j in range(hi - lo):
                        dst[j] += weight * got[j]
        level = moved[h]
        for iy in range(ny):
            row = level[iy]
            for ix in range(nx):
                row[ix] = 0.0
            for k in range(cy[h]):
                source = iy - oy[h, k]
                if 0 <= source < ny:
                    weight = wy[h, k]
                    got = across[source]
                    for ix in range(nx):
                        row[ix] += weight * got[ix]
    # Headings mixed block by block of cells, so each moved value is fetched from memory once, not once per tap.
    cells = ny * nx
    flat_moved = moved.reshape(headings, cells)
    flat_out = out.reshape(headings, cells)
    for start in range(0, cells, _BLOCK):
        stop = min(cells, start + _BLOCK)
        for h in range(headings):
            dst = flat_out[h, start:stop]
            for t in range(turn_offsets.size):
                got = flat_moved[(h - turn_offsets[t]) % headings, start:stop]
                weight = turn_weights[t]
                if t == 0:
                    for i in range(stop - start):
                        dst[i] = weight * got[i]
                else:
                    for i in range(stop - start):
                        dst[i] += weight * got[i]


@numba.njit(cache=True, nogil=True)
def pair_sets(a, b, multipliers, union, rows, fps):  # pragma: no cover - compiled
    """rows[i, j] = a[i] & b[j] (a[i] | b[j] with ``union``) and fps[i, j] = Σ_k rows[i, j, k] · multipliers[k]
    modulo 2⁶⁴ (``fusion.belief.bitset.fingerprint``), in one pass over the words instead of two."""
    k1, words = a.shape
    k2 = b.shape[0]
    for i in range(k1):
        left = a[i]
        for j in range(k2):
            right = b[j]
            out = rows[i, j]
            h = np.uint64(0)
            if union:
                for k in range(words):
                    x = left[k] | right[k]
                    out[k] = x
                    h += x * multipliers[k]
            else:
                for k in range(words):
                    x = left[k] & right[k]
                    out[k] = x
                    h += x * multipliers[k]
            fps[i, j] = h


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
