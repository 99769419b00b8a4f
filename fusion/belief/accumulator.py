"""The focal-set accumulator: candidate focal sets with weights, equal sets merged (a 64-bit fingerprint
confirmed by exact comparison), and the reduction to at most a cap of focal sets."""

from __future__ import annotations

import numpy as np

from fusion.belief import bitset
from fusion.belief.pairs import PairBlock
from fusion.errors import (
    MassValueError,
    RuleError,
)

__all__ = ["FocalAccumulator", "MERGE_STRATEGIES"]

_COMPARE_BYTES = 1024**2  # rows compared at once when confirming equal fingerprints
_MERGE_BYTES = 16 * 1024**2  # dropped sets read at once by the nearest-set merge (our choice)

MERGE_STRATEGIES = ("union", "nearest")
"""How ``FocalAccumulator.reduced`` merges the focal sets beyond the cap."""


class FocalAccumulator:
    """Collects (set, weight) rows and adds up the weights of equal sets.

    Combination rules produce many candidate sets, often equal; this merges them
    batch by batch without holding all candidates at once.  Equal sets are found
    by fingerprint and confirmed by an exact comparison, so a fingerprint
    collision never merges two different sets.  The bookkeeping is in arrays, one
    numpy call per batch rather than one Python step per set: on a frame of ten
    cells the rule's fixed cost is what a caller pays.
    """

    def __init__(self, n: int):
        self.n = int(n)
        self._w = bitset.n_words(n)
        self._blocks: list[np.ndarray | PairBlock] = []  # the rows handed in, one array (or PairBlock) per batch
        self._fps = np.zeros(0, dtype=np.uint64)  # slot -> fingerprint
        self._weights = np.zeros(0, dtype=np.float64)
        self._block = np.zeros(0, dtype=np.intp)  # slot -> (block, row) where its set is stored
        self._row_at = np.zeros(0, dtype=np.intp)
        self._void = np.zeros(0, dtype=bool)  # slot -> its set is known, exactly, to be the empty set
        self._sorted: np.ndarray | None = None  # slots by fingerprint, for lookups
        self._shared = False  # two slots share a fingerprint (a collision): look up one row at a time

    def add(self, rows: np.ndarray, weights, *, owned: bool = False, fingerprints=None, empty=None) -> None:
        """Add ``weights[i]`` to the set ``rows[i]``.  With ``owned=True`` the caller hands
        ``rows`` over (it will not change them), which saves a copy; ``fingerprints`` may be
        passed when already computed (``bitset.fingerprint`` of the rows), and ``empty``, which rows are
        known exactly to be the empty set (two of those are equal without comparing their words)."""
        if not isinstance(rows, PairBlock):  # a PairBlock writes its rows out only when they are read
            rows = np.asarray(rows, dtype=bitset.WORD).reshape(-1, self._w)
        weights = np.asarray(weights, dtype=np.float64).reshape(-1)
        keep = weights != 0.0
        if not keep.all():
            rows = rows.select(keep) if isinstance(rows, PairBlock) else rows[keep]
            weights, owned = weights[keep], True
            fingerprints = None if fingerprints is None else np.asarray(fingerprints)[keep]
            empty = None if empty is None else np.asarray(empty)[keep]
        if len(weights) == 0:
            return
        fps = bitset.fingerprint(rows) if fingerprints is None else np.asarray(fingerprints, dtype=np.uint64)
        uniq, first, inverse = np.unique(fps, return_index=True, return_inverse=True)
        which, against = np.arange(len(fps)), first[inverse]
        if empty is not None:  # a row and its group's first row both known empty: equal, nothing to compare
            empty = np.asarray(empty, dtype=bool)
            unproven = ~(empty & empty[against])
            which, against = which[unproven], against[unproven]
        if self._shared or not self._exact(rows, which, rows, against):
            self._add_one_by_one(rows, weights, fps)  # a fingerprint collision: merge one row at a time
            return
        sums = np.bincount(inverse, weights=weights, minlength=len(uniq))
        found, slots = self._lookup(uniq)
        if found.any():
            if not self._exact(rows, first[found], None, slots[found]):
                self._add_one_by_one(rows, weights, fps)
                return
            self._weights[slots[found]] += sums[found]
        new = np.flatnonzero(~found)
        if new.size:
            new = new[np.argsort(first[new], kind="stable")]  # new sets in the order they first came
            positions = first[new]
            void = None if empty is None else empty[positions]
            if not owned:
                rows, positions = rows[positions], np.arange(len(positions))
            self._append(rows, positions, uniq[new], sums[new], void)

    def _lookup(self, fps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(which fingerprints a slot already has, that slot) for distinct fingerprints."""
        if not len(self._fps):
            return np.zeros(len(fps), dtype=bool), np.zeros(len(fps), dtype=np.intp)
        if self._sorted is None:
            self._sorted = np.argsort(self._fps, kind="stable")
        ordered = self._fps[self._sorted]
        at = np.minimum(np.searchsorted(ordered, fps), len(ordered) - 1)
        return ordered[at] == fps, self._sorted[at]

    def _exact(self, rows: np.ndarray, which: np.ndarray, other: np.ndarray | None, against: np.ndarray) -> bool:
        """True when ``rows[which]`` equals, row for row, ``other[against]`` (the stored slots ``against`` when
        ``other`` is None).  One word's set is its own fingerprint times an odd number modulo 2⁶⁴, so on frames
        of up to 64 cells equal fingerprints are equal sets and nothing needs comparing."""
        if self._w == 1:
            return True
        differ = which != against if other is not None else np.ones(len(which), dtype=bool)
        which, against = which[differ], against[differ]
        if other is rows and isinstance(rows, PairBlock):  # within one unwritten block: compared from its inputs
            return rows.rows_equal(which, against)
        step = max(1, _COMPARE_BYTES // (8 * self._w))
        for start in range(0, len(which), step):
            mine = rows[which[start : start + step]]
            theirs = (
                other[against[start : start + step]]
                if other is not None
                else self.rows_of(against[start : start + step])
            )
            if not np.array_equal(mine, theirs):
                return False
        return True

    def _add_one_by_one(self, rows: np.ndarray, weights: np.ndarray, fps: np.ndarray) -> None:
        for i, (fp, w) in enumerate(zip(fps.tolist(), weights.tolist())):
            for slot in np.flatnonzero(self._fps == fp).tolist():
                if np.array_equal(self._row(slot), rows[i]):
                    self._weights[slot] += w
                    break
            else:
                self._append(rows[i : i + 1].copy(), np.zeros(1, dtype=np.intp), np.array([fp], np.uint64), [w])

    def _append(self, rows: np.ndarray, positions: np.ndarray, fps: np.ndarray, weights, void=None) -> None:
        """New slots for ``rows[positions]``; ``void``: which of them are known to be the empty set."""
        void = np.zeros(len(positions), dtype=bool) if void is None else np.asarray(void, dtype=bool)
        if len(self._fps) and np.isin(fps, self._fps).any():
            self._shared = True
        self._blocks.append(rows)
        columns = (
            np.full(len(positions), len(self._blocks) - 1, dtype=np.intp),
            np.asarray(positions, dtype=np.intp),
            np.asarray(fps, dtype=np.uint64),
            np.array(weights, dtype=np.float64),  # a copy: weights grow in place
            void,
        )
        if len(self._fps):  # after the first batch, appended to the slots there are
            held = (self._block, self._row_at, self._fps, self._weights, self._void)
            columns = tuple(np.concatenate(pair) for pair in zip(held, columns))
        self._block, self._row_at, self._fps, self._weights, self._void = columns
        self._sorted = None

    def rows_of(self, slots: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """Rows of the given slots, in order, as one new (or, when possible, the original) array, or copied into
        ``out``.  Rows from one block are gathered straight into place, not through a temporary."""
        slots = np.asarray(slots, dtype=np.intp)
        if out is None and len(self._blocks) == 1 and len(slots) == len(self._blocks[0]):
            if isinstance(self._blocks[0], np.ndarray) and np.array_equal(self._row_at[slots], np.arange(len(slots))):
                return self._blocks[0]
        if out is None:
            out = np.empty((len(slots), self._w), dtype=bitset.WORD)
        blocks = self._block[slots]
        used = np.unique(blocks).tolist()
        if len(used) == 1:
            self._blocks[used[0]].take(self._row_at[slots], axis=0, out=out)
            return out
        for b in used:
            here = blocks == b
            out[here] = self._blocks[b][self._row_at[slots[here]]]
        return out

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """The merged focal sets (packed rows) and their masses; ``MassFunction.collected`` wraps them."""
        if not len(self._weights):
            raise MassValueError("no focal set received any mass; a mass function needs total mass 1")
        return self.rows_of(np.arange(len(self._weights))), self._weights.copy()

    def empty_slots(self) -> np.ndarray:
        """Which slots hold the empty set: its fingerprint is 0, confirmed exactly (few rows to look at, none of
        those known to be empty when they came)."""
        empty = self._fps == 0
        for slot in np.flatnonzero(empty & ~self._void).tolist():
            empty[slot] = not self._row(slot).any()
        return empty

    def reduced(self, max_focal: int, merge: str = "union") -> tuple[FocalAccumulator, float, int]:
        """Like ``arrays`` followed by ``rules.reduce_focal_sets``, but copies only the rows it keeps.

        The ``max_focal − 1`` most massive non-empty sets are kept.  With ``merge="union"`` every
        other set is merged into their common union; with ``merge="nearest"`` each is merged into
        the kept set it overlaps most (judged on which 64-cell words they occupy), so the
        approximation stays local: a set near the robot is not blurred with one across the
        site.  Sets that overlap no kept set go to their common union.  Either way mass only
        moves to supersets.  Returns (the accumulator of the kept sets, mass moved to a larger set, sets merged).
        The empty set (fingerprint 0, confirmed exactly) is never merged.
        """
        if merge not in MERGE_STRATEGIES:
            raise RuleError(f"unknown merge strategy {merge!r}; choose one of: {', '.join(MERGE_STRATEGIES)}")
        if not len(self._weights):
            raise MassValueError("no focal set received any mass; a mass function needs total mass 1")
        w = np.asarray(self._weights, dtype=np.float64)
        empty = self.empty_slots()
        nonempty = np.flatnonzero(~empty & (w > 0))
        if len(nonempty) <= max_focal:
            return self, 0.0, 0
        order = nonempty[np.argsort(-w[nonempty], kind="stable")]
        keep, dropped = order[: max_focal - 1], order[max_focal - 1 :]
        empty_slots = np.flatnonzero(empty & (w > 0))
        # The kept sets, room for the union, and the empty set: one array, so the result is one block that
        # ``arrays`` hands out without a copy.  Kept sets keep their fingerprints; only changed rows get new ones.
        rows = np.empty((len(keep) + 1 + len(empty_slots), self._w), dtype=bitset.WORD)
        self.rows_of(keep, out=rows[: len(keep)])
        fps = np.zeros(len(rows), dtype=np.uint64)
        fps[: len(keep)] = self._fps[keep]
        masses = w[keep].tolist()
        moved = float(w[dropped].sum())
        orphans = dropped
        if merge == "nearest":
            moved, orphans, grown = self._merge_nearest(rows[: len(keep)], masses, dropped, moved)
            if grown:
                fps[grown] = bitset.fingerprint(rows[grown])
        if len(orphans):
            self._union_into(rows[len(keep)], orphans)
            fps[len(keep)] = bitset.fingerprint(rows[len(keep) : len(keep) + 1])[0]
            masses.append(float(w[orphans].sum()))
        at = len(masses)
        rows[at : at + len(empty_slots)] = 0  # confirmed empty: nothing to read
        fps[at : at + len(empty_slots)] = self._fps[empty_slots]
        masses += w[empty_slots].tolist()
        acc = FocalAccumulator(self.n)  # enlarged sets may now coincide: merge them exactly
        n_rows = len(masses)
        void = np.zeros(n_rows, dtype=bool)
        void[at:] = True  # the empty set's rows, as confirmed above
        acc.add(rows[:n_rows], masses, owned=True, fingerprints=fps[:n_rows], empty=void)
        return acc, moved, len(dropped)

    def _merge_nearest(self, rows: np.ndarray, masses: list, dropped: np.ndarray, moved: float):
        """Each dropped set into the kept row it overlaps most (judged on the 64-cell words they occupy), in place;
        returns (mass moved to a larger set, the dropped sets that overlap no kept row, the kept rows grown).

        The dropped sets are read a batch at a time, and a batch's overlaps with every kept row are counted at once;
        the merges themselves go one set at a time, in order, since a kept row's mass grows as sets join it.  Sets
        of one unwritten PairBlock are never written out: their word marks and their OR come from its inputs."""
        w = self._weights
        if not len(rows):  # a cap of one set keeps none: everything goes to the union
            return moved, dropped, []
        signatures = np.packbits(rows != 0, axis=1)
        sizes = np.bitwise_count(signatures).sum(axis=1)
        grown: set[int] = set()
        orphans = []
        step = max(1, _MERGE_BYTES // (8 * self._w))
        for start in range(0, len(dropped), step):
            batch = dropped[start : start + step]
            merge_into = self._merger(batch)
            overlaps = np.bitwise_count(merge_into.marks[:, None, :] & signatures[None, :, :]).sum(axis=2)
            own = np.bitwise_count(merge_into.marks).sum(axis=1)
            for i, s in enumerate(batch.tolist()):
                overlap = overlaps[i]
                if not overlap.any():
                    orphans.append(s)
                    continue
                j = int(np.argmax(overlap / (sizes + own[i] - overlap)))
                if merge_into(i, rows[j], check=j not in grown):
                    grown.add(j)
                    moved += masses[j]  # the kept set's own mass now sits on a larger set too
                masses[j] += float(w[s])
        return moved, np.asarray(orphans, dtype=np.intp), sorted(grown)

    def _merger(self, slots: np.ndarray) -> _Merger:
        blocks = np.unique(self._block[slots])
        block = self._blocks[int(blocks[0])]
        if len(blocks) == 1 and isinstance(block, PairBlock):
            return _Merger(block, self._row_at[slots])
        return _Merger(self.rows_of(slots), None)

    def _union_into(self, out: np.ndarray, slots: np.ndarray) -> None:
        """out = the union of the given slots' sets: one OR-reduction per block they are stored in."""
        blocks = self._block[slots]
        out[:] = 0
        for b in np.unique(blocks).tolist():
            rows, block = self._row_at[slots[blocks == b]], self._blocks[b]
            if isinstance(block, PairBlock):
                block.union_into(rows, out)
            else:
                bitset.union_of_rows(block, rows, out)

    def _row(self, slot: int) -> np.ndarray:
        return self._blocks[self._block[slot]][self._row_at[slot]]

    def residual(self) -> np.ndarray:
        """Weights accumulated so far, one per distinct set (for comparisons within a tolerance)."""
        return self._weights.copy()


class _Merger:
    """A batch of dropped sets for nearest-set merging: their word marks, and ``merger(i, out, check)`` ORs set i into
    ``out`` and, when ``check``, says whether that added a cell.  ``source`` is the sets as rows, or a PairBlock with
    their row numbers in ``at`` (then no set is written out)."""

    def __init__(self, source, at: np.ndarray | None):
        self.source, self.at = source, at
        self.marks = source.word_marks(at) if at is not None else np.packbits(source != 0, axis=1)

    def __call__(self, i: int, out: np.ndarray, check: bool) -> bool:
        if self.at is not None:
            return self.source.or_into(int(self.at[i]), out) and check
        before = out.copy() if check else None
        np.bitwise_or(out, self.source[i], out=out)
        return before is not None and not np.array_equal(before, out)
