"""Mass functions over a frame of ``n`` cells, with sparse focal sets as packed bitsets.

A ``MassFunction`` holds only its focal sets (sets of cells with positive mass):
``sets`` is a ``(k, W)`` array of ``uint64`` words (see ``fusion.belief.bitset``)
and ``masses`` a ``(k,)`` float64 array.  The empty set may be focal: its mass is
the conflict left by an unnormalised combination.  Nothing here enumerates the
power set, so frames of millions of cells with tens of focal sets are cheap.

Definitions follow Shafer (1976), *A Mathematical Theory of Evidence*, and, for
the unnormalised (open-world) case and the pignistic transform, Smets & Kennes
(1994), *The transferable belief model*.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from typing import NamedTuple

import numpy as np

from fusion.belief import bitset
from fusion.errors import (
    CellIndexError,
    FrameMismatchError,
    MassValueError,
    RuleError,
    TotalConflictError,
)

__all__ = ["MassFunction", "FocalSet", "FocalAccumulator", "MASS_TOLERANCE", "MERGE_STRATEGIES", "check_same_frame"]

MERGE_STRATEGIES = ("union", "nearest")
"""How ``FocalAccumulator.reduced`` merges the focal sets beyond the cap."""

MASS_TOLERANCE = 1e-9
"""How far the masses given to a constructor may sum from 1 (they are then rescaled)."""

# Distinct contour values turned into nested focal sets without quantisation.
_MAX_EXACT_LEVELS = 256
# Words of each focal set unpacked at once when spreading masses over cells (64 Ki cells).
_SPREAD_BLOCK_WORDS = 1024
# Largest focal-set table a constructor will allocate, in bytes.
_MAX_TABLE_BYTES = 2 * 1024**3


class FocalSet(NamedTuple):
    """One focal set: its cells (sorted indices) and its mass."""

    cells: np.ndarray
    mass: float


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

    def result(self) -> MassFunction:
        if not self._weights:
            raise MassValueError("no focal set received any mass; a mass function needs total mass 1")
        sets = self._gather(range(len(self._weights)))
        masses = np.asarray(self._weights, dtype=np.float64)
        return MassFunction._trusted(self.n, sets, masses)

    def reduced(self, max_focal: int, merge: str = "union") -> tuple[MassFunction, float, int]:
        """Like ``result`` followed by ``rules.reduce_focal_sets``, but copies only the rows it keeps.

        The ``max_focal − 1`` most massive non-empty sets are kept.  With ``merge="union"`` every
        other set is merged into their common union; with ``merge="nearest"`` each is merged into
        the kept set it overlaps most (judged on which 64-cell words they occupy), so the
        approximation stays local: a set near the robot is not blurred with one across the
        site.  Sets that overlap no kept set go to their common union.  Either way mass only
        moves to supersets.  Returns (mass function, mass moved to a larger set, sets merged).
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
            return self.result(), 0.0, 0
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
        return acc.result(), moved, len(dropped)

    def _row(self, slot: int) -> np.ndarray:
        block, r = self._where[slot]
        return self._blocks[block][r]

    def residual(self) -> np.ndarray:
        """Weights accumulated so far, one per distinct set (for comparisons within a tolerance)."""
        return np.asarray(self._weights, dtype=np.float64)


