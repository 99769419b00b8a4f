"""Whether the compiled loops (``fusion.compiled``) pay for themselves: each loop's time beside its numpy twin's
on the same input, and the one-time cost of a process that uses them (importing numba and loading the loops
from the on-disk cache), with the number of calls after which the saving has paid that cost back."""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np

from fusion import compiled
from fusion.bench import BenchRow, best_seconds

__all__ = ["bench_kernels"]

_START = """
import time, numpy as np
start = time.perf_counter()
from fusion import compiled, motion
from fusion.belief import bitset
loops = compiled.kernels()
from fusion.sensors.odometry import Motion
m = Motion(dx=np.zeros(2), dy=np.zeros(2), turn=0.0, sigma=0.5, sigma_turn=0.5, bound=0, bound_turn=0,
           reliability=1.0, slip=0, slip_turn=0)
motion.predict_density(np.ones((2, 3, 4)), m)
words = np.ones((2, 3), dtype=np.uint64)
out = np.empty((2, 2, 3), np.uint64), np.empty((2, 2), np.uint64), np.empty((2, 2), bool)
loops.pair_sets(words, words, bitset.multipliers(3), False, *out)
print(time.perf_counter() - start)
"""


def _start_up_seconds(repeats: int = 3) -> float:
    """Wall seconds a fresh process spends getting the loops ready (numba imported, machine code loaded from the
    cache; the first run fills the cache and is not counted), fastest of ``repeats``."""
    times = []
    for i in range(repeats + 1):
        done = subprocess.run([sys.executable, "-c", _START], capture_output=True, text=True, check=True)
        if i:
            times.append(float(done.stdout.strip().splitlines()[-1]))
    return min(times)


def bench_kernels(grid, repeats: int = 9, seed: int = 0) -> list[BenchRow]:
    """Rows of the compiled loops on ``grid`` (the demo case's): time beside the numpy twin, and the start-up."""
    from fusion import motion
    from fusion.belief import bitset
    from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor

    choice = compiled.choice()
    if not choice.compiled:
        return [BenchRow("compiled loops", "all", "in use", 0.0, 0.0, math.nan, None, f"no: {choice.why}")]
    loops = compiled.kernels()
    rng = np.random.default_rng(seed)
    belief = rng.random(grid.shape)
    m = OdometrySensor("bench-odometry", grid, OdometryParams()).motion(OdometryReading(0.3, 0.05, 4.0))
    across, along = motion._tap_table(m.dx, m.sigma), motion._tap_table(m.dy, m.sigma)
    turn = motion._turn_taps(m.turn, m.sigma_turn, grid.headings)
    numpy_predict = best_seconds(lambda: motion._predict_numpy(belief, across, along, turn), repeats)
    compiled_predict = best_seconds(lambda: motion.predict_density(belief, m), repeats)
    words = bitset.n_words(100_000)
    a = rng.integers(0, 2**63, size=(32, words), dtype=np.uint64)
    b = rng.integers(0, 2**63, size=(32, words), dtype=np.uint64)
    rows_out, fps, empty = np.empty((32, 32, words), np.uint64), np.empty((32, 32), np.uint64), np.empty((32, 32), bool)
    numpy_pairs = best_seconds(lambda: bitset.fingerprint(np.bitwise_and(a[:, None], b[None], out=rows_out)), repeats)
    mult = bitset.multipliers(words)
    compiled_pairs = best_seconds(lambda: loops.pair_sets(a, b, mult, False, rows_out, fps, empty), repeats)
    start = _start_up_seconds()
    label = f"compiled loops ({choice.why})"

    def row(what, fast, slow, note):
        saved = slow - fast
        pays = f"pays back its start-up after {math.ceil(start / saved):,} calls" if saved > 0 else "never pays back"
        return BenchRow(label, "all", what, fast * 1e3, slow * 1e3, fast / slow, None, f"{note}; {pays}")

    return [
        row("predict", compiled_predict, numpy_predict, f"floor: the numpy code, {grid.n_cells:,} cells"),
        row("pair sets", compiled_pairs, numpy_pairs, "floor: numpy AND + fingerprint, 32 × 32 sets of 100,000 cells"),
        BenchRow(
            label, "all", "start-up", start * 1e3, 0.0, math.nan, None, "numba imported, loops loaded from its cache"
        ),
    ]
