"""Combination rules, discounting and focal-set reduction for ``MassFunction``.

Every pairwise rule runs over the k1 × k2 pairs of focal sets with vectorised
bitwise operations on packed words, in chunks so that memory stays bounded on
frames of millions of cells.  Sources:

- conjunctive (unnormalised) rule: Smets (1990), "The combination of evidence in
  the transferable belief model";
- Dempster's rule: Shafer (1976), *A Mathematical Theory of Evidence*;
- Yager (1987), "On the Dempster–Shafer framework and new combination rules";
- Dubois & Prade (1988), "Representation and combination of uncertainty with
  belief functions and possibility measures";
- disjunctive rule: Dubois & Prade (1986); Smets (1993);
- PCR5: Smarandache & Dezert (2005), "Information fusion based on new
  proportional conflict redistribution rules";
- averaging then Dempster: Murphy (2000), "Combining belief functions when
  evidence conflicts";
- discounting: Shafer (1976), ch. 11.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import reduce as _fold
from typing import NamedTuple

import numpy as np

from fusion import compiled
from fusion.belief import bitset
from fusion.belief.mass import FocalAccumulator, MassFunction, check_same_frame
from fusion.belief.pairs import PairBlock
from fusion.errors import MassValueError, RuleError, TotalConflictError

__all__ = [
    "RULES",
    "combine",
    "conflict_mass",
    "conjunctive",
    "conjunctive_reduced",
    "dempster",
    "yager",
    "dubois_prade",
    "disjunctive",
    "pcr5",
    "murphy",
    "average",
    "discount",
    "reduce_focal_sets",
    "Reduction",
]

# Bytes of candidate sets built at once by a pairwise rule, and fingerprinted while in cache.  The accumulator
# keeps the chunks it is handed (no copy), so a smaller chunk would not lower the peak; one chunk spares the
# copy that joins several into one table (measured: 3.1 → 1.1× the bare AND on a million cells, 32 × 32 sets).
_CHUNK_BYTES = 256 * 1024**2
_CACHE_BYTES = 1024**2
# Candidate words from which the compiled pair loop is used: below, numba's start-up would not pay back.
_COMPILED_WORDS = 2**18
_COMPILED_OPS = (np.bitwise_and, np.bitwise_or)


def _pairs(m1: MassFunction, m2: MassFunction, op: Callable, *, lazy: bool = False):
    """Yield ``(op(B_i, C_j) rows, i, j, fingerprints, empty)`` over all focal-set pairs, a chunk of i at a time;
    ``empty`` tells which rows are the empty set, known exactly.

    Rows are fingerprinted right after they are made, a few at a time while they are still in
    cache (measured: about a third faster than fingerprinting a whole chunk afterwards); on large
    frames, with numba installed, a compiled loop makes, fingerprints and tests each row for emptiness
    in one pass (``fusion.compiled``).  With ``lazy`` (and numba) the rows are not made at all: they come as a
    ``PairBlock`` that writes out only the rows the caller reads.
    """
    s1, s2 = m1.sets, m2.sets
    k2, w = s2.shape
    row_bytes = max(1, k2 * w * 8)
    step = max(1, _CHUNK_BYTES // row_bytes)
    sub = max(1, _CACHE_BYTES // row_bytes)
    # The compiled pair loop knows AND and OR (the rules' two operations); anything else stays with numpy.
    loops = compiled.kernels() if op in _COMPILED_OPS and len(s1) * k2 * w >= _COMPILED_WORDS else None
    union = op is np.bitwise_or
    for start in range(0, len(s1), step):
        a = s1[start : start + step]
        fps = np.empty((len(a), k2), dtype=np.uint64)
        empty = np.empty((len(a), k2), dtype=bool)
        ii = np.repeat(np.arange(start, start + len(a)), k2)
        jj = np.tile(np.arange(k2), len(a))
        if loops is not None and lazy:
            unwritten = np.empty((len(a), k2, 0), dtype=bitset.WORD)
            loops.pair_sets(a, s2, bitset.multipliers(w), union, unwritten, fps, empty)
            yield PairBlock(a, s2, union, ii - start, jj, loops), ii, jj, fps.reshape(-1), empty.reshape(-1)
            continue
        rows = np.empty((len(a), k2, w), dtype=bitset.WORD)
        if loops is not None:
            loops.pair_sets(a, s2, bitset.multipliers(w), union, rows, fps, empty)
            empty = empty.reshape(-1)
        else:
            for i in range(0, len(a), sub):
                op(a[i : i + sub, None, :], s2[None, :, :], out=rows[i : i + sub])
                fps[i : i + sub] = bitset.fingerprint(rows[i : i + sub])
            empty = _empty_rows(rows.reshape(-1, w), fps.reshape(-1))
        yield rows.reshape(-1, w), ii, jj, fps.reshape(-1), empty


def _empty_rows(rows: np.ndarray, fps: np.ndarray) -> np.ndarray:
    """Which rows are the empty set: the empty set's fingerprint is 0, confirmed exactly."""
    empty = fps == 0
    if empty.any():
        empty[empty] = ~rows[empty].any(axis=1)
    return empty


