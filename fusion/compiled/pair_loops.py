"""The compiled loops over focal-set pairs (numba; imported through ``fusion.compiled.loops``).

Set operations on packed words are exact, so any order of words gives the same bits; the fingerprint is a sum
modulo 2⁶⁴, which is order-free as well.  ``tests/test_compiled.py`` checks each loop against numpy.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(inline="always")
def _word(x, y, union):  # pragma: no cover - compiled
    """One word of a pair's set: x | y with ``union``, else x & y (the rules' two operations)."""
    return (x | y) if union else (x & y)


@numba.njit(cache=True, nogil=True)
def pair_sets(a, b, multipliers, union, rows, fps, empty):  # pragma: no cover - compiled
    """rows[i, j] = a[i] & b[j] (a[i] | b[j] with ``union``) and fps[i, j] = Σ_k rows[i, j, k] · multipliers[k]
    modulo 2⁶⁴ (``fusion.belief.bitset.fingerprint``), in one pass over the words instead of two; empty[i, j] tells
    whether the row has no bit set (known exactly, so equal empty rows need no comparing afterwards).  ``rows`` with
    no words (shape (k1, k2, 0)): the rows are not written, only fingerprinted, for rules that keep a few of them
    (``fusion.belief.pairs.PairBlock``).  The branches on ``union`` and on writing are the same for every word, so
    the compiler hoists them out of the loop (measured: as fast as four separate loops)."""
    k1, words = a.shape
    write = rows.shape[2] == words
    for i in range(k1):
        left = a[i]
        for j in range(b.shape[0]):
            right = b[j]
            out = rows[i, j]
            h = np.uint64(0)
            seen = np.uint64(0)
            for k in range(words):
                x = _word(left[k], right[k], union)
                if write:
                    out[k] = x
                h += x * multipliers[k]
                seen |= x
            fps[i, j] = h
            empty[i, j] = seen == 0


@numba.njit(cache=True, nogil=True)
def pair_rows(a, b, union, left, right, out):  # pragma: no cover - compiled
    """out[r] = a[left[r]] & b[right[r]] (| with ``union``): the rows of a ``PairBlock`` that are read."""
    for r in range(left.size):
        x, y, row = a[left[r]], b[right[r]], out[r]
        for k in range(row.size):
            row[k] = _word(x[k], y[k], union)


@numba.njit(cache=True, nogil=True)
def pair_rows_equal(a, b, union, left, right, which, against):  # pragma: no cover - compiled
    """Whether row which[r] equals row against[r] for every r, where row q is a[left[q]] & b[right[q]] (| with
    ``union``): the exact check behind equal fingerprints, word by word from the inputs, no row written out; stops
    at the first difference."""
    words = a.shape[1]
    for r in range(which.size):
        p, q = which[r], against[r]
        x, y, u, v = a[left[p]], b[right[p]], a[left[q]], b[right[q]]
        differ = np.uint64(0)
        for k in range(words):
            differ |= _word(x[k], y[k], union) ^ _word(u[k], v[k], union)
        if differ != 0:
            return False
    return True


@numba.njit(cache=True, nogil=True)
def pair_union(a, b, union, left, right, out):  # pragma: no cover - compiled
    """out |= a[left[r]] & b[right[r]] (| with ``union``) for every r: the union of a ``PairBlock``'s rows, a row at
    a time (``out`` stays in cache), none of them written out."""
    for r in range(left.size):
        pair_or_into(a, b, union, left[r], right[r], out)


@numba.njit(cache=True, nogil=True)
def pair_marks(a, b, union, left, right, out):  # pragma: no cover - compiled
    """out[r] = np.packbits(row != 0) of the row a[left[r]] & b[right[r]] (| with ``union``): which of its words hold
    a cell, eight words to a byte, the first word on the byte's top bit (numpy's order), without writing the row."""
    words = a.shape[1]
    for r in range(left.size):
        x, y, marks = a[left[r]], b[right[r]], out[r]
        for byte in range(marks.size):
            value = 0
            for bit in range(min(8, words - 8 * byte)):
                k = 8 * byte + bit
                if _word(x[k], y[k], union) != 0:
                    value |= 128 >> bit
            marks[byte] = value


@numba.njit(cache=True, nogil=True)
def pair_or_into(a, b, union, i, j, out):  # pragma: no cover - compiled
    """out |= a[i] & b[j] (| with ``union``), without writing that row; True when it added a cell out lacked."""
    x, y = a[i], b[j]
    grew = np.uint64(0)
    for k in range(out.size):
        z = _word(x[k], y[k], union)
        grew |= z & ~out[k]
        out[k] |= z
    return grew != 0


_GOLDEN = np.uint64(0x9E3779B97F4A7C15)  # 2⁶⁴ / φ, odd: Fibonacci hashing (Knuth, TAOCP vol. 3, §6.4)


@numba.njit(cache=True, nogil=True)
def word_products(a, ma, b, mb, words, masses, table, shift):  # pragma: no cover - compiled
    """The conjunctive rule's merge on frames of one word (up to 64 cells): for every pair, i over ``a`` then j over
    ``b``, the set a[i] & b[j] with weight ma[i]·mb[j], zero weights left out; equal sets merged, each new set in
    the order it first comes, its weights added in pair order onto 0.0.  Those are ``fusion.belief.rules._products``'s
    numbers (numpy's products, ``FocalAccumulator.add``'s order of sets, ``np.bincount``'s order of addition).  Writes
    ``words`` and ``masses``; returns how many sets.  ``table``: 2^(64 − shift) slots, all −1, at least twice the pairs
    (a set's slot is found by hashing its word and probing the next slots)."""
    mask = np.int64(table.size - 1)
    count = 0
    for i in range(a.size):
        left, weight = a[i], ma[i]
        for j in range(b.size):
            w = weight * mb[j]
            if w == 0.0:
                continue
            word = left & b[j]
            at = np.int64((word * _GOLDEN) >> shift)
            while table[at] >= 0 and words[table[at]] != word:
                at = (at + np.int64(1)) & mask
            slot = table[at]
            if slot < 0:
                slot = count
                table[at] = slot
                words[slot] = word
                masses[slot] = 0.0
                count += 1
            masses[slot] += w
    return count
