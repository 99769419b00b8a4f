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
from fusion.belief.accumulator import MERGE_STRATEGIES, FocalAccumulator
from fusion.belief.frame_checks import (
    MASS_TOLERANCE,
    _as_float,
    _as_vector,
    _cells,
    _check_frame_size,
    _check_masses,
    _check_table,
    _short,
    check_same_frame,
)
from fusion.belief.levels import geometric_levels
from fusion.errors import (
    CellIndexError,
    MassValueError,
    TotalConflictError,
)

__all__ = ["MassFunction", "FocalSet", "FocalAccumulator", "MASS_TOLERANCE", "MERGE_STRATEGIES", "check_same_frame"]


# Distinct contour values turned into nested focal sets without quantisation.
_MAX_EXACT_LEVELS = 256
# Words of each focal set unpacked at once when spreading masses over cells (64 Ki cells).
_SPREAD_BLOCK_WORDS = 1024


class FocalSet(NamedTuple):
    """One focal set: its cells (sorted indices) and its mass."""

    cells: np.ndarray
    mass: float


class MassFunction:
    """A mass function m: 2^Θ → [0, 1] over the frame Θ = {0, …, n−1}, stored sparsely.

    Build one with ``from_focal``, ``vacuous``, ``categorical``, ``bayesian``,
    ``from_contour`` or ``from_likelihood``; combine with ``fusion.belief.rules``.
    Instances are immutable.
    """

    __slots__ = ("n", "_sets", "_masses", "_card", "_empty")

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
        merged = MassFunction.collected(acc)
        self.n, self._sets, self._masses, self._card, self._empty = n, merged._sets, merged._masses, None, merged._empty
        self._masses = self._masses / self._masses.sum()
        self._masses.flags.writeable = False

    @classmethod
    def collected(cls, acc: FocalAccumulator) -> MassFunction:
        """The mass function an accumulator has merged (``FocalAccumulator.arrays``)."""
        return cls._trusted(acc.n, *acc.arrays(), empty=acc.empty_slots())

    @classmethod
    def _trusted(cls, n: int, sets: np.ndarray, masses: np.ndarray, empty: np.ndarray | None = None) -> MassFunction:
        """Wrap arrays already merged and valid (used by the rules; no checks, no copy).  ``empty``: which rows
        are the empty set, when the caller knows (it saves counting every set's cells to find out)."""
        self = object.__new__(cls)
        keep = masses > 0.0
        if not keep.all():
            sets, masses = sets[keep], masses[keep]
            empty = None if empty is None else empty[keep]
        sets.flags.writeable = False
        masses.flags.writeable = False
        self.n, self._sets, self._masses, self._card, self._empty = int(n), sets, masses, None, empty
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
                index = np.clip(levels - np.ceil(c * levels - 1e-12), 0, levels).astype(np.intp)
                table = (levels - np.arange(levels + 1)) / levels
                present = np.flatnonzero(np.bincount(index, minlength=levels + 1))
            else:
                index, seen = geometric_levels(c, levels)
                table = np.append(2.0 ** -np.arange(levels), 0.0)
                present = np.flatnonzero(seen)
            present = present[table[present] > 0]
            values = table[present]
            masses = np.append(values - np.append(values[1:], 0.0), 1.0 - (values[0] if len(values) else 0.0))
            nested = bitset.pack_rows(n, len(present), lambda i, out: np.less_equal(index, present[i], out=out))
        else:
            values = np.unique(c[c > 0])[::-1]
            if len(values) > _MAX_EXACT_LEVELS:
                raise MassValueError(
                    f"the contour has {len(values)} distinct values, which would make as many nested focal "
                    f"sets (at most {_MAX_EXACT_LEVELS}); pass levels=8 (or similar) to quantise it"
                )
            top = float(values[0]) if len(values) else 0.0
            masses = np.append(values - np.append(values[1:], 0.0), 1.0 - top)
            nested = bitset.pack_rows(n, len(values), lambda i, out: np.greater_equal(c, values[i], out=out))
        sets = np.vstack([nested, np.zeros((1, bitset.n_words(n)), dtype=bitset.WORD)])  # and ∅, for 1 − top
        keep = masses > 1e-15
        return cls._trusted(n, sets[keep], masses[keep].astype(np.float64))

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

    def _empty_rows(self) -> np.ndarray:
        """Which focal sets are the empty set (from the combination that made them when it said so)."""
        if self._card is None and self._empty is not None:
            return self._empty
        return self.cardinalities == 0

    @property
    def conflict(self) -> float:
        """m(∅): the mass an unnormalised combination could not give to any cell."""
        return float(self._masses[self._empty_rows()].sum())

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
        nonempty = ~self._empty_rows()
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
        if self._card is not None:
            out._card = self._card[nonempty]
        out._empty = np.zeros(count, dtype=bool)
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
