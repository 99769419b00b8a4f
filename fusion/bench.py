"""Benchmark of the back ends: each step's time as a ratio to a floor measured in the same run.

Machines differ and are noisy, so absolute times mean little; a ratio to the
cheapest possible pass over the same data, measured seconds apart on the same
machine, says how much overhead the back end adds.

- Bayes floor: one numpy multiply-and-normalise pass over the belief array.
- Evidential floor: the contour filter is dense, so the same multiply-and-normalise pass;
  for the focal-set filter (rules that do not multiply contours), the bare bitwise AND of
  every belief focal set's words with every evidence focal set's words.

Each figure is the fastest of ``repeats`` runs after one warm-up run: on a shared machine
the minimum is the least disturbed measurement (the convention of Python's ``timeit``), and
floor and operation are treated alike.  Peak memory
of a step is measured with ``tracemalloc`` (numpy reports its buffers to it) and
given in belief copies (float64 belief for Bayes, packed focal sets for mass functions).
"""

from __future__ import annotations

import math
import time
import tracemalloc
from dataclasses import asdict, dataclass

import numpy as np

from fusion.backends import BACKENDS
from fusion.backends.bayes import HistogramFilter
from fusion.backends.evidential import MassFilter
from fusion.belief.mass import MassFunction
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor

__all__ = ["BenchRow", "run_bench", "bench_localizer", "best_seconds", "SIZES"]

SIZES = ((100, 100, 36), (240, 160, 36))
RESOLUTION_M = 0.25
BELIEF_FOCAL_SETS = 32
EVIDENCE_LEVELS = 4


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

    def as_dict(self) -> dict:
        return asdict(self)


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


def _peak_bytes(fn, setup=None) -> int:
    if setup is not None:
        setup()
    tracemalloc.start()
    tracemalloc.reset_peak()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def _blob_contour(grid: PoseGrid, rng: np.random.Generator, centre=None, width_m: float = 6.0) -> np.ndarray:
    """A smooth bump over the site (a plausible reading's contour), max 1."""
    cx, cy = centre if centre is not None else (rng.uniform(0, grid.width_m), rng.uniform(0, grid.height_m))
    xs, ys = grid.x_centres(), grid.y_centres()
    plane = np.exp(-(((xs[None, :] - cx) ** 2 + (ys[:, None] - cy) ** 2) / (2 * width_m**2)))
    heading = 0.5 + 0.5 * np.cos(grid.heading_centres() - rng.uniform(0, 2 * math.pi))
    cube = heading[:, None, None] * plane[None]
    return (cube / cube.max()).reshape(-1)


def _belief_with_focal_sets(grid: PoseGrid, rng: np.random.Generator, k: int) -> MassFunction:
    """A normal mass function with ``k`` focal sets: nested levels of a few bumps (what a filter holds)."""
    focal: dict = {}
    while len(focal) < k:
        contour = _blob_contour(grid, rng)
        for level in np.linspace(0.2, 0.95, 8):
            if len(focal) < k:
                focal[tuple(np.flatnonzero(contour >= level + rng.uniform(0, 0.01)))] = 1.0
    total = float(len(focal))
    return MassFunction.from_focal(grid.n_cells, {cells: w / total for cells, w in focal.items()})


def run_bench(sizes=SIZES, repeats: int = 9, seed: int = 0, progress=None) -> list[BenchRow]:
    rows: list[BenchRow] = []
    for nx, ny, headings in sizes:
        grid = PoseGrid(nx * RESOLUTION_M, ny * RESOLUTION_M, RESOLUTION_M, headings)
        label = f"{nx}×{ny}×{headings} ({grid.n_cells:,} cells)"
        rng = np.random.default_rng(seed)
        rows += _bench_bayes(grid, label, rng, repeats)
        if progress:
            progress(label, "bayes")
        rows += _bench_contour(grid, label, rng, repeats)
        if progress:
            progress(label, "evidential")
        rows += _bench_focal(grid, label, rng, repeats)
        if progress:
            progress(label, FOCAL)
    return rows


