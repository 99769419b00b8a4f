"""A belief kept as its contour: the plausibility of each single cell, dense, with no focal sets.

Why this representation.  Dempster's rule multiplies commonality functions, and the
commonality of a single cell is its plausibility, so the contour of a combination is
the product of the contours, renormalised (Shafer 1976, ch. 3 and 11):

    pl_{m1 ⊕ m2}(x) ∝ pl_1(x) · pl_2(x).

The contour of a mixture of mass functions is the mixture of their contours, so a
prediction that averages the belief moved by every possible displacement (probabilistic
motion) is a convolution of the contour, and a prediction that moves every focal set
by every displacement within a bound (set-valued motion) turns a consonant belief into
the consonant belief of the grey-scale dilation (a running maximum) of its contour.  A
filter that stores the contour is therefore *exact* for what Dempster's rule and the
unnormalised conjunctive rule do to the contour, with no cap on focal sets, and its
plausibility transform pl / Σ pl is the Bayes posterior when the evidence's contours
are the Bayesian likelihoods (Cobb & Shenoy 2006, "On the plausibility transformation
method for translating belief function models to probability models").

What needs more than the contour.  Bel and Pl of a region, the pignistic transform, the
conflict K of a reading with the belief, and a distance between beliefs depend on the
whole mass function, which after a few combinations has far more focal sets than can be
stored.  For those outputs the belief is read as the *consonant* mass function with the
same contour (nested focal sets {x : pl(x) ≥ λ}, Shafer 1976, ch. 10; Dubois & Prade
1988): exact whenever the belief is consonant (after one reading, and after any
set-valued motion of a consonant belief), an approximation otherwise.  ``fusion bench``
prints its distance from the exact result on a small site (the "fidelity" rows).

Levels are read in fine geometric bins (``LEVEL_RATIO``: 0.1% per bin, down to
``LOWEST_LEVEL``) so that K and the pignistic transform cost a few linear passes and no
sort; that adds at most a 0.1% relative error in level (measured in the fidelity rows).
"""

from __future__ import annotations

import math

import numpy as np

from fusion import compiled
from fusion.belief.levels import geometric_level_index
from fusion.belief.mass import MassFunction
from fusion.errors import MassValueError

__all__ = ["ContourBelief", "consonant_distance", "LEVEL_RATIO", "LOWEST_LEVEL", "DISTANCE_LEVELS"]

LEVEL_RATIO = 1.001
"""Ratio between successive level bins of the consonant reading (our choice: 0.1% in level)."""

LOWEST_LEVEL = 1e-12
"""Plausibility below which cells share one last bin (their sets carry at most this much mass)."""

DISTANCE_LEVELS = 24
"""Geometric levels (1, 1/2, …, 2^−23) of the consonant belief when a Jousselme distance is taken."""

_BINS = int(math.ceil(-math.log(LOWEST_LEVEL) / math.log(LEVEL_RATIO)))
# Upper edge of each bin: bin j holds levels in (edge[j+1], edge[j]]; the last bin, _BINS, holds [0, LOWEST_LEVEL].
_EDGES = np.append(LEVEL_RATIO ** -np.arange(_BINS + 1, dtype=np.float64), 0.0)
_EDGES[_BINS] = LOWEST_LEVEL
_WIDTHS = _EDGES[:-1] - _EDGES[1:]
_PER_LOG = np.float32(-1.0 / math.log(LEVEL_RATIO))


