"""What every back end offers, and the records it returns.

A back end holds one belief over the cells of a ``PoseGrid``.  ``predict`` applies
odometry, ``update`` absorbs one reading's ``Evidence`` and returns a
``StepReport``; ``distribution`` gives a probability per cell (the posterior for
Bayes, the pignistic probability for mass functions) so that every tool can treat
every back end alike.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np

from fusion.backends.region import REGION_LEVEL, region_size
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import Motion

__all__ = [
    "Backend",
    "StepReport",
    "PoseEstimate",
    "BeliefHealth",
    "SecondOpinion",
    "Overlay",
    "estimate_pose",
    "region_size",
    "free_cells",
    "REGION_LEVEL",
    "TOTAL_CONFLICT",
]

TOTAL_CONFLICT = 1.0 - 1e-12
"""A conflict K at or above this is total (the rest is rounding): no normalisation can absorb the reading."""


@dataclass(frozen=True)
class StepReport:
    """What one update did.  Conflict figures are filled by the back end that defines them."""

    backend: str
    sensor: str
    seconds: float
    region_cells: int  # cells in the smallest set holding REGION_LEVEL of the distribution
    conflict: float | None = None  # evidential: m(∅) of the unnormalised combination (Dempster's K)
    log_evidence: float | None = None  # Bayesian: log p(z | past), for the reading's likelihood scale
    focal_sets: int | None = None
    mass_moved: float = 0.0  # mass merged into supersets by the focal-set cap
    rejected: bool = False  # total conflict / zero evidence: the belief was left unchanged
    effective_share: float | None = None  # sampling back ends: effective sample size / count after the update
    nis: float | None = None  # Gaussian: normalised innovation squared of the reading against the prediction
    gate: float | None = None  # Gaussian: the χ² value the NIS was tested against (above it: gated out, rejected)
    refused: str | None = None  # why the reading could not be used at all (the decision lists it as rejected)
    note: str | None = None  # a change of the back end's state worth saying (the Gaussian filter's re-seeding)


@dataclass(frozen=True)
class PoseEstimate:
    """Where the robot most likely is.

    ``x_m``, ``y_m``, ``heading_rad`` are the mean of the distribution within ``LOCAL_RADIUS_M``
    of its best cell (a local mean: a distribution over a site is often multimodal, or carries a
    thin layer of ignorance over the whole site, and its global mean then lies between the modes);
    ``mean_x_m``, ``mean_y_m`` are the global mean; ``spread_m`` is the RMS distance of the
    whole distribution from the estimate.  ``plane``: the probability of each position, headings summed, where
    the estimate was made from the distribution over the grid (``estimate_pose``); None otherwise.
    """

    x_m: float
    y_m: float
    heading_rad: float
    best_cell: int
    best_pose: tuple[float, float, float]
    region_cells: int
    spread_m: float
    mean_x_m: float = 0.0
    mean_y_m: float = 0.0
    plane: np.ndarray | None = field(default=None, repr=False, compare=False)


@dataclass(frozen=True)
class SecondOpinion:
    """Figures a back end adds beside a reading's conflict for the policy (``Monitor.disagrees``); None where
    it gives none.  ``disagreement``: must also exceed its threshold for a conflict above ``conflict_k`` to
    count (mass side: the pignistic disagreement, Liu 2006); ``core``: the conflict with the belief's
    likeliest cells, counted when the reading's own conflict is short of ``conflict_k`` yet not clear."""

    disagreement: float | None = None
    core: float | None = None


NO_OPINION = SecondOpinion()


@dataclass(frozen=True)
class Overlay:
    """Points a view draws over a back end's belief map (metres, site frame): its particles, or the outline of
    its Gaussian's 95% ellipse; ``label`` names them in legends."""

    label: str
    points: np.ndarray  # (k, 2): x, y


@dataclass(frozen=True)
class BeliefHealth:
    """The invariants a soak checks on a belief: ``total`` must be 1 (the sum of the probabilities or
    masses, or the contour's maximum), no value below 0, at most ``bound`` parts (focal sets) when
    ``bound`` > 0.  ``what`` names the values in messages."""

    total: float
    lowest: float
    parts: int
    bound: int
    what: str


LOCAL_RADIUS_M = 1.0
"""Radius of the local mean around the best cell (common practice, no source)."""


