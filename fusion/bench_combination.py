"""The combination rows of ``fusion bench``: Dempster's rule on frames of 10 to 1,000,000 cells, beside its
floor (the bare AND of every pair of focal sets' words) and a peer (the rule's definition on Python
frozensets, the plain general-purpose way to hold sets of cells), measured in the same run.

On small frames the fixed cost of a call is what a caller pays; on large ones the passes over the words.
Both inputs hold ``FOCAL_SETS`` random focal sets, each cell in a set with probability one half, so
intersections are rarely empty and rarely equal (the rule's general case).  The rule and its floor take
``fusion.bench.INPUTS`` pairs in turn (the rule's duplicate checks branch on the data); the peer, whose runs take
up to seconds, is timed on the first pair.
"""

from __future__ import annotations

import time

import numpy as np

from fusion import compiled
from fusion.belief import bitset, rules
from fusion.belief.mass import MassFunction
from fusion.bench import INPUTS, BenchRow, best_seconds, timed_in_turn

__all__ = ["bench_combination", "frozenset_dempster", "FRAME_SIZES", "FOCAL_SETS", "FLOOR_TARGET"]

FRAME_SIZES = (10, 100, 1_000, 10_000, 100_000, 1_000_000)
FOCAL_SETS = 32
FLOOR_TARGET = 3.0
"""From 100,000 cells up, Dempster's rule within this many times its floor (our target)."""
PEER_BUDGET_S = 3.0
"""The peer is timed several times while one run of it stays under this (its cost grows with the cells in each set)."""
PEER_CELLS = 100_000
"""Largest frame the peer runs on: on a million cells its sets alone would take about 1.5 GB."""


def frozenset_dempster(f1: dict, f2: dict) -> dict:
    """Dempster's rule by its definition (Shafer 1976): m(A) ∝ Σ_{B∩C=A} m1(B) m2(C), A ≠ ∅."""
    out: dict = {}
    for b, x in f1.items():
        for c, y in f2.items():
            a = b & c
            out[a] = out.get(a, 0.0) + x * y
    conflict = out.pop(frozenset(), 0.0)
    return {a: v / (1.0 - conflict) for a, v in out.items()}


def _random_masses(n: int, rng: np.random.Generator, as_frozensets: bool) -> tuple[MassFunction, dict | None]:
    masks = rng.random((FOCAL_SETS, n), dtype=np.float32) < 0.5
    masks[np.arange(FOCAL_SETS), rng.integers(0, n, FOCAL_SETS)] = True  # no empty focal set
    weights = rng.random(FOCAL_SETS)
    weights /= weights.sum()
    if not as_frozensets or n > PEER_CELLS:
        return MassFunction(n, bitset.pack_masks(masks), weights), None
    as_sets: dict = {}
    for row, w in zip(masks, weights):
        key = frozenset(np.flatnonzero(row).tolist())
        as_sets[key] = as_sets.get(key, 0.0) + float(w)
    return MassFunction(n, bitset.pack_masks(masks), weights), as_sets


def bench_combination(repeats: int = 5, seed: int = 0, sizes=FRAME_SIZES) -> list[BenchRow]:
    """One row per frame size: Dempster's rule on pairs of mass functions taken in turn, ``repeats`` rounds."""
    rng = np.random.default_rng(seed)
    compiled.kernels()  # loaded, as a run's grid filters leave them: small frames use them only then (rules.py)
    rows = []
    for n in sizes:
        pairs = [(_random_masses(n, rng, i == 0), _random_masses(n, rng, i == 0)) for i in range(INPUTS)]
        sets = [(m1.sets, m2.sets) for (m1, _), (m2, _) in pairs]
        floor = timed_in_turn(lambda i, sets=sets: sets[i][0][:, None, :] & sets[i][1][None, :, :], repeats)
        ours = timed_in_turn(lambda i, pairs=pairs: rules.dempster(pairs[i][0][0], pairs[i][1][0]), repeats)
        (m1, f1), (m2, f2) = pairs[0]
        first_s = best_seconds(lambda m1=m1, m2=m2: rules.dempster(m1, m2), repeats)
        note = f"{FOCAL_SETS} × {FOCAL_SETS} focal sets; {_peer_note(f1, f2, first_s, repeats)}"
        if n >= 100_000:
            note += f"; target ≤ {FLOOR_TARGET:g}× floor"
        rows.append(
            BenchRow.timed(f"frame of {n:,} cells", "mass functions", "Dempster's rule", ours, floor, None, note)
        )
    return rows


def _peer_note(f1: dict | None, f2: dict | None, ours_s: float, repeats: int) -> str:
    if f1 is None or f2 is None:
        return f"frozenset peer not run above {PEER_CELLS:,} cells (memory)"
    start = time.process_time()
    frozenset_dempster(f1, f2)
    once = time.process_time() - start
    if once > PEER_BUDGET_S:
        return f"frozenset peer {once * 1e3:,.0f} ms (one run) = {once / ours_s:,.0f}× ours"
    peer_s = min(once, best_seconds(lambda: frozenset_dempster(f1, f2), max(1, min(repeats, int(1.0 / once)))))
    verdict = "ours faster" if ours_s < peer_s else "ours NOT faster"
    return f"frozenset peer {peer_s * 1e3:,.3g} ms = {peer_s / ours_s:,.3g}× ours on the first pair ({verdict})"