FOCAL = "evidential, focal sets"
"""Back-end label of the focal-set filter's rows (the rules that do not multiply contours)."""


def _multiply_floor(n: int, rng, repeats: int) -> float:
    """One numpy multiply-and-normalise pass over a belief of ``n`` cells: the floor of a dense update."""
    p = rng.random(n)
    p /= p.sum()
    lik = rng.random(n)
    buf = np.empty_like(p)

    def floor():
        np.multiply(p, lik, out=buf)
        buf.__imul__(1.0 / buf.sum())

    return best_seconds(floor, repeats)


def _bench_contour(grid: PoseGrid, label: str, rng, repeats: int) -> list[BenchRow]:
    """The contour filter (Dempster's rule and the conjunctive rule): dense like the Bayes side, so the
    same multiply-and-normalise floor."""
    from fusion.backends.contour import ContourFilter

    floor_s = _multiply_floor(grid.n_cells, rng, repeats)
    evidence = Evidence("bench", _blob_contour(grid, rng, width_m=8.0), reliability=0.9)
    start = Evidence("bench", _blob_contour(grid, rng, width_m=4.0), reliability=0.9)
    odometry = OdometrySensor("bench-odometry", grid, OdometryParams())
    motion = odometry.motion(OdometryReading(0.3, 0.05, 4.0))
    rows = []
    for kind in ("probabilistic", "bounded"):
        filt = ContourFilter(grid, motion=kind, report_region=False)

        def fresh(filt=filt):
            filt.reset(np.ones(grid.n_cells))
            filt.update(start)

        if kind == "probabilistic":
            update_s = best_seconds(lambda filt=filt: filt.update(evidence), repeats, setup=fresh)
            note = "K of the reading (consonant reading, level bins) + product + renormalise"
            rows.append(
                BenchRow(label, "evidential", "update", update_s * 1e3, floor_s * 1e3, update_s / floor_s, None, note)
            )
        predict_s = best_seconds(lambda filt=filt: filt.predict(motion), repeats, setup=fresh)
        what = "odometry kernel convolved, as Bayes" if kind == "probabilistic" else "running maximum over the bound"
        rows.append(
            BenchRow(
                label,
                "evidential",
                f"predict ({kind})",
                predict_s * 1e3,
                floor_s * 1e3,
                predict_s / floor_s,
                None,
                what,
            )
        )
    return rows


def _bench_bayes(grid: PoseGrid, label: str, rng, repeats: int) -> list[BenchRow]:
    n = grid.n_cells
    likelihood = 0.05 + _blob_contour(grid, rng)
    evidence = Evidence("bench", likelihood / likelihood.max(), reliability=1.0)
    _ = evidence.likelihood  # built outside the timed region, as a sensor model would
    belief_bytes = n * 8
    p = rng.random(n)
    p /= p.sum()
    buf = np.empty(n)

    def floor():
        np.multiply(p, evidence.likelihood, out=buf)
        buf.__imul__(1.0 / buf.sum())

    floor_s = best_seconds(floor, repeats)
    filt = HistogramFilter(grid, report_region=False)
    with_region = HistogramFilter(grid, report_region=True)
    filt.reset(p)
    with_region.reset(p)

    def fresh(f=filt):
        """The belief set back to ``p`` in the filter's own buffers, as a run's filter steps on from its last
        belief: fresh arrays would add their page faults (about 0.6 ms here, measured) to every figure."""
        f.belief.move(lambda _, out: np.copyto(out, p))

    update_s = best_seconds(lambda: filt.update(evidence), repeats, setup=fresh)
    update_peak = _peak_bytes(lambda: filt.update(evidence), setup=fresh)
    region_s = best_seconds(lambda: with_region.update(evidence), repeats, setup=lambda: fresh(with_region))
    copy_s = best_seconds(lambda: np.copyto(buf, p), repeats)
    odometry = OdometrySensor("bench-odometry", grid, OdometryParams())
    motion = odometry.motion(OdometryReading(0.3, 0.05, 4.0))
    predict_s = best_seconds(lambda: filt.predict(motion), repeats, setup=fresh)
    predict_peak = _peak_bytes(lambda: filt.predict(motion), setup=fresh)
    rows = (
        ("update", update_s, floor_s, update_peak / belief_bytes, "target ≤ 3× floor"),
        (
            "update + region size",
            region_s,
            floor_s,
            None,
            "the 95% region counted as a run reports it; target ≤ 2× floor",
        ),
        ("predict", predict_s, copy_s, predict_peak / belief_bytes, "floor: a memory copy of the belief; target ≤ 6×"),
    )
    return [BenchRow(label, "bayes", op, t * 1e3, f * 1e3, t / f, peak, note) for op, t, f, peak, note in rows]


