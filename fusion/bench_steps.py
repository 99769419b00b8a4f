"""The per-tick rows of ``fusion bench`` on a case, each back end on the same ticks of its simulation.

- ``bench_backend_steps``: the back ends' own cost per tick: predict by the tick's odometry, then update with each
  of its readings, the readings encoded (and their likelihoods formed) just before, outside the timing: encoding is
  shared by every back end and timed with the whole step by ``bench_localizer``.  Each tick is encoded afresh for
  each back end, so none of them finds arrays another made (holding 200 ticks of encoded readings would take
  1.6 GB on the depot, and the first back end would pay their page faults).  Each back end runs the same ticks
  from the same start.
- ``bench_localizer``: the whole ``Localizer.step`` (encoding, predict, updates, figures, policy, estimate).

Both figures are CPU time (``time.process_time``), mean and 95th percentile over the ticks, beside the case
grid's multiply-and-normalise floor measured in the same run."""

from __future__ import annotations

import time

import numpy as np

from fusion.backends import BACKENDS
from fusion.bench import BenchRow, grid_floor

__all__ = ["bench_backend_steps", "bench_localizer"]


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
    floor_s = grid_floor(grid)
    rows = []
    label = f"{case.name} ({grid.n_cells:,} cells)"
    for name in BACKENDS:
        loc = Localizer.from_case(case, name)
        first = run[0].truth
        loc.start_at(first.x_m, first.y_m, first.heading_deg, covariance=case.run.start_covariance)
        f = loc.filter
        times = []
        for tick in run:
            motion, evidence = _encoded(sensors, tick)
            start = time.process_time()
            if motion is not None:
                f.predict(motion)
            for e in evidence:
                f.update(e)
            times.append(time.process_time() - start)
        # The first tick pays one-time costs (the Gaussian's signed distance field, scipy's first import).
        mean, p95 = float(np.mean(times[1:])), float(np.percentile(times[1:], 95))
        note = f"predict + update per tick, {len(times) - 1} ticks after the first; p95 {p95 * 1e3:.2f} ms"
        if hasattr(f, "count"):
            note += f"; {f.count:,} particles at the end"
        rows.append(BenchRow(label, name, "back-end step", mean * 1e3, floor_s * 1e3, mean / floor_s, None, note))
    return rows


def _encoded(sensors, tick):
    """The tick's motion (its odometry records composed) and its readings' evidence, likelihoods formed."""
    from fusion.sensors.odometry import Travel

    travel = None
    for o in tick.observations:
        if o.moves:
            travel = (travel or Travel()).then(o.reading)
    motion = None if travel is None else sensors.odometry.motion(travel.reading, travel)
    evidence = [sensors.encode(o) for o in tick.observations if not o.moves]
    for e in evidence:
        e.likelihood  # noqa: B018 (formed here, outside the timing)
    return motion, evidence


def bench_localizer(case_path, ticks: int = 40) -> list[BenchRow]:
    """Latency of ``Localizer.step`` (encode the readings, predict, update, figures, policy, estimate)
    per tick of a case, as a ratio to the Bayes floor on the case's grid."""
    from fusion.io.case import load_case
    from fusion.localizer import Localizer
    from fusion.simulate import simulate

    case = load_case(case_path)
    grid = case.site.grid(case.headings)
    floor_s = grid_floor(grid)
    run = simulate(case)[:ticks]
    rows = []
    for backend in BACKENDS:
        loc = Localizer.from_case(case, backend)
        first = run[0].truth
        loc.start_at(first.x_m, first.y_m, first.heading_deg, covariance=case.run.start_covariance)
        times = []
        for tick in run:
            odometry = next(o for o in tick.observations if o.moves)
            readings = [o for o in tick.observations if not o.moves]
            start = time.process_time()
            loc.step(odometry, readings)
            times.append(time.process_time() - start)
        mean = float(np.mean(times[1:]))
        label = f"{case.name} ({grid.n_cells:,} cells)"
        rows.append(
            BenchRow(
                label,
                backend,
                "Localizer.step",
                mean * 1e3,
                floor_s * 1e3,
                mean / floor_s,
                None,
                f"mean of {len(times) - 1} ticks; p95 {np.percentile(times[1:], 95) * 1e3:.0f} ms",
            )
        )
    return rows
