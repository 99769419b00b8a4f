"""The grid rows of ``fusion bench``: each back end's update and prediction on synthetic beliefs of two grid sizes,
beside its floor, every figure on ``fusion.bench.INPUTS`` inputs made from the seed and taken in turn.

- Bayes and the contour filter: the floor is one numpy multiply-and-normalise pass over the belief; Bayes predict's
  is a memory copy of the belief.
- The focal-set filter (the rules that do not multiply contours): the bare bitwise AND of every belief focal set's
  words with every evidence focal set's words.
"""

from __future__ import annotations

import math

import numpy as np

from fusion.backends.bayes import HistogramFilter
from fusion.backends.evidential import MassFilter
from fusion.belief.mass import MassFunction
from fusion.bench import INPUTS, BenchRow, Timing, multiply_floor, peak_bytes, timed_in_turn
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import OdometryParams, OdometryReading, OdometrySensor

__all__ = ["run_bench", "SIZES", "FOCAL"]

SIZES = ((100, 100, 36), (240, 160, 36))
RESOLUTION_M = 0.25
BELIEF_FOCAL_SETS = 32
EVIDENCE_LEVELS = 4
FOCAL = "evidential, focal sets"
"""Back-end label of the focal-set filter's rows (the rules that do not multiply contours)."""


def run_bench(sizes=SIZES, repeats: int = 5, seed: int = 0, progress=None) -> list[BenchRow]:
    """Every grid row on each size; ``repeats`` rounds over the inputs."""
    rows: list[BenchRow] = []
    for nx, ny, headings in sizes:
        grid = PoseGrid(nx * RESOLUTION_M, ny * RESOLUTION_M, RESOLUTION_M, headings)
        label = f"{nx}×{ny}×{headings} ({grid.n_cells:,} cells)"
        rng = np.random.default_rng(seed)
        beliefs = [_random_belief(grid.n_cells, rng) for _ in range(INPUTS)]
        readings = [_reading(grid, rng) for _ in range(INPUTS)]
        floor = multiply_floor(beliefs, [e.likelihood for e in readings], repeats)
        rows += _bench_bayes(grid, label, beliefs, readings, floor, repeats)
        if progress:
            progress(label, "bayes")
        rows += _bench_contour(grid, label, rng, floor, repeats)
        if progress:
            progress(label, "evidential")
        rows += _bench_focal(grid, label, rng, repeats)
        if progress:
            progress(label, FOCAL)
    return rows


def _blob_contour(grid: PoseGrid, rng: np.random.Generator, centre=None, width_m: float = 6.0) -> np.ndarray:
    """A smooth bump over the site (a plausible reading's contour), max 1."""
    cx, cy = centre if centre is not None else (rng.uniform(0, grid.width_m), rng.uniform(0, grid.height_m))
    xs, ys = grid.x_centres(), grid.y_centres()
    plane = np.exp(-(((xs[None, :] - cx) ** 2 + (ys[:, None] - cy) ** 2) / (2 * width_m**2)))
    heading = 0.5 + 0.5 * np.cos(grid.heading_centres() - rng.uniform(0, 2 * math.pi))
    cube = heading[:, None, None] * plane[None]
    return (cube / cube.max()).reshape(-1)


def _random_belief(n: int, rng: np.random.Generator) -> np.ndarray:
    p = rng.random(n)
    return p / p.sum()


def _reading(grid: PoseGrid, rng: np.random.Generator) -> Evidence:
    """A reading's likelihood: a bump somewhere on the site over a floor of 0.05, formed here, outside any timing,
    as a sensor model forms it before the update."""
    likelihood = 0.05 + _blob_contour(grid, rng)
    evidence = Evidence("bench", likelihood / likelihood.max(), reliability=1.0)
    _ = evidence.likelihood
    return evidence


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


def _bench_move(grid: PoseGrid):
    """The bench's odometry step: 0.3 m forward, 0.05 m left, a 4° turn."""
    return OdometrySensor("bench-odometry", grid, OdometryParams()).motion(OdometryReading(0.3, 0.05, 4.0))


def _bench_bayes(grid, label, beliefs, readings, floor: Timing, rounds: int) -> list[BenchRow]:
    belief_bytes = grid.n_cells * 8
    plain, with_region = HistogramFilter(grid, report_region=False), HistogramFilter(grid, report_region=True)
    plain.reset(beliefs[0])
    with_region.reset(beliefs[0])

    def fresh(f):
        """Input i's belief set back in the filter's own buffers, as a run's filter steps on from its last belief
        (fresh arrays would add their page faults, about 0.6 ms here, measured, to every figure), and its
        likelihood read, as a sensor model has just formed it."""

        def setup(i):
            f.belief.move(lambda _, out: np.copyto(out, beliefs[i]))
            readings[i].likelihood.sum()

        return setup

    update = timed_in_turn(lambda i: plain.update(readings[i]), rounds, setup=fresh(plain))
    update_peak = peak_bytes(lambda: plain.update(readings[0]), setup=lambda: fresh(plain)(0))
    region = timed_in_turn(lambda i: with_region.update(readings[i]), rounds, setup=fresh(with_region))
    move = _bench_move(grid)
    predict = timed_in_turn(lambda i: plain.predict(move), rounds, setup=fresh(plain))
    predict_peak = peak_bytes(lambda: plain.predict(move), setup=lambda: fresh(plain)(0))
    out = np.empty(grid.n_cells)  # the copy: its input read just before, its output one buffer run after run
    copy = timed_in_turn(lambda i: np.copyto(out, beliefs[i]), rounds, setup=lambda i: beliefs[i].sum())
    return [
        BenchRow.timed(label, "bayes", "update", update, floor, update_peak / belief_bytes, "target ≤ 3× floor"),
        BenchRow.timed(
            label,
            "bayes",
            "update + region size",
            region,
            floor,
            None,
            "the 95% region counted as a run reports it; target ≤ 2× floor",
        ),
        BenchRow.timed(
            label,
            "bayes",
            "predict",
            predict,
            copy,
            predict_peak / belief_bytes,
            "floor: a memory copy of the belief; target ≤ 6×",
        ),
    ]


