"""The Bayesian back end: a histogram filter over the pose grid.

Prediction shifts and blurs each heading slice (``fusion.motion.predict_into``);
an update multiplies by the reading's likelihood and renormalises
(``fusion.belief.posterior.Posterior``).  Cells off free space keep probability 0.
"""

from __future__ import annotations

import copy
import time

import numpy as np

from fusion.backends.base import (
    NO_OPINION,
    BeliefHealth,
    PoseEstimate,
    SecondOpinion,
    StepReport,
    estimate_pose,
    free_cells,
    region_size,
)
from fusion.backends.region import normalise_and_count
from fusion.belief.posterior import Posterior
from fusion.conflict import support_conflict, support_joint_conflict
from fusion.errors import FrameMismatchError, ZeroEvidenceError
from fusion.grid import PoseGrid
from fusion.motion import predict_into
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import Motion

__all__ = ["HistogramFilter", "SUPPORT_SHARE"]

SUPPORT_SHARE = 1e-3
"""Cells with at least this share of the most probable cell's probability count as still possible
(Bayesian conflict figure; common practice, no source)."""


class HistogramFilter:
    name = "bayes"

    def __init__(self, grid: PoseGrid, free: np.ndarray | None = None, *, report_region: bool = True):
        self.grid = grid
        self.free = free_cells(grid, free)
        self.report_region = report_region
        self.belief = Posterior.uniform(grid.n_cells, mask=self.free)

    def reset(self, prior: np.ndarray) -> None:
        prior = np.asarray(prior, dtype=np.float64).reshape(-1)
        if prior.shape != (self.grid.n_cells,):
            raise FrameMismatchError(f"the prior has {prior.size} cells, the grid {self.grid.n_cells}")
        self.belief = Posterior(prior * self.free)

    def fork(self) -> HistogramFilter:
        """A filter on the same grid and map with its own copy of the belief (for a trial replay)."""
        other = copy.copy(self)
        other.belief = self.belief.copy()
        return other

    def snapshot(self) -> np.ndarray:
        """The posterior's probabilities (never changed in place: every step sets a new array)."""
        return self.belief.probabilities

    def restore(self, snapshot: np.ndarray) -> None:
        self.reset(snapshot)

    def predict(self, motion: Motion) -> None:
        shape = self.grid.shape
        try:
            self.belief.move(lambda p, out: predict_into(p.reshape(shape), motion, self.free, out))
        except ZeroEvidenceError:  # every cell moved off free space: keep the belief, the monitor will see it
            pass

    def update(self, evidence: Evidence) -> StepReport:
        if evidence.n != self.grid.n_cells:
            raise FrameMismatchError(
                f"evidence from {evidence.sensor!r} covers {evidence.n} cells, the grid has {self.grid.n_cells}"
            )
        likelihood = evidence.likelihood
        counted: list[int] = []
        normalise = (
            (lambda post, factor: counted.append(normalise_and_count(post, factor))) if self.report_region else None
        )
        start = time.perf_counter()
        try:
            log_z, rejected = self.belief.update(likelihood, normalise), False
        except ZeroEvidenceError:
            log_z, rejected = float("-inf"), True
        seconds = time.perf_counter() - start
        if self.report_region and not counted:  # refused: the belief as it was
            counted.append(region_size(self.belief.probabilities, total=1.0))
        region = counted[0] if counted else 0
        return StepReport(self.name, evidence.sensor, seconds, region, log_evidence=log_z, rejected=rejected)

    # ----------------------------------------------------------------- conflict, scored on this belief
    def reading_conflict(self, snapshot: np.ndarray, evidence: Evidence) -> float:
        """The conflict of conditioning the reading on the cells the posterior still allows (p ≥
        ``SUPPORT_SHARE`` · max p): K = r·(1 − pl), pl the plausibility of the best fit among them
        (``fusion.conflict.fit_plausibility``).  A sharp reading inside a vague belief (information,
        not contradiction) scores 0, unlike 1 − p(z | past)."""
        return support_conflict(snapshot, evidence, SUPPORT_SHARE)

    def second_opinion(self, snapshot, evidence, k, conflict_k, clear_level) -> SecondOpinion:
        return NO_OPINION  # the slow/fast evidence ratio, from ``log_evidence``, is the Bayes side's second figure

    def joint_conflict(self, snapshot: np.ndarray, readings) -> float:
        """The support conflict of the tick's readings at once (``fusion.conflict.support_joint_conflict``)."""
        return support_joint_conflict(snapshot, readings, SUPPORT_SHARE)

    def overlay(self) -> None:
        return None  # the belief map shows the whole belief

    def distance(self, before, after) -> None:
        return None

    def distribution(self) -> np.ndarray:
        return self.belief.probabilities

    def health(self) -> BeliefHealth:
        p = self.belief.probabilities
        return BeliefHealth(float(p.sum()), float(p.min()), 1, 0, "probability")

    def pose_estimate(self) -> PoseEstimate:
        return estimate_pose(self.grid, self.belief.probabilities)