class ContourBelief:
    """An immutable belief: a contour in [0, 1] per cell with maximum 1 (the normal part), and the mass
    ``empty`` on the empty set left by the unnormalised conjunctive rule (0 under Dempster's rule)."""

    __slots__ = ("_contour", "empty", "_bins", "_sum", "_active_cells")

    def __init__(self, contour: np.ndarray, empty: float = 0.0, *, owned: bool = False, top: float | None = None):
        """``owned``: the caller hands over a float64 array it will not touch again, known to be finite and
        ≥ 0 (a product or prediction of contours): it is rescaled in place instead of checked and copied.
        ``top``: with ``owned``, the array's maximum, when the caller has just found it (one pass fewer)."""
        c = np.asarray(contour, dtype=np.float64).reshape(-1)
        if not owned:
            c = c.copy()
            if c.size == 0 or not np.isfinite(c).all() or (c < 0).any():
                raise MassValueError("a contour is a finite plausibility ≥ 0 per cell")
            top = None
        if top is None:
            top = float(c.max()) if c.size else 0.0
        if top <= 0:
            raise MassValueError("a contour needs at least one cell of positive plausibility")
        if top != 1.0:
            c /= top
        if not 0.0 <= empty < 1.0:
            raise MassValueError(f"the mass on the empty set must lie in [0, 1), got {empty!r}")
        c.flags.writeable = False
        self._contour, self.empty = c, float(empty)
        self._bins = None
        self._sum = None
        self._active_cells = None

    @classmethod
    def vacuous_on(cls, mask: np.ndarray) -> ContourBelief:
        """Total ignorance over the cells of ``mask``: plausibility 1 there, 0 elsewhere."""
        return cls(np.asarray(mask, dtype=bool).astype(np.float64), owned=True)

    @property
    def n(self) -> int:
        return self._contour.size

    @property
    def contour(self) -> np.ndarray:
        """Plausibility of each cell under the normal part (read-only; maximum 1)."""
        return self._contour

    # ----------------------------------------------------------------- exact outputs
    def plausibility_transform(self) -> np.ndarray:
        """pl / Σ pl: the probability consistent with Dempster's rule (Cobb & Shenoy 2006); exact."""
        if self._sum is None:
            self._sum = float(self._contour.sum())
        return self._contour / self._sum

    # ----------------------------------------------------------------- consonant reading
    def pl(self, mask: np.ndarray) -> float:
        """Pl(A) of the consonant belief with this contour: max of the contour over A, times 1 − m(∅)."""
        values = self._contour[np.asarray(mask, dtype=bool).reshape(-1)]
        return (1.0 - self.empty) * (float(values.max()) if values.size else 0.0)

    def bel(self, mask: np.ndarray) -> float:
        """Bel(A) = Pl(Θ) − Pl(Ā) of the consonant belief: 1 − m(∅) − Pl(not A)."""
        return (1.0 - self.empty) - self.pl(~np.asarray(mask, dtype=bool).reshape(-1))

    def conflict_with(self, contour: np.ndarray, bayesian: bool = False, transform=None) -> float:
        """K = m(∅) of the unnormalised conjunctive combination of the (normal) consonant belief with a
        reading: a consonant one of contour ``contour`` (max 1 where it is normal), or with ``bayesian``
        a Bayesian one whose probabilities are ``contour`` / Σ ``contour``.  ``transform``, if given, maps
        contour values to the reading's plausibilities (applied only to the cells it needs).

        1 − K = Σ_k m(A_k) · Pl_e(A_k) over the nested sets A_k = {pl ≥ λ_k}, i.e. ∫₀¹ Pl_e({pl ≥ λ}) dλ,
        with Pl_e(A) = max_A contour (consonant) or Σ_A p (Bayesian).  Only cells of plausibility ≥
        ``LOWEST_LEVEL`` are visited: the sets below that level carry less mass than that in all."""
        e = np.asarray(contour, dtype=np.float64).reshape(-1)
        cells, bins = self._active()
        if bayesian:
            total = float(e.sum())
            if total <= 0:
                return 1.0
            values = e[cells] if transform is None else transform(e[cells])
            reach = np.cumsum(np.bincount(bins, weights=values, minlength=_BINS + 1)) / total
        else:
            # Pl_e({pl ≥ λ}) is the largest reading value over the cells of the bins above λ.  The transform is
            # monotone (a plausibility of fit rises with the contour), so it is applied to those few maxima, one
            # per bin, not to every cell: max of t(v) = t(max of v).
            per_bin = np.full(_BINS + 1, -1.0)  # below every reading value: marks the bins before the first cell
            loops = compiled.kernels()
            if loops is not None:
                loops.level_maxima(e, _NO_CELLS if isinstance(cells, slice) else cells, bins, per_bin)
            else:
                np.maximum.at(per_bin, bins, e[cells])
            reach = np.maximum.accumulate(per_bin)
            before = reach < 0.0
            if transform is not None:
                reach = transform(np.maximum(reach, 0.0))
            reach[before] = 0.0
        agree = float((_WIDTHS * reach).sum())  # not np.dot: a BLAS call costs more than this sum here
        if agree <= LOWEST_LEVEL and not np.any((self._contour > 0) & (e > 0)):
            return 1.0  # no cell both allow: total conflict, exactly
        return float(min(max(1.0 - agree, 0.0), 1.0))

    def pignistic(self) -> np.ndarray:
        """BetP of the consonant belief: BetP(x) = ∫₀^{pl(x)} dλ / |{pl ≥ λ}| (Smets & Kennes 1994)."""
        bins = self._level_bins()
        counts = np.cumsum(np.bincount(bins, minlength=_BINS + 1)).astype(np.float64)
        share = _WIDTHS / np.maximum(counts, 1.0)
        # Whole bins below bin j (levels under its lower edge): every set there holds bin j's cells.
        below = np.append(np.cumsum(share[::-1])[::-1][1:], 0.0)
        loops = compiled.kernels()
        if loops is not None:
            p = np.empty(self.n)
            loops.pignistic_levels(self._contour, bins, below, _EDGES[1:], counts, p)
        else:
            p = below[bins] + (self._contour - _EDGES[bins + 1]) / np.maximum(counts[bins], 1.0)
            p[self._contour <= 0] = 0.0
        return p / p.sum()

    def as_mass_function(self, levels: int = DISTANCE_LEVELS) -> MassFunction:
        """The consonant mass function of the contour rounded up to geometric levels (an outer
        approximation), with m(∅) = ``empty``; for distances and for tools that need focal sets."""
        m = MassFunction.from_contour(self._contour, levels=levels, spacing="geometric")
        if self.empty == 0.0:
            return m
        sets = np.vstack([m.sets, np.zeros((1, m.sets.shape[1]), dtype=m.sets.dtype)])
        return MassFunction(m.n, sets, np.append(m.masses * (1.0 - self.empty), self.empty))

    def _active(self) -> tuple[np.ndarray, np.ndarray]:
        """The cells of plausibility ≥ ``LOWEST_LEVEL`` and their level bins, computed once per belief.  After
        a few discounted readings most of a site is far below that level, so K visits a few cells."""
        if self._active_cells is None:
            cells = np.flatnonzero(self._contour >= LOWEST_LEVEL)
            if cells.size == self.n:
                self._active_cells = (slice(None), self._level_bins())
            else:
                self._active_cells = (cells, _bins_of(self._contour[cells]))
        return self._active_cells

    def _level_bins(self) -> np.ndarray:
        """Level bin of each cell (0 = the top level, ``_BINS`` the last), computed once per belief.
        Single precision is ample for a bin index (levels differ by 0.1% per bin)."""
        if self._bins is None:
            self._bins = _bins_of(self._contour)
        return self._bins