@runtime_checkable
class Backend(Protocol):
    """Every scheme behind one surface, so the localizer, monitor, soak, compare and inspect never ask
    which back end they hold.  Each back end scores conflict on its own belief."""

    name: str
    grid: PoseGrid

    def reset(self, prior: np.ndarray) -> str | None:
        """Start again from a prior: a probability (or 0/1 mask) per cell; mass side: uniform ignorance over it.
        Returns what the back end wants said about the new belief, if anything (the Gaussian filter: why no
        single Gaussian stands for it); None otherwise."""

    def fork(self) -> Backend:
        """A filter on the same grid and map with its own belief, for a trial replay."""

    def snapshot(self) -> object:
        """The belief as an immutable value (for trials, blame and the move test)."""

    def restore(self, snapshot: object) -> None:
        """Make ``snapshot`` the belief again."""

    def predict(self, motion: Motion) -> None: ...

    def update(self, evidence: Evidence) -> StepReport:
        """Absorb one reading; the report carries ``conflict`` (the reading's K, mass side) or
        ``log_evidence`` (log p(z | past), Bayes side)."""

    def reading_conflict(self, snapshot: object, evidence: Evidence) -> float:
        """How much one reading, as given, conflicts with a belief snapshot, in [0, 1]."""

    def second_opinion(
        self, snapshot: object, evidence: Evidence, k: float, conflict_k: float, clear_level: float
    ) -> SecondOpinion:
        """Further figures the policy weighs beside K."""

    def joint_conflict(self, snapshot: object, readings) -> float:
        """Conflict of absorbing one tick's (sensor, Evidence) readings into the snapshot at once."""

    def distance(self, before: object, after: object) -> float | None:
        """A distance between two snapshots, or None where the back end defines none."""

    def pose_estimate(self) -> PoseEstimate: ...

    def distribution(self) -> np.ndarray:
        """Probability per cell, shape (n_cells,), summing to 1."""

    def health(self) -> BeliefHealth: ...

    def overlay(self) -> Overlay | None:
        """What a view draws over the belief map besides it (particles, an ellipse), or None."""


def free_cells(grid: PoseGrid, free: np.ndarray | None) -> np.ndarray:
    """One bool per cell: the site's free plane ((ny, nx)) repeated over every heading; every cell when None."""
    return np.ones(grid.n_cells, bool) if free is None else grid.broadcast(np.asarray(free, bool))


def estimate_pose(
    grid: PoseGrid, p: np.ndarray, mode_plane: np.ndarray | None = None, plane: np.ndarray | None = None
) -> PoseEstimate:
    """Local mean around the centre of the most probable region, global mean, best cell and spread.

    The most probable region is the set of positions whose probability (summed over headings) ties with
    the largest, to rounding (``TIE``).  Mostly that is one cell.  On a flat plateau (an aisle along
    which the readings cannot tell positions apart, or look-alike places) the tied cells are grouped into
    connected regions, the one holding the most probability wins, and its centre is the tied cell
    nearest its centroid: the estimate sits in the middle of the plateau, never at the end that happens
    to have the lowest cell index.  ``mode_plane``: a (ny, nx) plane to find the most probable region in instead
    of ``p``'s own (a sampled belief's, smoothed); ``plane``: ``p`` summed over headings, where the caller has it."""
    cube = p.reshape(grid.shape)
    plane = cube.sum(axis=0) if plane is None else plane
    xs, ys = grid.x_centres(), grid.y_centres()
    px, py = plane.sum(axis=0), plane.sum(axis=1)
    mean_x, mean_y = float(px @ xs), float(py @ ys)
    iy, ix = _mode_centre(plane if mode_plane is None else mode_plane)
    ih = int(np.argmax(cube[:, iy, ix]))
    best = int(np.ravel_multi_index((ih, iy, ix), grid.shape))
    bx, by, bh = grid.pose_of(best)
    near = (xs[None, :] - bx) ** 2 + (ys[:, None] - by) ** 2 <= LOCAL_RADIUS_M**2
    local = np.where(near, plane, 0.0)
    weight = float(local.sum())
    lx = float(local.sum(axis=0) @ xs) / weight if weight > 0 else bx
    ly = float(local.sum(axis=1) @ ys) / weight if weight > 0 else by
    th = grid.heading_centres()
    rows, cols = np.flatnonzero(near.any(axis=1)), np.flatnonzero(near.any(axis=0))
    box = (slice(None), slice(rows[0], rows[-1] + 1), slice(cols[0], cols[-1] + 1)) if rows.size else np.s_[:, :0, :0]
    ph = (cube[box] * near[box[1:]][None]).sum(axis=(1, 2))  # only the window around the best cell: the rest is 0
    heading = math.atan2(float(ph @ np.sin(th)), float(ph @ np.cos(th))) % (2 * math.pi) if weight > 0 else bh
    dist2 = (xs[None, :] - lx) ** 2 + (ys[:, None] - ly) ** 2
    total = float(plane.sum())
    spread = math.sqrt(max(float((plane * dist2).sum()) / max(total, 1e-300), 0.0))
    region = region_size(p, total=total if total > 0 else None)  # the plane's sum: one pass over the belief fewer
    return PoseEstimate(lx, ly, heading, best, (bx, by, bh), region, spread, mean_x, mean_y, plane)


TIE = 1e-9
"""Squares within this relative share of the densest one count as tied with it (rounding level)."""


def _mode_centre(plane: np.ndarray) -> tuple[int, int]:
    """(row, column) of the most probable cell; among tied cells, the centre of the largest tied region."""
    from scipy import ndimage

    top = float(plane.max())
    ties = plane >= top * (1.0 - TIE) if top > 0 else np.ones(plane.shape, bool)
    if np.count_nonzero(ties) == 1:
        return np.unravel_index(int(np.argmax(ties)), plane.shape)
    labels, count = ndimage.label(ties)
    held = ndimage.sum(plane, labels, index=np.arange(1, count + 1)) if top > 0 else np.bincount(labels.ravel())[1:]
    rows, cols = np.nonzero(labels == 1 + int(np.argmax(held)))
    pick = int(np.argmin((rows - rows.mean()) ** 2 + (cols - cols.mean()) ** 2))
    return int(rows[pick]), int(cols[pick])