class MassFunction:
    """A mass function m: 2^Θ → [0, 1] over the frame Θ = {0, …, n−1}, stored sparsely.

    Build one with ``from_focal``, ``vacuous``, ``categorical``, ``bayesian``,
    ``from_contour`` or ``from_likelihood``; combine with ``fusion.belief.rules``.
    Instances are immutable.
    """

    __slots__ = ("n", "_sets", "_masses", "_card")

    def __init__(self, n: int, sets: np.ndarray, masses: np.ndarray):
        """Low-level constructor from packed words ``(k, W)`` and masses ``(k,)``.

        Validates masses (finite, non-negative, summing to 1 within
        ``MASS_TOLERANCE``), merges equal sets and drops zero masses.
        """
        n = _check_frame_size(n)
        sets = np.asarray(sets, dtype=bitset.WORD)
        masses = np.asarray(masses, dtype=np.float64).reshape(-1)
        if sets.ndim != 2 or sets.shape != (len(masses), bitset.n_words(n)):
            raise MassValueError(
                f"focal sets must be packed as ({len(masses)}, {bitset.n_words(n)}) words for "
                f"{len(masses)} masses on {n} cells, got shape {sets.shape}"
            )
        if len(masses) and (sets[:, -1] & ~bitset.full(n)[-1]).any():
            raise CellIndexError(f"a packed focal set has bits beyond cell {n - 1} (frame of {n} cells)")
        _check_masses(masses)
        acc = FocalAccumulator(n)
        acc.add(sets, masses)
        merged = acc.result()
        self.n, self._sets, self._masses, self._card = n, merged._sets, merged._masses, None
        self._masses = self._masses / self._masses.sum()
        self._masses.flags.writeable = False

    @classmethod
    def _trusted(cls, n: int, sets: np.ndarray, masses: np.ndarray) -> MassFunction:
        """Wrap arrays already merged and valid (used by the rules; no checks, no copy)."""
        self = object.__new__(cls)
        keep = masses > 0.0
        if not keep.all():
            sets, masses = sets[keep], masses[keep]
        sets.flags.writeable = False
        masses.flags.writeable = False
        self.n, self._sets, self._masses, self._card = int(n), sets, masses, None
        return self

    # ----------------------------------------------------------------- constructors
    @classmethod
    def from_focal(cls, n: int, focal: Mapping[Iterable[int], float]) -> MassFunction:
        """From a mapping ``{cells: mass}``; cells are any collection of indices or a boolean mask.

        >>> MassFunction.from_focal(3, {(0,): 0.6, (0, 1, 2): 0.4}).bel({0, 1})
        0.6
        """
        n = _check_frame_size(n)
        if not isinstance(focal, Mapping) or not focal:
            raise MassValueError(f"focal sets must be given as a non-empty mapping {{cells: mass}}, got {focal!r}")
        keys = list(focal.keys())
        masses = np.array([_as_float(focal[k], k) for k in keys], dtype=np.float64)
        _check_masses(masses, keys)
        _check_table(len(keys), n)
        sets = np.stack([bitset.pack_indices(_cells(k), n) for k in keys])
        return cls(n, sets, masses)

    @classmethod
    def vacuous(cls, n: int) -> MassFunction:
        """Total ignorance: all mass on the whole frame."""
        n = _check_frame_size(n)
        return cls._trusted(n, bitset.full(n)[None, :].copy(), np.ones(1))

    @classmethod
    def categorical(cls, n: int, cells: Iterable[int]) -> MassFunction:
        """All mass on one set of cells."""
        n = _check_frame_size(n)
        return cls(n, bitset.pack_indices(_cells(cells), n)[None, :], np.ones(1))

    @classmethod
    def bayesian(cls, probabilities: np.ndarray) -> MassFunction:
        """Singleton focal sets with the given probabilities (one focal set per cell with p > 0).

        Meant for small frames: a Bayesian mass function on a large frame has as
        many focal sets as cells; the histogram-filter back end is the efficient
        representation there.
        """
        p = _as_vector(probabilities, "probabilities")
        _check_masses(p)
        cells = np.flatnonzero(p > 0)
        _check_table(len(cells), len(p))
        masks = np.zeros((len(cells), len(p)), dtype=bool)
        masks[np.arange(len(cells)), cells] = True
        return cls(len(p), bitset.pack_masks(masks), p[cells])

    @classmethod
    def from_contour(cls, contour: np.ndarray, levels: int | None = None, spacing: str = "linear") -> MassFunction:
        """The consonant mass function whose plausibility of each cell is ``contour``.

        Focal sets are nested: A_i = {x : contour(x) ≥ v_i} for the distinct values
        v_1 > … > v_r > 0, with m(A_i) = v_i − v_{i+1} and m(∅) = 1 − v_1 (Shafer
        1976, ch. 10).  With ``levels=L`` the contour is first rounded *up* to one of L
        values, so no cell loses plausibility (an outer approximation, Denœux 2001,
        "Inner and outer approximation of belief structures"): multiples of 1/L with
        ``spacing="linear"``, or 1, 1/2, 1/4, …, 2^−(L−1) with ``spacing="geometric"``.
        Geometric levels suit likelihoods, whose information lies in ratios: a
        reading then leaves only 2^−(L−1) of its mass on "anywhere it is possible at all".
        """
        c = _as_vector(contour, "contour")
        if (c < 0).any() or (c > 1).any():
            bad = int(np.flatnonzero((c < 0) | (c > 1))[0])
            raise MassValueError(
                f"a contour is a plausibility in [0, 1] per cell; cell {bad} has {float(c[bad])!r}. "
                "Use from_likelihood() for an unscaled likelihood."
            )
        if spacing not in ("linear", "geometric"):
            raise MassValueError(f"spacing must be 'linear' or 'geometric', got {spacing!r}")
        n = len(c)
        if levels is not None:
            if int(levels) < 1:
                raise MassValueError(f"levels must be a positive whole number, got {levels!r}")
            levels = int(levels)
            # Each cell's level index, 0 = top: its contour rounded up is values[index].
            if spacing == "linear":
                index = np.clip(levels - np.ceil(c * levels - 1e-12), 0, levels).astype(np.int16)
                table = (levels - np.arange(levels + 1)) / levels
            else:
                index = geometric_level_index(c, levels).astype(np.int16)
                table = np.append(2.0 ** -np.arange(levels), 0.0)
            present = np.flatnonzero(np.bincount(index, minlength=levels + 1))
            present = present[table[present] > 0]
            values = table[present]
            masses = np.append(values - np.append(values[1:], 0.0), 1.0 - (values[0] if len(values) else 0.0))
            masks = np.vstack([index[None, :] <= present[:, None], np.zeros((1, n), dtype=bool)])
        else:
            values = np.unique(c[c > 0])[::-1]
            if len(values) > _MAX_EXACT_LEVELS:
                raise MassValueError(
                    f"the contour has {len(values)} distinct values, which would make as many nested focal "
                    f"sets (at most {_MAX_EXACT_LEVELS}); pass levels=8 (or similar) to quantise it"
                )
            top = float(values[0]) if len(values) else 0.0
            masses = np.append(values - np.append(values[1:], 0.0), 1.0 - top)
            masks = np.vstack([c[None, :] >= values[:, None], np.zeros((1, n), dtype=bool)])
        keep = masses > 1e-15
        return cls._trusted(n, bitset.pack_masks(masks[keep]), masses[keep].astype(np.float64))

    @classmethod
    def from_likelihood(cls, likelihood: np.ndarray, levels: int | None = None) -> MassFunction:
        """Consonant mass function from a likelihood: contour = L / max L (Shafer 1976, ch. 11)."""
        lik = _as_vector(likelihood, "likelihood")
        if (lik < 0).any():
            bad = int(np.flatnonzero(lik < 0)[0])
            raise MassValueError(f"a likelihood is never negative; cell {bad} has {float(lik[bad])!r}")
        top = lik.max()
        if top <= 0:
            raise TotalConflictError(
                "the likelihood is zero on every cell: the observation is impossible everywhere, "
                "so no mass function can represent it"
            )
        return cls.from_contour(lik / top, levels=levels)

    # ----------------------------------------------------------------- structure
    @property
    def sets(self) -> np.ndarray:
        """Packed focal sets ``(k, W)`` (read-only)."""
        return self._sets

    @property
    def masses(self) -> np.ndarray:
        """Masses of the focal sets ``(k,)`` (read-only)."""
        return self._masses

    @property
    def cardinalities(self) -> np.ndarray:
        """Number of cells in each focal set."""
        if self._card is None:
            self._card = bitset.cardinality(self._sets)
        return self._card

    def __len__(self) -> int:
        return len(self._masses)

    def __iter__(self) -> Iterator[FocalSet]:
        for row, m in zip(self._sets, self._masses.tolist()):
            yield FocalSet(bitset.indices(row, self.n), m)

    def focal_sets(self) -> list[FocalSet]:
        """All focal sets as (cells, mass), most massive first."""
        order = np.argsort(-self._masses, kind="stable")
        return [FocalSet(bitset.indices(self._sets[i], self.n), float(self._masses[i])) for i in order]

    @property
    def conflict(self) -> float:
        """m(∅): the mass an unnormalised combination could not give to any cell."""
        empty = self.cardinalities == 0
        return float(self._masses[empty].sum())

    @property
    def is_normal(self) -> bool:
        return self.conflict == 0.0

    @property
    def is_bayesian(self) -> bool:
        """Every focal set is a single cell."""
        return bool((self.cardinalities == 1).all())

    # ----------------------------------------------------------------- set functions
    def mass(self, cells) -> float:
        """m(A) for a set of cells A."""
        a = self._words(cells)
        return float(self._masses[(self._sets == a).all(axis=1)].sum())

    def bel(self, cells) -> float:
        """Belief: Σ m(B) over non-empty B ⊆ A."""
        a = self._words(cells)
        inside = ~((self._sets & ~a).any(axis=1)) & (self.cardinalities > 0)
        return float(self._masses[inside].sum())

    def pl(self, cells) -> float:
        """Plausibility: Σ m(B) over B with B ∩ A ≠ ∅."""
        a = self._words(cells)
        return float(self._masses[(self._sets & a).any(axis=1)].sum())

    def q(self, cells) -> float:
        """Commonality: Σ m(B) over B ⊇ A (q(∅) = 1)."""
        a = self._words(cells)
        return float(self._masses[~((a & ~self._sets).any(axis=1))].sum())

    def contour(self) -> np.ndarray:
        """Plausibility of every singleton, pl({x}) for each cell x."""
        return self._spread(self._masses)

    def pignistic(self) -> np.ndarray:
        """BetP(x) = Σ_{B∋x} m(B) / (|B| (1 − m(∅)))  (Smets & Kennes 1994)."""
        card = self.cardinalities
        nonempty = card > 0
        total = float(self._masses[nonempty].sum())
        if total <= 0.0:
            raise TotalConflictError(
                "the pignistic transform is undefined when all mass is on the empty set (m(∅) = 1); "
                "the sources contradict each other completely"
            )
        weights = np.zeros_like(self._masses)
        weights[nonempty] = self._masses[nonempty] / card[nonempty] / total
        return self._spread(weights)

    def plausibility_transform(self) -> np.ndarray:
        """Contour normalised to a probability (Cobb & Shenoy 2006)."""
        c = self.contour()
        s = c.sum()
        if s <= 0.0:
            raise TotalConflictError("the plausibility transform is undefined when all mass is on the empty set")
        return c / s

    def normalised(self) -> MassFunction:
        """Dempster normalisation: remove m(∅) and rescale the rest (raises on m(∅) = 1)."""
        nonempty = self.cardinalities > 0
        total = float(self._masses[nonempty].sum())
        if total <= 0.0:
            raise TotalConflictError(
                "cannot normalise: all mass is on the empty set (total conflict, K = 1). "
                "Keep the unnormalised result, or discount the sources before combining."
            )
        if nonempty.all():
            return self
        count = int(nonempty.sum())
        # The empty set usually comes last (the accumulator puts it there): then a view, not a copy.
        sets = self._sets[:count] if nonempty[:count].all() else self._sets[nonempty]
        out = MassFunction._trusted(self.n, sets, self._masses[nonempty] / total)
        out._card = self.cardinalities[nonempty]
        return out

    def is_close(self, other: MassFunction, tol: float = 1e-9) -> bool:
        """Same frame and every set's mass within ``tol`` (sets absent from one count as 0)."""
        check_same_frame(self, other)
        acc = FocalAccumulator(self.n)
        acc.add(self._sets, self._masses)
        acc.add(other._sets, -other._masses)
        return bool(np.all(np.abs(acc.residual()) <= tol))

    def __repr__(self) -> str:
        top = self.focal_sets()[:3]
        shown = ", ".join(f"{_short(fs.cells)}: {fs.mass:.4g}" for fs in top)
        more = f", … {len(self) - 3} more" if len(self) > 3 else ""
        return f"MassFunction(n={self.n}, {len(self)} focal sets {{{shown}{more}}}, m(∅)={self.conflict:.4g})"

    # ----------------------------------------------------------------- helpers
    def _words(self, cells) -> np.ndarray:
        if isinstance(cells, np.ndarray) and cells.dtype == bitset.WORD and cells.shape == (self._sets.shape[1],):
            return cells
        return bitset.pack_indices(_cells(cells), self.n)

    def _spread(self, weights: np.ndarray) -> np.ndarray:
        """Σ_B weight(B) · 1[x ∈ B] for every cell x.

        Works on blocks of cells so that memory stays bounded: each block's bits are
        unpacked once for all focal sets and summed with one matrix-vector product.
        """
        out = np.empty(self.n, dtype=np.float64)
        keep = weights != 0.0
        sets, w = self._sets[keep], weights[keep]
        if len(w) == 0:
            out[:] = 0.0
            return out
        words_per_block = _SPREAD_BLOCK_WORDS
        for start in range(0, sets.shape[1], words_per_block):
            block = np.ascontiguousarray(sets[:, start : start + words_per_block])
            bits = np.unpackbits(block.view(np.uint8), axis=1, bitorder="little")
            lo = start * 64
            hi = min(lo + bits.shape[1], self.n)
            out[lo:hi] = w @ bits[:, : hi - lo].astype(np.float64)
        return out


