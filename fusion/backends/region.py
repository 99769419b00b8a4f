"""The size of a belief's most probable region: the fewest cells holding ``REGION_LEVEL`` of its probability.

Every back end reports it with each pose estimate, so it is computed every tick on beliefs of up to millions of
cells, tracked (a few hundred cells hold nearly everything) or spread (after a re-seed, or the evidential back
end's plausibility transform).  No sort of the belief, and no per-cell binning (a scatter, which does not
vectorise).  A sample of the belief puts a bracket of values around where the most probable cells reach the level;
one pass adds up the exact mass at and above its top and the whole's, and gathers the cells inside it, among which
the count is found by cutting their range into smaller ones (compiled) or by a partial selection (numpy).  When
those exact masses show that the sample was wrong, passes that count and add up the cells at or above a few trial
values narrow the bracket first.  The masses, not the sample, decide, so
the count is exact whatever the sample shows.

The masses are added up in fixed point, each value v as the integer ⌊v · 2⁶¹ / total⌋: integer sums are exact in
any order, so the compiled pass (``fusion.compiled``, vectorised) and the numpy code give the same count to the
last cell, and neither depends on the order it adds in.  Quantising drops less than 2⁻⁶¹ of the total per cell
(6·10⁻¹³ of it over 1.4 M cells), below the 10⁻¹² margin the level is reached with.
"""

from __future__ import annotations

import math

import numpy as np

from fusion import compiled

__all__ = ["region_size", "normalise_and_count", "REGION_LEVEL"]

REGION_LEVEL = 0.95
"""Probability held by the 'best region' reported with every estimate (common practice, no source)."""

_FIXED = 2.0**61
"""Fixed-point units of a belief's total: the integer masses add up to about 2⁶¹, well inside an int64."""

_SAMPLE = 4096
"""Cells sampled (evenly spaced) to place the brackets (our choice: sorting them costs about 0.1 ms)."""

_SMALL = 8192
"""A belief of at most this many cells is counted in one go, all its cells the bracket (our choice)."""

_GATHER = 32768
"""The bracket's cells are gathered once it holds at most this many (our choice: the gathering pass costs the same
for 0 or 32,000 of them, and the crossing among 32,000 about 0.1 ms, measured on 240×160×36)."""

_SPACING = 8192
"""Cells at most between the trial values of a narrowing pass (our choice: a gap found to hold the crossing is then
gathered whole, well inside ``_GATHER``; see ``_from_sample``)."""

_WINDOW = 72
"""Sampled values the sample's first bracket spans, around where it puts the crossing (our choice: the sample misses
the crossing by about 24 sampled values, 8,000 cells at 1.4 M (one standard deviation, measured), so this holds it
about 9 times in 10; the pass that gathers it costs the same whatever it holds, but the selection among what it
gathers grows with it).  At most three quarters of ``_GATHER`` cells."""

_TRIALS = 4
"""Trial values per counting pass (the compiled pass checks four at once)."""

_SPREAD = 64
"""Sampled cells' worth of mass below which a belief counts as tracked (our choice; see ``_tracked``)."""


def region_size(p: np.ndarray, level: float = REGION_LEVEL, total: float | None = None) -> int:
    """Number of cells in the smallest set holding ``level`` of ``p`` (most probable cells first).  ``total``: the sum
    of ``p`` when the caller knows it (1 for a normalised belief), saving a pass; it only sets the fixed-point unit,
    so a total off in its last bits changes nothing but the quantisation's 2⁻⁶¹."""
    values = np.ascontiguousarray(p, dtype=np.float64).reshape(-1)
    total = float(values.sum()) if total is None else float(total)
    if not total > 0:
        return 0
    if not (math.isfinite(total) and math.isfinite(_FIXED / total)):  # a sum past the float range, or below 1e-290
        peak = float(values.max())
        if math.isfinite(peak) and peak > 0:  # finite cells: the same count on them over the largest
            return region_size(values / peak, level)
        return _by_sort(values, level)  # an infinite or NaN cell: counted by the definition, the slow way
    return _Bracket(values, level, total).count()


