"""The back ends' own cost per tick on a case: predict by the tick's odometry, then update with each of its
readings, the readings encoded beforehand (their encoding is shared by every back end and timed with the
whole step by ``fusion.bench.bench_localizer``).  Each back end runs the same ticks from the same start; the
figure is CPU time (``time.process_time``), mean and 95th percentile over the ticks, beside the case grid's
multiply-and-normalise floor measured in the same run."""

from __future__ import annotations

import time

import numpy as np

from fusion.backends import BACKENDS
from fusion.bench import BenchRow, grid_floor

__all__ = ["bench_backend_steps"]


def bench_backend_steps(case_path, ticks: int = 200) -> list[BenchRow]:
    """One row per back end: predict + update per tick on the first ``ticks`` ticks of the case's simulation."""
    from fusion.io.case import load_case
    from fusion.localizer import Localizer
    from fusion.simulate import simulate

    case = load_case(case_path)
    run = simulate(case)[:ticks]
    probe = Localizer.from_case(case, next(iter(BACKENDS)))
    sensors = probe.sensors
    grid = sensors.grid
    encoded = []
    for tick in run:
        odometry = next((o for o in tick.observations if o.moves), None)
        motion = None if odometry is None else sensors.odometry.motion(odometry.reading)
        encoded.append((motion, [sensors.encode(o) for o in tick.observations if not o.moves]))
    floor_s = grid_floor(grid)
    rows = []
    label = f"{case.name} ({grid.n_cells:,} cells)"
    for name in BACKENDS:
        loc = Localizer.from_case(case, name)
        first = run[0].truth
        loc.start_at(first.x_m, first.y_m, first.heading_deg, covariance=case.run.start_covariance)
        f = loc.filter
        times = []
        for motion, evidence in encoded:
            start = time.process_time()
            if motion is not None:
                f.predict(motion)
            for e in evidence:
                f.update(e)
            times.append(time.process_time() - start)
        mean, p95 = float(np.mean(times)), float(np.percentile(times, 95))
        note = f"predict + update per tick, {len(times)} ticks; p95 {p95 * 1e3:.2f} ms"
        if hasattr(f, "count"):
            note += f"; {f.count:,} particles at the end"
        rows.append(BenchRow(label, name, "back-end step", mean * 1e3, floor_s * 1e3, mean / floor_s, None, note))
    return rows