def _groups_equal(rows: np.ndarray, fps: np.ndarray, repeated: np.ndarray) -> bool:
    """True when all rows sharing each repeated fingerprint are identical (exact check, no row copies)."""
    for fp in repeated.tolist():
        members = np.flatnonzero(fps == fp)
        head = rows[members[0]]
        if not all(np.array_equal(head, rows[i]) for i in members[1:].tolist()):
            return False
    return True


def geometric_level_index(contour: np.ndarray, levels: int) -> np.ndarray:
    """Each cell's level after rounding its plausibility *up* to 1, 1/2, …, 2^−(levels−1): 0 for the top
    level, ``levels`` for a plausibility of 0 (in no focal set)."""
    mantissa, exponent = np.frexp(contour)  # c = mantissa · 2^exponent, mantissa in [0.5, 1)
    index = np.where(mantissa == 0.5, -exponent + 1, -exponent).astype(np.int64)
    np.clip(index, 0, levels - 1, out=index)
    index[contour <= 0] = levels
    return index


def check_same_frame(*ms: MassFunction) -> int:
    """Frame size shared by all arguments; ``FrameMismatchError`` naming the first that differs."""
    if not ms:
        raise RuleError("at least one mass function is needed")
    for i, m in enumerate(ms):
        if not isinstance(m, MassFunction):
            raise RuleError(f"argument {i + 1} is a {type(m).__name__}, not a MassFunction")
    n = ms[0].n
    for i, m in enumerate(ms[1:], start=2):
        if m.n != n:
            raise FrameMismatchError(
                f"mass function {i} is over {m.n} cells but mass function 1 is over {n}; "
                "beliefs can only be combined on the same frame of discernment"
            )
    return n


