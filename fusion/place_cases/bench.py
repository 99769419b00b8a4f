"""The cost of a step on a large place graph, for ``fusion bench``: predict + update per tick, each back end.

The graph is generated, not a site: ``places`` places on a square lattice 8 m apart, each lattice edge a
passage with probability 3/4 and a length of 3–15 m (drawn from the seed), three places in ten with a door.
The drive: 0.25 m a tick (a courier at 1 m/s, ticks of 0.25 s) with the odometry's noise, a 90° turn in four
standing ticks every 40 ticks, and a door reading each tick.  CPU time (``time.process_time``), mean and 95th
percentile over the ticks, beside the multiply-and-normalise floor on the same number of cells."""

from __future__ import annotations

import math
import time

import numpy as np

from fusion.bench import BenchRow, grid_floor
from fusion.places.frame import PlaceFrame
from fusion.places.graph import PlaceGraph

__all__ = ["lattice_graph", "bench_graph_steps"]


def lattice_graph(places: int = 1000, seed: int = 0) -> PlaceGraph:
    rng = np.random.default_rng(seed)
    side = math.ceil(math.sqrt(places))
    names = [f"p{k}" for k in range(places)]
    passages = []
    for k in range(places):
        i, j = divmod(k, side)
        for other in (k + 1 if j + 1 < side else None, k + side):
            if other is not None and other < places and rng.random() < 0.75:
                passages.append((names[k], names[other], float(rng.integers(3, 16))))
    features = tuple(("door",) if rng.random() < 0.3 else () for _ in names)
    at = tuple((8.0 * (k % side), 8.0 * (k // side)) for k in range(places))
    return PlaceGraph(tuple(names), tuple(passages), features, (), at)


def bench_graph_steps(places: int = 1000, ticks: int = 400, seed: int = 0) -> list[BenchRow]:
    from fusion.places.filters import build_on
    from fusion.places.moves import PlaceMove
    from fusion.places.sensors import FeatureDetector

    frame = PlaceFrame(lattice_graph(places, seed), 1.0)
    detector = FeatureDetector("door", frame, feature="door", hit_rate=0.85, false_alarm_rate=0.05)
    rng = np.random.default_rng(seed)
    readings = [detector.encode(bool(s)) for s in rng.random(ticks) < 0.2]
    for e in readings:
        e.likelihood  # noqa: B018 (formed here, outside the timing)
    moves = [
        PlaceMove(0.0, math.radians(22.5), 0.0, 0.01) if k % 40 >= 36 else PlaceMove(0.25, 0.0, 0.05 * 0.5)
        for k in range(ticks)
    ]

    class _Cells:
        n_cells = frame.n_cells

    floor_s = grid_floor(_Cells)
    rows = []
    for name in ("bayes", "evidential"):
        f = build_on(name, frame, report_region=False)
        times = []
        for move, e in zip(moves, readings):
            start = time.process_time()
            f.predict(move)
            f.update(e)
            times.append(time.process_time() - start)
        mean, p95 = float(np.mean(times[1:])), float(np.percentile(times[1:], 95))
        note = f"predict + update per tick, {ticks - 1} ticks after the first; p95 {p95 * 1e3:.2f} ms; turns included"
        label = f"place graph, {places:,} places ({frame.n_cells:,} cells at 1 m)"
        rows.append(BenchRow(label, name, "graph step", mean * 1e3, floor_s * 1e3, mean / floor_s, None, note))
    return rows