def _bench_focal(grid: PoseGrid, label: str, rng, repeats: int) -> list[BenchRow]:
    """The focal-set filter of the rules that do not multiply contours (Yager, Dubois–Prade, PCR5, …)."""
    belief = _belief_with_focal_sets(grid, rng, BELIEF_FOCAL_SETS)
    evidence = Evidence(
        "bench",
        _blob_contour(grid, rng, centre=(grid.width_m / 2, grid.height_m / 2), width_m=8.0),
        reliability=1.0,
        levels=EVIDENCE_LEVELS,
    )
    e = evidence.masses  # built outside the timed region, as a sensor model would
    belief_bytes = belief.sets.nbytes

    def floor():
        return belief.sets[:, None, :] & e.sets[None, :, :]

    floor_s = best_seconds(floor, repeats)
    # The combination kernel alone (the floor comparison): the reading's mass function as given,
    # focal sets beyond the cap merged into their union.
    filt = MassFilter(grid, max_focal=BELIEF_FOCAL_SETS, report_region=False, refine_evidence=False, merge="union")
    as_run = MassFilter(grid, max_focal=BELIEF_FOCAL_SETS, report_region=False)

    def fresh():
        filt.reset(belief)

    update_s = best_seconds(lambda: filt.update(evidence), repeats, setup=fresh)
    update_peak = _peak_bytes(lambda: filt.update(evidence), setup=fresh)
    full_s = best_seconds(lambda: as_run.update(evidence), repeats, setup=lambda: as_run.reset(belief))
    odometry = OdometrySensor("bench-odometry", grid, OdometryParams())
    motion = odometry.motion(OdometryReading(0.3, 0.05, 4.0))
    predict_s = best_seconds(lambda: filt.predict(motion), repeats, setup=fresh)
    predict_peak = _peak_bytes(lambda: filt.predict(motion), setup=fresh)

    def step():
        filt.predict(motion)
        filt.update(evidence)

    step_s = best_seconds(step, repeats, setup=fresh)
    sets = f"{len(belief)} focal sets × {len(e)} evidence levels"
    rows = (
        ("update", update_s, update_peak / belief_bytes, f"{sets}; target ≤ 3× floor"),
        (
            "update as run",
            full_s,
            None,
            "reading conditioned on the belief, nearest-set merging (the filter's defaults)",
        ),
        ("predict", predict_s, predict_peak / belief_bytes, "set-valued motion (move + dilate)"),
        ("step", step_s, None, f"predict + update: {1 / step_s:.1f} steps/s on one core (10 Hz needs ≥ 10)"),
    )
    return [BenchRow(label, FOCAL, op, t * 1e3, floor_s * 1e3, t / floor_s, peak, note) for op, t, peak, note in rows]


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


def grid_floor(grid) -> float:
    """Seconds of the multiply-and-normalise floor on ``grid`` (the Bayes update's least work), fastest of 9."""
    return _multiply_floor(grid.n_cells, np.random.default_rng(0), 9)