def _check_frame_size(n) -> int:
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or int(n) < 1:
        raise MassValueError(f"a frame needs a whole number of cells ≥ 1, got {n!r}")
    return int(n)


def _check_masses(masses: np.ndarray, keys=None) -> None:
    def where(i):
        return f"the focal set {_short(keys[i])}" if keys is not None else f"entry {i}"

    bad = ~np.isfinite(masses)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise MassValueError(f"mass {float(masses[i])!r} of {where(i)} is not a finite number")
    neg = masses < 0
    if neg.any():
        i = int(np.flatnonzero(neg)[0])
        raise MassValueError(f"mass {float(masses[i])!r} of {where(i)} is negative; masses lie in [0, 1]")
    total = float(masses.sum())
    if abs(total - 1.0) > MASS_TOLERANCE:
        raise MassValueError(
            f"masses sum to {total!r}, not 1 (tolerance {MASS_TOLERANCE:g}); "
            "rescale them, or put the missing mass on the whole frame to express ignorance"
        )


def _check_table(k: int, n: int) -> None:
    need = k * bitset.n_words(n) * 8
    if need > _MAX_TABLE_BYTES:
        raise MassValueError(
            f"{k} focal sets on {n} cells would need {need / 1024**3:.1f} GiB of packed sets "
            f"(limit {_MAX_TABLE_BYTES / 1024**3:.0f} GiB); use fewer focal sets, or the Bayesian back end"
        )


