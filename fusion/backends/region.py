"""The size of a belief's most probable region: the fewest cells holding ``REGION_LEVEL`` of its probability.

Every back end reports it with each pose estimate, so it is computed every tick on beliefs of up to millions of
cells, tracked (a few hundred cells hold nearly everything) or spread (after a re-seed, or the evidential back
end's plausibility transform).  No full sort: a partial selection settles a tracked belief, bins of the values'
top bits a spread one; with numba a compiled pass does the binning over the belief itself (``fusion.compiled``),
with the same count as the numpy code, to the last cell.
"""

from __future__ import annotations

import numpy as np

from fusion import compiled

__all__ = ["region_size", "REGION_LEVEL", "REGION_PROBE"]

REGION_LEVEL = 0.95
"""Probability held by the 'best region' reported with every estimate (common practice, no source)."""


def region_size(p: np.ndarray, level: float = REGION_LEVEL) -> int:
    """Number of cells in the smallest set holding ``level`` of ``p`` (most probable cells first).

    Only cells holding at least (1 − level) · total / n can be in it: all the cells below that hold less than
    (1 − level) of the total together, so the cells above it, most probable first, reach ``level`` before any
    of them is needed.  That one pass leaves a few hundred candidates of a tracked belief's 1.4 M cells."""
    total = float(p.sum())
    if total <= 0:
        return 0
    threshold = max((1.0 - level) * total / p.size, np.finfo(np.float64).tiny)
    loops = compiled.kernels()
    if loops is not None and p.dtype == np.float64 and np.isfinite(total):
        return _region_compiled(
            loops, np.ascontiguousarray(p).reshape(-1), threshold, total, level * total * (1 - 1e-12)
        )
    nz = p[p >= threshold]
    n = nz.size
    if n == 0:
        return 0
    target = level * total * (1 - 1e-12)
    # A tracked belief holds its mass in a few hundred cells: a partial selection of the largest
    # REGION_PROBE (linear time) and a sort of those settles it, a tenth of a full sort's cost on
    # 1.4 M cells (measured).  The top k values, sorted, are the first k of the full sort (ties are
    # equal values), so the count is the full sort's.  A spread belief falls back to the full sort.
    if n > 2 * REGION_PROBE and _probe_can_reach(float(nz.max()), target):
        desc = np.sort(np.partition(nz, n - REGION_PROBE)[n - REGION_PROBE :])[::-1]
        cum = np.cumsum(desc)
        if cum[-1] >= target:
            return int(np.searchsorted(cum, target) + 1)
    if n > 2 * REGION_PROBE:
        return _region_by_bins(nz, target)
    desc = np.sort(nz)[::-1]
    return int(min(np.searchsorted(np.cumsum(desc), target) + 1, n))


_BIN_SHIFT = 44
"""Bits of a float64 dropped to bin it in ``_region_by_bins``: 8 mantissa bits kept, 256 bins a binade (our choice)."""


def _region_by_bins(nz: np.ndarray, target: float) -> int:
    """``region_size`` of a spread belief without a full sort.  Positive float64 values order as their bit patterns do
    (IEEE 754), so the top bits bin them by size with no logarithm: the bins are summed from the top until the
    one where the sum crosses ``target``, and only that bin's values are sorted.  Every value of a higher bin is
    larger than every value of that bin, so the count is the full sort's (ties are equal values, in one bin).  The
    values are at least (1 − level) · total / n, so they span a few dozen binades: a few thousand bins."""
    key = nz.view(np.int64) >> _BIN_SHIFT
    key = key - key.min()
    held = np.cumsum(np.bincount(key, weights=nz)[::-1])  # from the largest bin down
    b = int(min(np.searchsorted(held, target), held.size - 1))
    edge = held.size - 1 - b
    above, above_mass = int(np.count_nonzero(key > edge)), float(held[b - 1]) if b else 0.0
    inside = _descending(nz[key == edge])
    return int(min(above + np.searchsorted(np.cumsum(inside), target - above_mass) + 1, above + inside.size))


def _descending(values: np.ndarray) -> np.ndarray:
    """``values`` largest first; all equal (a uniform belief's one bin) they already are, and no sort is needed."""
    if values.size and values.min() == values.max():
        return values
    return np.sort(values)[::-1]


def _probe_can_reach(largest: float, target: float) -> bool:
    """Whether the ``REGION_PROBE`` largest values, none above ``largest``, could hold ``target``: when not, a spread
    belief (a uniform one, say) skips gathering and selecting them (a margin covers the sum's rounding)."""
    return REGION_PROBE * largest * (1 + 1e-9) >= target


REGION_PROBE = 4096
"""Cells taken by the partial selection of ``region_size`` before it falls back to a full sort (our choice)."""


def _key(value: float) -> int:
    return int(np.float64(value).view(np.int64)) >> _BIN_SHIFT


def _value(key: int) -> float:
    """The smallest value of bin ``key`` (the inverse of ``_key`` at the bin's lower edge)."""
    return float(np.int64(key << _BIN_SHIFT).view(np.float64))


def _region_compiled(loops, p: np.ndarray, threshold: float, total: float, target: float) -> int:
    """``region_size`` with the candidates binned in one compiled pass over ``p`` (never gathered as a whole): the same
    steps as the numpy code on the same numbers, so the same count.  A tracked belief's few candidates come back
    from that pass; a spread belief's largest ``REGION_PROBE`` are found from the bins' counts, and, when they do not
    reach ``target``, the bin where the sums cross it is the only one gathered and sorted."""
    base = _key(threshold)
    mass = np.zeros(max(_key(total) - base + 1, 1))  # no value of a probability exceeds the total
    count = np.zeros(mass.size, dtype=np.int64)
    few = np.empty(2 * REGION_PROBE)
    n = loops.region_scan(p, threshold, base, _BIN_SHIFT, mass, count, few)
    if n == 0:
        return 0
    if n <= 2 * REGION_PROBE:
        desc = np.sort(few[:n])[::-1]
        return int(min(np.searchsorted(np.cumsum(desc), target) + 1, n))
    top = count.size - 1 - int(np.searchsorted(np.cumsum(count[::-1]), REGION_PROBE))  # lowest bin of the largest
    used = np.flatnonzero(count)
    lo, hi = int(used[0]), int(used[-1])  # the bins np.bincount would have made (from the smallest key up)
    reach = _probe_can_reach(_value(hi + 1 + base), target)  # the bin above the highest bounds every value
    if reach and float(mass[top:].sum()) * (1 + 1e-9) >= target:  # else the largest REGION_PROBE fall short
        gathered = _values(loops, p, threshold, base, top, count.size - 1, count)
        m = gathered.size
        desc = np.sort(np.partition(gathered, m - REGION_PROBE)[m - REGION_PROBE :])[::-1]
        cum = np.cumsum(desc)
        if cum[-1] >= target:
            return int(np.searchsorted(cum, target) + 1)
    held = np.cumsum(mass[lo : hi + 1][::-1])
    b = int(min(np.searchsorted(held, target), held.size - 1))
    edge = lo + held.size - 1 - b
    above, above_mass = int(count[edge + 1 :].sum()), float(held[b - 1]) if b else 0.0
    inside = _descending(_values(loops, p, threshold, base, edge, edge, count))
    return int(min(above + np.searchsorted(np.cumsum(inside), target - above_mass) + 1, above + inside.size))


def _values(loops, p, threshold, base, lowest, highest, count) -> np.ndarray:
    out = np.empty(int(count[lowest : highest + 1].sum()))
    loops.region_values(p, threshold, base, _BIN_SHIFT, lowest, highest, count.size - 1, out)
    return out
