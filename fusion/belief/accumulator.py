"""The focal-set accumulator: candidate focal sets with weights, equal sets merged (a 64-bit fingerprint
confirmed by exact comparison), and the reduction to at most a cap of focal sets."""

from __future__ import annotations

import numpy as np

from fusion.belief import bitset
from fusion.errors import (
    MassValueError,
    RuleError,
)

__all__ = ["FocalAccumulator", "MERGE_STRATEGIES"]

MERGE_STRATEGIES = ("union", "nearest")
"""How ``FocalAccumulator.reduced`` merges the focal sets beyond the cap."""


class FocalAccumulator:
    """Collects (set, weight) rows and adds up the weights of equal sets.

    Combination rules produce many candidate sets, often equal; this merges them
    batch by batch without holding all candidates at once.  Equal sets are found
    by fingerprint and confirmed by an exact comparison, so a fingerprint
    collision never merges two different sets.
    """

    def __init__(self, n: int):
        self.n = int(n)
        self._w = bitset.n_words(n)
        self._slots: dict[int, list[int]] = {}  # fingerprint -> slots holding sets with it
        self._blocks: list[np.ndarray] = []  # distinct sets, in slot order, one array per batch
        self._where: list[tuple[int, int]] = []  # slot -> (block, row)
        self._fps: list[int] = []  # slot -> fingerprint
        self._weights: list[float] = []

    def add(self, rows: np.ndarray, weights, *, owned: bool = False, fingerprints=None) -> None:
        """Add ``weights[i]`` to the set ``rows[i]``.  With ``owned=True`` the caller hands
        ``rows`` over (it will not change them), which saves a copy; ``fingerprints`` may be
        passed when already computed (``bitset.fingerprint`` of the rows)."""
        rows = np.asarray(rows, dtype=bitset.WORD).reshape(-1, self._w)
        weights = np.asarray(weights, dtype=np.float64).reshape(-1)
        keep = weights != 0.0
        if not keep.all():
            rows, weights, owned = rows[keep], weights[keep], True
            fingerprints = None if fingerprints is None else np.asarray(fingerprints)[keep]
        if len(weights) == 0:
            return
        fps = bitset.fingerprint(rows) if fingerprints is None else np.asarray(fingerprints, dtype=np.uint64)
        uniq, first, inverse, counts = np.unique(fps, return_index=True, return_inverse=True, return_counts=True)
        if (counts > 1).any() and not _groups_equal(rows, fps, uniq[counts > 1]):
            # A fingerprint collision inside the batch: merge one row at a time.
            for i, (fp, w) in enumerate(zip(fps.tolist(), weights.tolist())):
                if not self._add_to_existing(fp, rows[i], w):
                    self._append(rows[i : i + 1].copy(), [0], [fp], [w])
            return
        sums = np.bincount(inverse, weights=weights, minlength=len(uniq))
        positions, new_fps, new_weights = [], [], []
        for fp, pos, w in zip(uniq.tolist(), first.tolist(), sums.tolist()):
            if not self._add_to_existing(fp, rows[pos], w):
                positions.append(pos)
                new_fps.append(fp)
                new_weights.append(w)
        if not positions:
            return
        order = np.argsort(positions)
        positions = [positions[i] for i in order]
        new_fps, new_weights = [new_fps[i] for i in order], [new_weights[i] for i in order]
        if owned:
            self._append(rows, positions, new_fps, new_weights)  # rows are referenced, not copied
        else:
            self._append(rows[positions], list(range(len(positions))), new_fps, new_weights)

    def _add_to_existing(self, fp: int, row: np.ndarray, weight: float) -> bool:
        for slot in self._slots.get(fp, ()):
            if np.array_equal(self._row(slot), row):
                self._weights[slot] += weight
                return True
        return False

    def _append(self, rows: np.ndarray, positions: list[int], fps: list[int], weights: list[float]) -> None:
        block = len(self._blocks)
        self._blocks.append(rows)
        for r, fp, w in zip(positions, fps, weights):
            self._slots.setdefault(fp, []).append(len(self._weights))
            self._where.append((block, r))
            self._fps.append(fp)
            self._weights.append(w)

    def _gather(self, slots) -> np.ndarray:
        """Rows of the given slots, in order, as one new (or, when possible, the original) array."""
        slots = list(slots)
        if len(self._blocks) == 1 and len(slots) == len(self._blocks[0]):
            rows = [self._where[s][1] for s in slots]
            if rows == list(range(len(rows))):
                return self._blocks[0]
        out = np.empty((len(slots), self._w), dtype=bitset.WORD)
        for i, s in enumerate(slots):
            block, r = self._where[s]
            out[i] = self._blocks[block][r]
        return out

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """The merged focal sets (packed rows) and their masses; ``MassFunction.collected`` wraps them."""
        if not self._weights:
            raise MassValueError("no focal set received any mass; a mass function needs total mass 1")
        return self._gather(range(len(self._weights))), np.asarray(self._weights, dtype=np.float64)

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
        if not self._weights:
            raise MassValueError("no focal set received any mass; a mass function needs total mass 1")
        w = np.asarray(self._weights, dtype=np.float64)
        fps = np.asarray(self._fps, dtype=np.uint64)
        empty = np.zeros(len(w), dtype=bool)
        for s in np.flatnonzero(fps == 0).tolist():
            empty[s] = not self._row(s).any()
        nonempty = np.flatnonzero(~empty & (w > 0))
        if len(nonempty) <= max_focal:
            return self, 0.0, 0
        order = nonempty[np.argsort(-w[nonempty], kind="stable")]
        keep, dropped = order[: max_focal - 1].tolist(), order[max_focal - 1 :].tolist()
        rows = [self._row(s).copy() for s in keep]
        masses = [float(w[s]) for s in keep]
        moved = float(w[dropped].sum())
        orphans = dropped
        if merge == "nearest":
            signatures = np.stack([np.packbits(r != 0) for r in rows])
            sizes = np.bitwise_count(signatures).sum(axis=1)
            grown: set[int] = set()
            orphans = []
            for s in dropped:
                sig = np.packbits(self._row(s) != 0)
                overlap = np.bitwise_count(signatures & sig).sum(axis=1)
                if not overlap.any():
                    orphans.append(s)
                    continue
                score = overlap / (sizes + np.bitwise_count(sig).sum() - overlap)
                j = int(np.argmax(score))
                before = rows[j].copy() if j not in grown else None
                np.bitwise_or(rows[j], self._row(s), out=rows[j])
                if before is not None and not np.array_equal(before, rows[j]):
                    grown.add(j)
                    moved += masses[j]  # the kept set's own mass now sits on a larger set too
                masses[j] += float(w[s])
        if orphans:
            union = np.zeros(self._w, dtype=bitset.WORD)
            for s in orphans:
                np.bitwise_or(union, self._row(s), out=union)
            rows.append(union)
            masses.append(float(w[orphans].sum()))
        empty_slots = np.flatnonzero(empty & (w > 0)).tolist()
        acc = FocalAccumulator(self.n)  # enlarged sets may now coincide: merge them exactly
        acc.add(np.stack(rows), masses, owned=True)
        if empty_slots:
            acc.add(np.stack([self._row(s) for s in empty_slots]), w[empty_slots])
        return acc, moved, len(dropped)

    def _row(self, slot: int) -> np.ndarray:
        block, r = self._where[slot]
        return self._blocks[block][r]

    def residual(self) -> np.ndarray:
        """Weights accumulated so far, one per distinct set (for comparisons within a tolerance)."""
        return np.asarray(self._weights, dtype=np.float64)


def _groups_equal(rows: np.ndarray, fps: np.ndarray, repeated: np.ndarray) -> bool:
    """True when all rows sharing each repeated fingerprint are identical (exact check, no row copies)."""
    for fp in repeated.tolist():
        members = np.flatnonzero(fps == fp)
        head = rows[members[0]]
        if not all(np.array_equal(head, rows[i]) for i in members[1:].tolist()):
            return False
    return True
