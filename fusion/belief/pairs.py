"""Candidate focal sets of a pairwise rule, made only when read.

A rule over k1 × k2 focal-set pairs needs every pair's fingerprint (to add up the weights of equal sets) but, once
the result is capped at a few dozen sets, only the rows it keeps.  ``PairBlock`` stands for the rows op(a[i], b[j])
of chosen pairs: ``fusion.compiled``'s pair loop fingerprints them in a pass that writes nothing, and write out only
the rows asked for, or their union.  ``FocalAccumulator`` stores it as it stores a block of rows.
"""

from __future__ import annotations

import numpy as np

from fusion.belief import bitset

__all__ = ["PairBlock"]


class PairBlock:
    """Row r is ``a[left[r]] & b[right[r]]`` (``|`` with ``union``), written out on demand by compiled loops.

    Indexing and ``take`` follow numpy's for a 2-D array of rows (an integer gives one row, a slice, a boolean mask
    or an integer array gives rows), so the accumulator reads it as it reads stored rows."""

    def __init__(self, a: np.ndarray, b: np.ndarray, union: bool, left: np.ndarray, right: np.ndarray, loops):
        self.a, self.b, self.union = a, b, bool(union)
        self.left = np.asarray(left, dtype=np.intp)
        self.right = np.asarray(right, dtype=np.intp)
        self._loops = loops
        self.shape = (len(self.left), a.shape[1])

    def __len__(self) -> int:
        return len(self.left)

    def _indices(self, key) -> np.ndarray:
        if isinstance(key, slice):
            return np.arange(len(self))[key]
        key = np.asarray(key)
        return np.flatnonzero(key) if key.dtype == bool else key.astype(np.intp, copy=False).reshape(-1)

    def take(self, indices, axis: int = 0, out: np.ndarray | None = None) -> np.ndarray:
        """The rows at ``indices``, written into ``out`` (a new array when None)."""
        if axis != 0:
            raise ValueError("a PairBlock gives whole rows (axis 0)")
        idx = self._indices(indices)
        if out is None:
            out = np.empty((len(idx), self.shape[1]), dtype=bitset.WORD)
        self._loops.pair_rows(self.a, self.b, self.union, self.left[idx], self.right[idx], out)
        return out

    def rows_equal(self, which, against) -> bool:
        """Whether row which[r] equals row against[r] for every r, compared from the inputs (no row written)."""
        which, against = self._indices(which), self._indices(against)
        return bool(self._loops.pair_rows_equal(self.a, self.b, self.union, self.left, self.right, which, against))

    def __getitem__(self, key) -> np.ndarray:
        if isinstance(key, (int, np.integer)):
            return self.take(np.array([key]))[0]
        return self.take(key)

    def select(self, keep) -> PairBlock:
        """The block of the rows at ``keep`` (an index array or boolean mask), still unwritten."""
        idx = self._indices(keep)
        return PairBlock(self.a, self.b, self.union, self.left[idx], self.right[idx], self._loops)

    def union_into(self, indices, out: np.ndarray) -> None:
        """out |= every row at ``indices``, without writing the rows out."""
        idx = self._indices(indices)
        self._loops.pair_union(self.a, self.b, self.union, self.left[idx], self.right[idx], out)

    def word_marks(self, indices) -> np.ndarray:
        """``np.packbits(rows != 0, axis=1)`` of the rows at ``indices``: which words hold a cell, rows unwritten."""
        idx = self._indices(indices)
        out = np.empty((len(idx), (self.shape[1] + 7) // 8), dtype=np.uint8)
        self._loops.pair_marks(self.a, self.b, self.union, self.left[idx], self.right[idx], out)
        return out

    def or_into(self, index: int, out: np.ndarray) -> bool:
        """out |= the row at ``index``, unwritten; whether that added a cell ``out`` lacked."""
        return bool(self._loops.pair_or_into(self.a, self.b, self.union, self.left[index], self.right[index], out))