def _products(m1: MassFunction, m2: MassFunction, op: Callable, *, capped: bool = False) -> FocalAccumulator:
    """Every pair's set ``op(B_i, C_j)`` with weight m1(B_i) · m2(C_j), merged: the core of the product rules.

    ``capped``: the result will be cut to a few sets, so the sets are written out only when read (``PairBlock``):
    the cap reads only those it keeps.  An uncapped result reads them all, and making them while fingerprinting is
    cheaper than a second pass (measured: Dempster's rule on 100,000 cells, 1.1× against 1.8× the bitwise floor)."""
    acc = FocalAccumulator(check_same_frame(m1, m2))
    for rows, ii, jj, fps, empty in _pairs(m1, m2, op, lazy=capped):
        acc.add(rows, m1.masses[ii] * m2.masses[jj], owned=True, fingerprints=fps, empty=empty)
    return acc


def conflict_mass(m1: MassFunction, m2: MassFunction) -> float:
    """K = Σ m1(B) m2(C) over pairs with B ∩ C = ∅: the conflict, without building the combination."""
    check_same_frame(m1, m2)
    k = 0.0
    for _, ii, jj, _, empty in _pairs(m1, m2, np.bitwise_and, lazy=True):
        k += float((m1.masses[ii[empty]] * m2.masses[jj[empty]]).sum())
    return k


def conjunctive(m1: MassFunction, m2: MassFunction) -> MassFunction:
    """Unnormalised conjunctive rule: m(A) = Σ_{B∩C=A} m1(B) m2(C); m(∅) keeps the conflict."""
    fast = _one_word_conjunctive(m1, m2)
    return fast if fast is not None else MassFunction.collected(_products(m1, m2, np.bitwise_and))


def _one_word_conjunctive(m1: MassFunction, m2: MassFunction) -> MassFunction | None:
    """``conjunctive`` on a frame of up to 64 cells (a set is one word) in one compiled loop, the same numbers to the
    last bit (``word_products``; ``tests/test_compiled.py``), when the compiled loops are loaded already: on such
    frames the rule's own work is a few microseconds, and numpy's calls around it cost 0.15 ms (measured), but a call
    this small must not pay numba's start-up.  None otherwise, and when no pair keeps any weight (the numpy code
    then refuses the result, saying why)."""
    n = check_same_frame(m1, m2)
    loops = compiled.kernels_if_loaded()
    s1, s2 = m1.sets, m2.sets
    if loops is None or s1.shape[1] != 1:
        return None
    pairs = len(s1) * len(s2)
    bits = (2 * pairs - 1).bit_length()  # a table of at least twice the pairs: short probes
    table = np.full(1 << bits, -1, dtype=np.int64)
    words, masses = np.empty(pairs, dtype=bitset.WORD), np.empty(pairs, dtype=np.float64)
    count = loops.word_products(s1[:, 0], m1.masses, s2[:, 0], m2.masses, words, masses, table, np.uint64(64 - bits))
    if count == 0:
        return None
    words = words[:count].copy()
    return MassFunction._trusted(n, words.reshape(count, 1), masses[:count].copy(), empty=words == 0)


def conjunctive_reduced(m1: MassFunction, m2: MassFunction, max_focal: int, merge: str = "union") -> Reduction:
    """``reduce_focal_sets(conjunctive(m1, m2), max_focal)`` in one pass that copies only the kept sets.

    This is the filter's update: most of the k1 × k2 intersections are merged into one
    union anyway, so they are never gathered into a table of their own.
    """
    _check_cap(max_focal)
    return _reduction(_products(m1, m2, np.bitwise_and, capped=True).reduced(max_focal, merge))


def dempster(m1: MassFunction, m2: MassFunction, *, if_total_conflict: str = "raise") -> MassFunction:
    """Dempster's rule: the conjunctive rule normalised by 1 − K, K = m(∅).

    On total conflict (K = 1) raises ``TotalConflictError``; with
    ``if_total_conflict="unnormalised"`` returns the conjunctive result instead.
    """
    if if_total_conflict not in ("raise", "unnormalised"):
        raise RuleError(f"if_total_conflict must be 'raise' or 'unnormalised', got {if_total_conflict!r}")
    joint = conjunctive(m1, m2)
    try:
        return joint.normalised()
    except TotalConflictError:
        if if_total_conflict == "unnormalised":
            return joint
        raise TotalConflictError(
            "Dempster's rule is undefined: the sources are in total conflict (K = 1, no pair of focal "
            "sets intersects). Discount the less reliable source, or pass if_total_conflict='unnormalised' "
            "to keep the conflict as m(∅)."
        ) from None


