"""The measuring core of ``fusion bench``: a row's typed figures, and the timing of an operation beside its floor.

Machines differ and are noisy, so absolute times mean little; a ratio to the cheapest possible pass over the
same data, measured seconds apart on the same machine, says how much overhead an operation adds.

Operations whose work branches on the data are timed on ``INPUTS`` inputs taken in turn (``timed_in_turn``):
a loop that runs one input again and again trains the processor's branch predictor on that input, and an
update then looks faster than it is on a run's readings, which it has never seen.  Each input's fastest run
is the least disturbed measurement on a shared machine (the convention of Python's ``timeit``); the median
over the inputs is the row's figure, and the slowest input is reported beside it.  Floor and operation are
treated alike.  Peak memory of a step is measured with ``tracemalloc`` (numpy reports its buffers to it) and
given in belief copies (float64 belief for Bayes, packed focal sets for mass functions).
"""

from __future__ import annotations

import time
import tracemalloc
from dataclasses import asdict, dataclass

import numpy as np

__all__ = ["BenchRow", "Timing", "best_seconds", "timed_in_turn", "peak_bytes", "multiply_floor", "grid_floor"]

INPUTS = 8
"""Inputs a row takes in turn.  Eight 240×160×36 beliefs and likelihoods fill about 180 MB; the rows measured
last session differed from their one-input figure already at 12 and 30 inputs (docs/benchmark.md)."""


@dataclass(frozen=True)
class Timing:
    """CPU seconds of one operation on inputs taken in turn: the median input's fastest run, the slowest input's."""

    typical_s: float
    slowest_s: float
    inputs: int


@dataclass(frozen=True)
class BenchRow:
    size: str
    backend: str
    operation: str
    best_ms: float
    floor_ms: float
    ratio: float
    peak_copies: float | None
    note: str = ""
    slowest_ratio: float | None = None
    """The slowest input's time over the floor's typical time, where the row took several inputs in turn."""

    def as_dict(self) -> dict:
        return asdict(self)

    @classmethod
    def timed(cls, size, backend, operation, op: Timing, floor: Timing, peak=None, note="") -> BenchRow:
        """A row of an operation and its floor, each timed on the same inputs taken in turn."""
        return cls(
            size,
            backend,
            operation,
            op.typical_s * 1e3,
            floor.typical_s * 1e3,
            op.typical_s / floor.typical_s,
            peak,
            note,
            op.slowest_s / floor.typical_s,
        )


def best_seconds(fn, repeats: int, setup=None) -> float:
    """CPU seconds of ``fn``, the fastest of ``repeats`` runs after one warm-up run (``setup`` before each, untimed)."""
    times = []
    for i in range(repeats + 1):
        if setup is not None:
            setup()
        start = time.process_time()
        fn()
        elapsed = time.process_time() - start
        if i:  # the first run warms caches and the allocator
            times.append(elapsed)
    return min(times)


def timed_in_turn(fn, rounds: int, inputs: int = INPUTS, setup=None) -> Timing:
    """CPU seconds of ``fn(i)`` on the inputs ``i = 0 … inputs − 1`` taken in turn, ``rounds`` times over after one
    warm-up round (``setup(i)`` before each run, untimed): each input's fastest run, then the median over the
    inputs and the largest."""
    fastest = np.full(inputs, np.inf)
    for round_ in range(rounds + 1):
        for i in range(inputs):
            if setup is not None:
                setup(i)
            start = time.process_time()
            fn(i)
            elapsed = time.process_time() - start
            if round_:  # the first round warms caches and the allocator
                fastest[i] = min(fastest[i], elapsed)
    return Timing(float(np.median(fastest)), float(fastest.max()), inputs)


def peak_bytes(fn, setup=None) -> int:
    """The most memory ``fn`` held at once, in bytes, as ``tracemalloc`` sees it (``setup`` first, untraced)."""
    if setup is not None:
        setup()
    tracemalloc.start()
    tracemalloc.reset_peak()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def multiply_floor(beliefs, likelihoods, rounds: int) -> Timing:
    """One numpy multiply-and-normalise pass, belief by likelihood, on each pair in turn: the floor of a dense
    update.  Before each run both inputs are read, as a filter has its belief at hand and has just been handed a
    likelihood (the dense updates' rows do the same); the output goes to one buffer, run after run."""
    out = np.empty_like(beliefs[0])

    def ready(i):
        beliefs[i].sum()
        likelihoods[i].sum()

    def floor(i):
        np.multiply(beliefs[i], likelihoods[i], out=out)
        out.__imul__(1.0 / out.sum())

    return timed_in_turn(floor, rounds, len(beliefs), setup=ready)


def grid_floor(grid, rounds: int = 5, seed: int = 0) -> float:
    """Seconds of the multiply-and-normalise floor on ``grid`` (the Bayes update's least work), on random
    beliefs and likelihoods taken in turn."""
    rng = np.random.default_rng(seed)
    beliefs = [rng.random(grid.n_cells) for _ in range(INPUTS)]
    return multiply_floor(
        [b / b.sum() for b in beliefs], [rng.random(grid.n_cells) for _ in range(INPUTS)], rounds
    ).typical_s