def _cells(cells):
    """Cell indices (or a boolean mask) as an array; ``pack_indices`` checks their range."""
    if isinstance(cells, (int, np.integer)) and not isinstance(cells, bool):
        return np.array([int(cells)])
    if isinstance(cells, np.ndarray):
        return cells
    if isinstance(cells, Iterable) and not isinstance(cells, (str, bytes)):
        return np.array(list(cells))
    raise CellIndexError(f"a set of cells must be a collection of whole-number indices, got {cells!r}")


def _as_float(value, key) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        raise MassValueError(f"mass of the focal set {_short(key)} must be a number, got {value!r}") from None


def _as_vector(values, name: str) -> np.ndarray:
    try:
        v = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError):
        raise MassValueError(f"{name} must be a vector of numbers, one per cell") from None
    if v.ndim != 1 or v.size == 0:
        raise MassValueError(f"{name} must be a non-empty vector with one entry per cell, got shape {v.shape}")
    if not np.isfinite(v).all():
        i = int(np.flatnonzero(~np.isfinite(v))[0])
        raise MassValueError(f"{name} has the non-finite value {float(v[i])!r} at cell {i}")
    return v


def _short(cells) -> str:
    try:
        items = sorted(int(c) for c in (np.flatnonzero(cells) if getattr(cells, "dtype", None) == np.bool_ else cells))
    except (TypeError, ValueError):
        return repr(cells)
    if len(items) > 6:
        return "{" + ", ".join(map(str, items[:3])) + f", … ({len(items)} cells)" + "}"
    return "{" + ", ".join(map(str, items)) + "}"