def _conflict_to_whole_frame(m: MassFunction) -> MassFunction:
    empty = m.cardinalities == 0
    if not empty.any():
        return m
    acc = FocalAccumulator(m.n)
    acc.add(m.sets[~empty], m.masses[~empty])
    acc.add(bitset.full(m.n)[None, :], [m.masses[empty].sum()])
    return MassFunction.collected(acc)


def yager(m1: MassFunction, m2: MassFunction) -> MassFunction:
    """Yager's rule: the conjunctive rule with the conflict mass moved to the whole frame."""
    return _conflict_to_whole_frame(conjunctive(m1, m2))


def dubois_prade(m1: MassFunction, m2: MassFunction) -> MassFunction:
    """Dubois–Prade rule: a conflicting pair's product goes to the union B ∪ C."""
    n = check_same_frame(m1, m2)
    acc = FocalAccumulator(n)
    for rows, ii, jj, fps, empty in _pairs(m1, m2, np.bitwise_and):
        if empty.any():
            rows[empty] = m1.sets[ii[empty]] | m2.sets[jj[empty]]
            fps[empty] = bitset.fingerprint(rows[empty])
        acc.add(rows, m1.masses[ii] * m2.masses[jj], owned=True, fingerprints=fps)
    return MassFunction.collected(acc)


def disjunctive(m1: MassFunction, m2: MassFunction) -> MassFunction:
    """Disjunctive rule: m(A) = Σ_{B∪C=A} m1(B) m2(C), for when one of the sources is right."""
    return MassFunction.collected(_products(m1, m2, np.bitwise_or))


def pcr5(m1: MassFunction, m2: MassFunction) -> MassFunction:
    """PCR5 for two sources: each partial conflict m1(B) m2(C) (B ∩ C = ∅) goes back to B and C
    in proportion to m1(B) and m2(C)."""
    n = check_same_frame(m1, m2)
    for i, m in enumerate((m1, m2), start=1):
        if m.conflict > 0:
            raise RuleError(
                f"PCR5 takes normal mass functions, but source {i} has m(∅) = {m.conflict:.6g}; "
                "normalise it first (MassFunction.normalised)"
            )
    acc = FocalAccumulator(n)
    for rows, ii, jj, fps, empty in _pairs(m1, m2, np.bitwise_and):
        a, b = m1.masses[ii], m2.masses[jj]
        acc.add(rows[~empty], (a * b)[~empty], owned=True, fingerprints=fps[~empty])
        if empty.any():
            a, b = a[empty], b[empty]
            acc.add(m1.sets[ii[empty]], a * a * b / (a + b))
            acc.add(m2.sets[jj[empty]], b * b * a / (a + b))
    return MassFunction.collected(acc)


def average(*ms: MassFunction, weights=None) -> MassFunction:
    """Weighted mean of mass functions (equal weights by default)."""
    n = check_same_frame(*ms)
    w = np.full(len(ms), 1.0 / len(ms)) if weights is None else np.asarray(weights, dtype=np.float64)
    if w.shape != (len(ms),) or not np.isfinite(w).all() or (w < 0).any() or w.sum() <= 0:
        raise MassValueError(f"average needs one non-negative finite weight per mass function, got {weights!r}")
    w = w / w.sum()
    acc = FocalAccumulator(n)
    for m, wi in zip(ms, w.tolist()):
        acc.add(m.sets, m.masses * wi)
    return MassFunction.collected(acc)


def murphy(*ms: MassFunction, if_total_conflict: str = "raise") -> MassFunction:
    """Murphy's rule: average the n sources, then combine the average with itself n − 1 times (Dempster)."""
    mean = average(*ms)
    out = mean
    for _ in range(len(ms) - 1):
        out = dempster(out, mean, if_total_conflict=if_total_conflict)
    return out


def discount(m: MassFunction, reliability: float) -> MassFunction:
    """Shafer discounting with discount rate α = 1 − reliability.

    m'(A) = (1 − α) m(A) for A ≠ Θ, and m'(Θ) = (1 − α) m(Θ) + α.
    """
    r = _unit_interval(reliability, "reliability")
    if r == 1.0:
        return m
    acc = FocalAccumulator(m.n)
    acc.add(m.sets, m.masses * r)
    acc.add(bitset.full(m.n)[None, :], [1.0 - r])
    return MassFunction.collected(acc)