def _bench_contour(grid: PoseGrid, label: str, rng, floor: Timing, rounds: int) -> list[BenchRow]:
    """The contour filter (Dempster's rule and the conjunctive rule): dense like the Bayes side, so the
    same multiply-and-normalise floor."""
    from fusion.backends.contour import ContourFilter

    readings = [Evidence("bench", _blob_contour(grid, rng, width_m=8.0), reliability=0.9) for _ in range(INPUTS)]
    starts = [Evidence("bench", _blob_contour(grid, rng, width_m=4.0), reliability=0.9) for _ in range(INPUTS)]
    move = _bench_move(grid)
    rows = []
    for kind in ("probabilistic", "bounded"):
        filt = ContourFilter(grid, motion=kind, report_region=False)

        def fresh(i, filt=filt):
            filt.reset(np.ones(grid.n_cells))
            filt.update(starts[i])

        if kind == "probabilistic":
            update = timed_in_turn(lambda i, filt=filt: filt.update(readings[i]), rounds, setup=fresh)
            what = "K of the reading (consonant reading, level bins) + product + renormalise"
            rows.append(BenchRow.timed(label, "evidential", "update", update, floor, None, what))
        predict = timed_in_turn(lambda i, filt=filt: filt.predict(move), rounds, setup=fresh)
        what = "odometry kernel convolved, as Bayes" if kind == "probabilistic" else "running maximum over the bound"
        rows.append(BenchRow.timed(label, "evidential", f"predict ({kind})", predict, floor, None, what))
    return rows


def _bench_focal(grid: PoseGrid, label: str, rng, rounds: int) -> list[BenchRow]:
    """The focal-set filter of the rules that do not multiply contours (Yager, Dubois–Prade, PCR5, …)."""
    beliefs, readings = [], []
    for _ in range(INPUTS):
        beliefs.append(_belief_with_focal_sets(grid, rng, BELIEF_FOCAL_SETS))
        centre = (grid.width_m / 2, grid.height_m / 2)
        contour = _blob_contour(grid, rng, centre=centre, width_m=8.0)
        readings.append(Evidence("bench", contour, reliability=1.0, levels=EVIDENCE_LEVELS))
        _ = readings[-1].masses  # built outside the timed region, as a sensor model would
    belief_bytes = beliefs[0].sets.nbytes
    floor = timed_in_turn(lambda i: beliefs[i].sets[:, None, :] & readings[i].masses.sets[None, :, :], rounds)
    # The combination kernel alone (the floor comparison): the reading's mass function as given,
    # focal sets beyond the cap merged into their union.
    filt = MassFilter(grid, max_focal=BELIEF_FOCAL_SETS, report_region=False, refine_evidence=False, merge="union")
    as_run = MassFilter(grid, max_focal=BELIEF_FOCAL_SETS, report_region=False)
    move = _bench_move(grid)

    def step(i):
        filt.predict(move)
        filt.update(readings[i])

    update = timed_in_turn(lambda i: filt.update(readings[i]), rounds, setup=lambda i: filt.reset(beliefs[i]))
    update_peak = peak_bytes(lambda: filt.update(readings[0]), setup=lambda: filt.reset(beliefs[0]))
    full = timed_in_turn(lambda i: as_run.update(readings[i]), rounds, setup=lambda i: as_run.reset(beliefs[i]))
    predict = timed_in_turn(lambda i: filt.predict(move), rounds, setup=lambda i: filt.reset(beliefs[i]))
    predict_peak = peak_bytes(lambda: filt.predict(move), setup=lambda: filt.reset(beliefs[0]))
    stepped = timed_in_turn(step, rounds, setup=lambda i: filt.reset(beliefs[i]))
    sets = f"{len(beliefs[0])} focal sets × {len(readings[0].masses)} evidence levels"
    per_s = 1 / stepped.typical_s
    return [
        BenchRow.timed(label, FOCAL, "update", update, floor, update_peak / belief_bytes, f"{sets}; target ≤ 3× floor"),
        BenchRow.timed(
            label,
            FOCAL,
            "update as run",
            full,
            floor,
            None,
            "reading conditioned on the belief, nearest-set merging (the filter's defaults)",
        ),
        BenchRow.timed(label, FOCAL, "predict", predict, floor, predict_peak / belief_bytes, "set-valued motion"),
        BenchRow.timed(
            label,
            FOCAL,
            "step",
            stepped,
            floor,
            None,
            f"predict + update: {per_s:.1f} steps/s on one core (10 Hz needs ≥ 10)",
        ),
    ]