_NO_CELLS = np.zeros(0, dtype=np.intp)


def _bins_of(level: np.ndarray) -> np.ndarray:
    """Level bin of each value.  Floored at LOWEST_LEVEL before the logarithm: no denormals or zeros reach
    it (both are slow); values of 0 share the last bin with those below LOWEST_LEVEL (the bin's width is
    LOWEST_LEVEL, so K moves by less than that; the pignistic transform zeroes them afterwards)."""
    scaled = np.empty(level.shape, dtype=np.float32)
    np.maximum(level, LOWEST_LEVEL, out=scaled)  # in float64, rounded to float32 as it is stored
    np.log(scaled, out=scaled)
    scaled *= _PER_LOG
    np.minimum(scaled, np.float32(_BINS), out=scaled)
    return scaled.astype(np.intp)


def consonant_distance(a: ContourBelief, b: ContourBelief, levels: int = DISTANCE_LEVELS) -> float:
    """Jousselme distance (Jousselme, Grenier & Bossé 2001) between the consonant beliefs of two contours
    rounded up to geometric levels (the outer approximation of ``as_mass_function``), in O(cells).

    The focal sets of each are nested, A_i = {level ≤ i}, so |A_i ∩ A_k| = min of their sizes, and
    |A_i ∩ B_j| is a two-dimensional cumulative count of the cells' (level in a, level in b) pairs.
    Sets equal as sets need no merging: they have equal rows in D, so the quadratic form is unchanged."""
    if a.n != b.n:
        raise MassValueError(f"the beliefs are over {a.n} and {b.n} cells")
    ia, ib = geometric_level_index(a.contour, levels), geometric_level_index(b.contour, levels)
    grid = np.bincount(ia * (levels + 1) + ib, minlength=(levels + 1) ** 2).reshape(levels + 1, levels + 1)
    inter = grid.cumsum(axis=0).cumsum(axis=1)[:levels, :levels].astype(np.float64)  # |A_i ∩ B_j|
    count_a, count_b = grid.sum(axis=1)[:levels], grid.sum(axis=0)[:levels]  # cells per level
    size_a, size_b = np.cumsum(count_a).astype(np.float64), np.cumsum(count_b).astype(np.float64)
    ma, mb = _level_masses(count_a, a.empty), _level_masses(count_b, b.empty)
    d_aa = _nested_jaccard(size_a)
    d_bb = _nested_jaccard(size_b)
    union = size_a[:, None] + size_b[None, :] - inter
    d_ab = np.divide(inter, union, out=np.zeros_like(inter), where=union > 0)
    e = a.empty - b.empty
    quad = ma @ d_aa @ ma + mb @ d_bb @ mb - 2.0 * (ma @ d_ab @ mb) + e * e
    return math.sqrt(max(0.0, 0.5 * float(quad)))


def _level_masses(count: np.ndarray, empty: float) -> np.ndarray:
    """Masses of the nested sets A_i = {level ≤ i} of a contour on levels 1, 1/2, …, with ``count`` cells per
    level: m(A_i) = v_i − v_next present level (the lowest present keeps its v_i), scaled by 1 − m(∅)."""
    present = count > 0
    top = 2.0 ** -np.flatnonzero(present)
    m = np.zeros(len(count))
    if top.size:
        m[present] = (top - np.append(top[1:], 0.0)) * (1.0 - empty) / top[0]
    return m


def _nested_jaccard(size: np.ndarray) -> np.ndarray:
    lo, hi = np.minimum.outer(size, size), np.maximum.outer(size, size)
    return np.divide(lo, hi, out=np.zeros_like(lo), where=hi > 0)