class Reduction(NamedTuple):
    """Result of ``reduce_focal_sets``: the reduced mass function and what the cap cost."""

    mass_function: MassFunction
    mass_moved: float
    """Total mass of the focal sets merged into a larger set (0 when nothing was merged)."""
    sets_merged: int


def _reduction(reduced: tuple[FocalAccumulator, float, int]) -> Reduction:
    acc, moved, merged = reduced
    return Reduction(MassFunction.collected(acc), moved, merged)


def reduce_focal_sets(m: MassFunction, max_focal: int, merge: str = "union") -> Reduction:
    """Cap the number of non-empty focal sets at ``max_focal``.

    The ``max_focal − 1`` most massive sets are kept; the rest are merged into their union
    (``merge="union"``), which takes their summed mass, or each into the kept set it overlaps
    most (``merge="nearest"``, see ``FocalAccumulator.reduced``).  Only mass moves to
    supersets, so the result is less committed than ``m`` (plausibilities never fall; an
    outer approximation, Denœux 2001).  The empty set is never merged: its mass is the
    conflict and must stay visible.
    """
    _check_cap(max_focal)
    if int((m.cardinalities > 0).sum()) <= max_focal:
        return Reduction(m, 0.0, 0)
    acc = FocalAccumulator(m.n)
    acc.add(m.sets, m.masses)
    return _reduction(acc.reduced(max_focal, merge))


def _check_cap(max_focal) -> None:
    if isinstance(max_focal, bool) or not isinstance(max_focal, (int, np.integer)) or max_focal < 1:
        raise RuleError(f"max_focal must be a whole number ≥ 1, got {max_focal!r}")


def _fold_pairwise(rule: Callable, **options) -> Callable:
    def run(*ms: MassFunction) -> MassFunction:
        return _fold(lambda a, b: rule(a, b, **options), ms)

    return run


def _exactly_two(name: str, rule: Callable) -> Callable:
    def run(*ms: MassFunction) -> MassFunction:
        if len(ms) != 2:
            raise RuleError(
                f"the {name} rule is defined here for two sources, got {len(ms)}; it is not associative, "
                "so combining more sources one after another depends on their order. Combine pairwise "
                "yourself if that order is meaningful, or use 'dempster', 'conjunctive' or 'murphy'."
            )
        return rule(*ms)

    return run


def _yager_n(*ms: MassFunction) -> MassFunction:
    # Yager's rule for n sources: the joint conjunctive combination, then the
    # conflict to Θ (so the result does not depend on the order of the sources).
    return _conflict_to_whole_frame(_fold(conjunctive, ms))


RULES: dict[str, str] = {
    "conjunctive": "unnormalised conjunctive rule; keeps the conflict as m(∅)",
    "dempster": "Dempster's rule; conflict removed by normalisation",
    "yager": "Yager's rule; conflict moved to the whole frame",
    "dubois_prade": "Dubois–Prade rule; each conflicting pair's mass goes to the union (two sources)",
    "disjunctive": "disjunctive rule; for when at least one source is right",
    "pcr5": "proportional conflict redistribution, PCR5 (two sources)",
    "murphy": "Murphy's averaging, then Dempster's rule",
}
"""Names accepted by ``combine(rule=...)``, with a one-line description each."""


def combine(*ms: MassFunction, rule: str = "dempster", **options) -> MassFunction:
    """Combine mass functions with a named rule (see ``RULES``).

    ``options`` go to the rule: ``if_total_conflict`` for 'dempster' and 'murphy'.
    One mass function alone is returned unchanged.
    """
    check_same_frame(*ms)
    runners = {
        "conjunctive": _fold_pairwise(conjunctive),
        "dempster": _fold_pairwise(dempster, **options),
        "yager": _yager_n,
        "dubois_prade": _exactly_two("Dubois–Prade", dubois_prade),
        "disjunctive": _fold_pairwise(disjunctive),
        "pcr5": _exactly_two("PCR5", pcr5),
        "murphy": lambda *m: murphy(*m, **options),
    }
    if rule not in runners:
        raise RuleError(f"unknown combination rule {rule!r}; choose one of: {', '.join(RULES)}")
    if options and rule not in ("dempster", "murphy"):
        raise RuleError(f"the {rule!r} rule takes no options, got {', '.join(options)}")
    if len(ms) == 1:
        return ms[0]
    return runners[rule](*ms)


def _unit_interval(value, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise MassValueError(f"{name} must be a number in [0, 1], got {value!r}") from None
    if not (0.0 <= v <= 1.0):
        raise MassValueError(f"{name} must lie in [0, 1], got {v!r}")
    return v