def normalise_and_count(values: np.ndarray, factor: float, level: float = REGION_LEVEL) -> int:
    """``values *= factor`` in place, a normalisation (the result sums to 1), then ``region_size`` of the result.  With
    the compiled loops the multiplication is done in the first counting pass, one pass over the belief fewer; the
    values written are numpy's to the last bit either way."""
    fusable = values.dtype == np.float64 and values.ndim == 1 and values.flags.c_contiguous and values.flags.writeable
    if not fusable or compiled.kernels() is None or values.size <= _SMALL:  # nothing to fuse: scale, then count
        values *= factor
        return region_size(values, level, total=1.0)
    return _Bracket(values, level, 1.0, factor).count()


def _stride(size: int) -> int:
    return max(16, size // _SAMPLE)  # a sixteenth of a small belief is sample enough


def _tracked(sampled: np.ndarray) -> bool:
    """Whether fewer than ``_SPREAD`` sampled cells' worth carry the sample's mass (its effective size, (Σv)² / Σv²,
    Kish 1965): a random belief's sample of 4,096 counts about 3,000, a belief of 300 cells in 345,600 about 3."""
    top = float(sampled.max()) if sampled.size else 0.0
    if not (top > 0 and math.isfinite(top)):
        return True
    relative = sampled / top  # squares of tiny values would underflow
    return float(relative.sum()) ** 2 / float(relative @ relative) < _SPREAD


def _sorted(values: np.ndarray, loops=None) -> np.ndarray:
    """``np.sort(values)`` for values ≥ 0 (−0.0 first among the zeros): as their bit patterns, which order as the
    values do (IEEE 754).  The compiled loops' radix sort (``region_sorted``) takes 38 µs for the 4,096 sampled
    values of a fresh belief; numpy's stable integer sort, 137 µs (its float sort more), measured.  A value with its
    sign bit set (−0.0 or negative) sends it to numpy's integer sort, and a negative value to its float sort."""
    keys = values.view(np.int64)
    if loops is not None:
        ordered = loops.region_sorted(np.ascontiguousarray(keys))
        if ordered.size == keys.size:
            return ordered.view(np.float64)
    ordered = np.sort(keys, kind="stable").view(np.float64)
    return ordered if not (ordered.size and ordered[0] < 0) else np.sort(values)


def _by_sort(values: np.ndarray, level: float) -> int:
    desc = np.sort(values[values > 0])[::-1]
    if not desc.size:
        return 0
    cum = np.cumsum(desc)
    return int(min(np.searchsorted(cum, level * cum[-1] * (1 - 1e-12)) + 1, desc.size))


class _Bracket:
    """The search for the value where the most probable cells reach the level.

    Invariant: the cells at or above ``hi`` hold less than the target (``hi_mass`` < ``target``), the cells at or
    above ``lo`` hold at least it; so the region is every cell at or above ``hi`` and the largest of those in
    [lo, hi).  Each counting pass tries up to four values inside the bracket and keeps the narrowest one."""

    def __init__(self, values: np.ndarray, level: float, total: float, factor: float = 1.0):
        self.values, self.level, self.total, self.scale = values, level, total, _FIXED / total
        self.factor = factor  # ≠ 1: the values are to be multiplied by it, in place, by the first pass
        self.loops = compiled.kernels()
        self.sample, self.sample_mass = np.empty(0), np.zeros(1, dtype=np.int64)
        self.lo, self.lo_count, self.lo_mass = 0.0, values.size, None  # None: the total, known after the first pass
        self.hi, self.hi_count, self.hi_mass = math.inf, 0, 0
        self.target = None

    def count(self) -> int:
        if self.values.size <= _SMALL:  # few cells: all of them are the bracket (nothing above it)
            fixed = self._fixed(self.values)
            self._settle(int(fixed.sum()))
            return self._crossing(fixed)
        stride = _stride(self.values.size)
        sampled = self.values[::stride] * self.factor if self.factor != 1.0 else self.values[::stride]
        if _tracked(sampled):  # the values as the first pass will leave them
            return self.settle(self._floor(), math.inf)
        self.place(sampled)
        window = self._from_sample(2, min(_WINDOW, 0.75 * _GATHER * self.sample.size / self.values.size))
        if len(window) < 2:  # the sample cannot place it: every cell is the bracket (the search splits bit patterns)
            window = [0.0, math.inf]
        return self.settle(*window)

    def _search(self) -> int:
        """Narrow the bracket until it holds at most ``_GATHER`` cells, then count in it."""
        if not self.sample.size:
            self.place(self.values[:: _stride(self.values.size)])
        while self.lo_count - self.hi_count > _GATHER:
            if self._one_value():
                return self._equal_values()
            before = self.lo_count - self.hi_count
            self._narrow(self._from_sample(_TRIALS))
            if self.lo_count - self.hi_count == before:  # the sample could not split it: split the bit patterns
                self._narrow(self._by_bits())
        _, k = self._within(self._inside())
        return self.hi_count + k

    def place(self, sampled: np.ndarray) -> None:
        """Keep a sample of the values, sorted with their cumulative fixed-point masses, to place trial values by."""
        self.sample = _sorted(sampled, self.loops)
        self.sample_mass = np.concatenate(([0], np.cumsum(self._fixed(self.sample))))  # the masses sort as the values

    def settle(self, lo: float, hi: float) -> int:
        """The count in one pass when the crossing lies in [lo, hi) (of the values as the pending factor leaves them)
        and that holds at most ``_GATHER`` cells: the pass adds up the exact masses at and above ``hi`` and of the
        whole, and gathers the cells in [lo, hi) (``_gather``).  Where those masses show the crossing elsewhere, or
        the cells are too many, the search goes on from the bracket they give."""
        buffer, acc = np.empty(_GATHER), np.zeros(3, dtype=np.int64)
        n = self._gather(lo, hi, buffer, acc)
        if self.lo_mass is None:
            self._settle(int(acc[2]))
        count, mass = int(acc[0]), int(acc[1])
        if mass >= self.target:  # the crossing lies at or above hi
            self.lo, self.lo_count, self.lo_mass = hi, count, mass
            return self._search()
        self.hi, self.hi_count, self.hi_mass = hi, count, mass
        if n > _GATHER:
            return self._search()
        inside, k = self._within(buffer[:n])
        if k < 0:  # below lo
            self.hi, self.hi_count, self.hi_mass = lo, count + n, mass + inside
            return self._search()
        self.lo, self.lo_count, self.lo_mass = lo, count + n, mass + inside
        return self.hi_count + k

    def _gather(self, lo: float, hi: float, out: np.ndarray, acc: np.ndarray) -> int:
        """One pass (``region_bracket``, scaling by the pending factor as it goes): the values in [lo, hi) into ``out``
        as far as it goes, how many are ≥ hi, their fixed-point mass and the whole's into ``acc``; returns how many
        lie in [lo, hi)."""
        if self.loops is None:
            self._scale_now()
            v, fixed = self.values, self._fixed(self.values)
            top, inside = v >= hi, v[(v >= lo) & (v < hi)]
            acc[:] = np.count_nonzero(top), int(fixed[top].sum()), int(fixed.sum())
            out[: min(inside.size, out.size)] = inside[: out.size]
            return inside.size
        values, factor, scale, loops = self.values, self.factor, self.scale, self.loops
        self.factor = 1.0
        if hi == math.inf:  # no top: a lighter pass
            if factor == 1.0:
                return loops.region_above(values, scale, lo, out, acc)
            return loops.region_above_scaling(values, factor, scale, lo, out, acc)
        if factor == 1.0:
            return loops.region_bracket(values, scale, lo, hi, out, acc)
        return loops.region_bracket_scaling(values, factor, scale, lo, hi, out, acc)

    def _floor(self) -> float:
        """The value below which cells cannot be needed: together they hold less than (1 − level) of the total."""
        return (1.0 - self.level) * self.total / self.values.size

    # ----------------------------------------------------------------- counting passes
    def _narrow(self, trials: list[float]) -> None:
        trials = sorted({t for t in trials if self.lo < t < self.hi})
        if not trials and self.lo_mass is not None:
            return
        counts, masses, total = self._counts(trials)
        if self.lo_mass is None:
            self._settle(total)
        for t, c, m in zip(trials, counts, masses):
            if m >= self.target:
                self.lo, self.lo_count, self.lo_mass = t, c, m  # ascending: the last such is the largest
            elif t < self.hi:
                self.hi, self.hi_count, self.hi_mass = t, c, m

    def _settle(self, total: int) -> None:
        """The belief's fixed-point mass is known: the target is ``level`` of it, reached, not missed by rounding."""
        self.lo_mass, self.target = total, max(1, math.ceil(self.level * total * (1 - 1e-12)))

    def _counts(self, trials: list[float]) -> tuple[list[int], list[int], int]:
        """Per trial value: how many cells are at or above it and their fixed-point mass; and the whole mass."""
        self._scale_now()  # a no-op after the first pass (``settle``), which scales as it goes
        if self.loops is None:
            fixed = self._fixed(self.values)
            masks = [self.values >= t for t in trials]
            return [int(np.count_nonzero(m)) for m in masks], [int(fixed[m].sum()) for m in masks], int(fixed.sum())
        counts, masses, out = [], [], np.zeros(2 * _TRIALS + 1, dtype=np.int64)
        for start in range(0, max(len(trials), 1), _TRIALS):
            chunk = trials[start : start + _TRIALS]
            padded = np.array(chunk + [math.inf] * (_TRIALS - len(chunk)))  # nothing is at or above infinity
            self.loops.region_counts(self.values, self.scale, padded, out)
            counts += out[: len(chunk)].tolist()
            masses += out[_TRIALS : _TRIALS + len(chunk)].tolist()
        return counts, masses, int(out[-1])

    def _scale_now(self) -> None:
        """Apply a pending normalisation factor in place (numpy's ``values *= factor``), for code that cannot fuse it."""
        if self.factor != 1.0:
            self.values *= self.factor
            self.factor = 1.0

    def _fixed(self, values: np.ndarray) -> np.ndarray:
        return (values * self.scale).astype(np.int64)  # truncated, as the compiled pass converts

    # ----------------------------------------------------------------- trial values
    def _from_sample(self, k: int, spacing: float | None = None) -> list[float]:
        """``k`` sampled values around where the sample puts the crossing: the sample's share of the bracket's mass,
        scaled to the bracket's counted mass, places it.  They are spaced about one standard error of that apart (its
        sampling error, common practice, no source), but no more than ``_SPACING`` cells apart: the cells a sampled
        value stands for vary (5,600 to 9,800 per 24 values, measured), and a gap gathered at once costs less than a
        second pass.  ``spacing``: how many sampled values apart instead (the first window's width)."""
        s, cum = self.sample, self.sample_mass
        a, b = int(np.searchsorted(s, self.lo, "left")), int(np.searchsorted(s, self.hi, "left"))
        if b - a < 2 or cum[b] == cum[a]:
            return []
        lo_mass = _FIXED if self.lo_mass is None else self.lo_mass  # before the first pass: about the total
        target = self.level * _FIXED if self.target is None else self.target
        # the mass at or above s[i], for i in [a, b), is about hi_mass + (lo_mass − hi_mass)·(cum[b] − cum[i]) / (cum[b] − cum[a])
        top, seen = float(cum[b]), float(cum[b] - cum[a])
        need = top - (target - self.hi_mass) * seen / max(lo_mass - self.hi_mass, 1)
        centre = int(np.searchsorted(cum[a:b], need, "right")) - 1 + a  # the largest sampled value still reaching it
        step = min(0.6 * math.sqrt(b - a), _SPACING * s.size / self.values.size) if spacing is None else spacing
        step = max(1.0, step)  # a gap is gathered
        spots = {min(max(centre + round(step * (j - (k - 1) / 2)), a), b - 1) for j in range(k)}
        return [float(s[i]) for i in sorted(spots)]

    def _one_value(self) -> bool:
        return self.hi == np.nextafter(self.lo, math.inf)

    def _by_bits(self) -> list[float]:
        """Trial values evenly spaced in bit pattern inside the bracket (positive floats order as their bits do,
        IEEE 754), the bracket's next value up among them: each pass cuts the patterns left to a third or less, so the
        search ends, at worst on one value."""
        top = self.hi if math.isfinite(self.hi) else float(np.nextafter(self.values.max(), math.inf))
        lo_bits, hi_bits = (int(np.float64(v).view(np.int64)) for v in (self.lo, top))
        step = max(1, (hi_bits - lo_bits) // (_TRIALS - 1))
        picks = {lo_bits + 1, lo_bits + step, lo_bits + 2 * step, hi_bits}
        return [compiled.float_of_bits(b) for b in sorted(picks) if lo_bits < b <= hi_bits]

    # ----------------------------------------------------------------- the last step
    def _equal_values(self) -> int:
        """Every cell of the bracket holds the same value (a uniform belief's one level): the count is arithmetic."""
        each = int(self._fixed(np.array([self.lo]))[0])
        return self.hi_count + min(-(-(self.target - self.hi_mass) // max(each, 1)), self.lo_count - self.hi_count)

    def _within(self, values: np.ndarray) -> tuple[int, int]:
        """(the fixed-point mass of the bracket's cells ``values``, how many of the largest of them reach the target
        with the cells above the bracket); −1 for the count when all of them fall short.  The compiled loop cuts
        the values' range instead of partitioning (``region_crossing``: 0.06 against 0.48 ms on 24,000 cells,
        measured); the count is the same, being defined by the masses alone."""
        need = self.target - self.hi_mass
        if self.loops is not None:
            inside, k = self.loops.region_crossing(values, self.scale, need)
            return int(inside), int(k)
        fixed = self._fixed(values)
        inside = int(fixed.sum())
        return inside, (self._crossing(fixed) if inside >= need else -1)

    def _crossing(self, fixed: np.ndarray) -> int:
        """How many of the bracket's cells, largest first, reach the target with the cells above it (``hi_count``
        of them, not included), from their fixed-point masses ``fixed``.  Only the ranks where the sum
        can cross are sorted: the answer k is at least need / (largest mass) and at most need / (smallest), and a
        partition sets apart the ranks above that window, whose sum needs no order (a tenth of a sort's time on 7,500
        cells, measured; a few hundred cells are simply sorted)."""
        if fixed.size <= 512:
            cum = self.hi_mass + np.cumsum(np.sort(fixed)[::-1])
            return min(int(np.searchsorted(cum, self.target, "left")) + 1, fixed.size)
        need, size = self.target - self.hi_mass, fixed.size  # the bracket holds at least need: k_min ≤ size
        low, high = int(fixed.min()), int(fixed.max())
        k_min = max(1, -(-need // high))
        k_max = min(size, -(-need // low)) if low > 0 else size
        first, last = size - k_max, size - k_min + 1  # ascending: the window of ranks, then the k_min − 1 above it
        parts = np.partition(fixed, [first, last] if last < size else [first])
        window = np.sort(parts[first:last])[::-1]
        cum = int(parts[last:].sum()) + np.cumsum(window)
        return k_min + min(int(np.searchsorted(cum, need, "left")), window.size - 1)

    def _inside(self) -> np.ndarray:
        n = self.lo_count - self.hi_count
        if n == self.values.size:
            return self.values
        out = np.empty(n)
        self._gather(self.lo, self.hi, out, np.zeros(3, dtype=np.int64))
        return out
