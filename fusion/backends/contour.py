"""The evidential back end for the rules that multiply contours: Dempster's rule and the unnormalised
conjunctive rule, exact on the full frame with no cap on focal sets.

The belief is a ``ContourBelief`` (``fusion.belief.contour``): the plausibility of every
cell, dense.  An update multiplies it by the contour of the reading's (discounted)
mass function, r·c + 1 − r; that is what both rules do to the contour, with no
approximation.  Prediction is one of two documented assumptions (``[run] motion``):

- ``probabilistic``: the belief after a move is the average of the belief moved by
  every displacement, weighted by the odometry error model; its contour is the contour
  convolved with the same kernel as the Bayes side (``fusion.motion.predict_on_free``).
  With this motion and the same readings, the plausibility transform equals the Bayes
  posterior (Shafer 1976; Cobb & Shenoy 2006): what then separates the two back ends is
  how conflict is scored and acted on, not where they think the robot is.
- ``bounded``: every pose within the odometry's error bound is possible, and nothing more
  is said (set-valued motion); the contour takes its running maximum over the bound
  (``fusion.motion.dilate_density``).  Sub-cell moves and bounds are carried in a residual
  box (``SubCellMotion``), so the bound grows with the distance travelled, never with the
  number of odometry records.

Outputs that need more than the contour (K of a reading, the pignistic transform, Bel and
Pl of a region, the Jousselme distance) read the belief as the consonant mass function of
its contour; ``fusion bench`` reports their distance from the exact result on a small site.
"""

from __future__ import annotations

import copy
import time

import numpy as np

from fusion import compiled
from fusion.backends.base import (
    NO_OPINION,
    TOTAL_CONFLICT,
    BeliefHealth,
    PoseEstimate,
    SecondOpinion,
    StepReport,
    estimate_pose,
    free_cells,
    region_size,
)
from fusion.belief.contour import ContourBelief, consonant_distance
from fusion.conflict import pignistic_disagreement, support_conflict
from fusion.errors import FrameMismatchError, RuleError
from fusion.grid import PoseGrid
from fusion.motion import MOTION_MODELS, SubCellMotion, bound_offsets, dilate_density, predict_on_free
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import Motion

__all__ = ["ContourFilter", "CONTOUR_RULES", "CORE_SHARE"]

CONTOUR_RULES = ("dempster", "conjunctive")
"""Rules whose effect on the contour is a product (exact here)."""

CORE_SHARE = 0.1
"""The core of an evidential belief: the cells of plausibility ≥ this share of the peak, i.e. the focal set
of the consonant belief that holds 90% of its mass (common practice, no source: one tenth).  The focal-set
filter takes the cells of pignistic probability ≥ this share of the peak instead, its broad focal sets
spreading their mass evenly over their cells."""


class ContourFilter:
    name = "evidential"

    def __init__(
        self,
        grid: PoseGrid,
        free: np.ndarray | None = None,
        *,
        rule: str = "dempster",
        motion: str = "probabilistic",
        report_region: bool = True,
    ):
        if rule not in CONTOUR_RULES:
            raise RuleError(f"the contour filter runs {', '.join(CONTOUR_RULES)}, not {rule!r}")
        if motion not in MOTION_MODELS:
            raise RuleError(f"unknown motion model {motion!r}; choose one of: {', '.join(MOTION_MODELS)}")
        self.grid, self.rule, self.motion, self.report_region = grid, rule, motion, report_region
        self.free = free_cells(grid, free)
        self.belief = ContourBelief.vacuous_on(self.free)
        self._residual = self._motion_state()
        self._chain_of: ContourBelief | None = None  # the snapshot joint_conflict last ran from, and its runs
        self._chain: dict = {}

    def _motion_state(self):
        """What prediction carries from one odometry record to the next (the sub-cell residual box)."""
        return SubCellMotion(self.grid.headings)

    def fork(self) -> ContourFilter:
        other = copy.copy(self)
        other._residual = copy.deepcopy(self._residual)
        other._chain_of, other._chain = None, {}
        return other

    def reset(self, prior) -> None:
        """Start from ignorance over the free cells where ``prior`` > 0."""
        prior = np.asarray(prior).reshape(-1)
        if prior.shape != (self.grid.n_cells,):
            raise FrameMismatchError(f"the prior has {prior.size} cells, the grid {self.grid.n_cells}")
        self._residual.reset()
        self.belief = ContourBelief.vacuous_on((prior > 0) & self.free)

    def snapshot(self) -> ContourBelief:
        return self.belief

    def restore(self, snapshot: ContourBelief) -> None:
        if snapshot.n != self.grid.n_cells:
            raise FrameMismatchError(f"the belief is over {snapshot.n} cells, the grid has {self.grid.n_cells}")
        self._residual.reset()
        self.belief = snapshot

    # ----------------------------------------------------------------- prediction
    def predict(self, motion: Motion) -> None:
        cube = self.belief.contour.reshape(self.grid.shape)
        if self.motion == "probabilistic":
            moved = predict_on_free(cube, motion, self.free)
        else:
            x, y, turn = self._residual.advance(motion, motion.bound_cells, motion.bound_bins)
            moved = dilate_density(cube, x, y, turn)
            if motion.reliability < 1.0:  # with 1 − r the wheels slipped: the move is known within the slip bound
                slipped = dilate_density(cube, *bound_offsets(motion, motion.slip, motion.slip_turn))
                moved = motion.reliability * moved + (1.0 - motion.reliability) * slipped
            moved = moved.reshape(-1) * self.free
        top = float(moved.max())
        if top > 0:  # everything moved into walls: keep the belief; the next update shows the conflict
            self.belief = ContourBelief(moved, self.belief.empty, owned=True, top=top)

    # ----------------------------------------------------------------- update
    def update(self, evidence: Evidence) -> StepReport:
        if evidence.n != self.grid.n_cells:
            raise FrameMismatchError(
                f"evidence from {evidence.sensor!r} covers {evidence.n} cells, the grid has {self.grid.n_cells}"
            )
        start = time.perf_counter()
        k, joint, top = self._combined(self.belief, evidence)
        rejected = joint is None
        if not rejected:
            self.belief = ContourBelief(joint, k if self.rule == "conjunctive" else 0.0, owned=True, top=top)
        seconds = time.perf_counter() - start
        region = region_size(self.distribution()) if self.report_region else 0
        return StepReport(self.name, evidence.sensor, seconds, region, conflict=k, rejected=rejected)

    # ----------------------------------------------------------------- conflict, scored on this belief
    def reading_conflict(self, snapshot: ContourBelief, evidence: Evidence) -> float:
        """K of the reading's mass function with the (normal) consonant belief of ``snapshot``.  A scan of m beams
        is read through its calibrated plausibility (``Evidence.plausibility``): its likelihood ratio alone
        would rule out a correct pose that fits m Gaussian beam errors as a correct pose does."""
        if evidence.form == "bayesian":
            return snapshot.conflict_with(evidence.likelihood, bayesian=True)
        return snapshot.conflict_with(evidence.contour, transform=evidence.plausibility_of)

    def second_opinion(self, snapshot, evidence: Evidence, k: float, conflict_k: float, clear_level: float):
        """Where the policy needs them.  K above ``conflict_k``: the pignistic disagreement (Liu 2006: K alone
        is not conflict).  K neither clear nor above it: the conflict with the belief's core, the cells of
        plausibility ≥ ``CORE_SHARE`` (a belief that absorbed a faulty reading can still be ruled out at its
        core)."""
        if k > conflict_k:
            reading = ContourBelief(np.maximum(evidence.plausibility, 0.0))
            return SecondOpinion(disagreement=pignistic_disagreement(snapshot.pignistic(), reading.pignistic()))
        if k >= clear_level:
            return SecondOpinion(core=support_conflict(snapshot.contour, evidence, CORE_SHARE, top=1.0))
        return NO_OPINION

    def joint_conflict(self, snapshot: ContourBelief, readings) -> float:
        """Conflict of absorbing ``readings`` ((sensor, Evidence) pairs) into ``snapshot`` one after another:
        1 − Π (1 − K_i), each K_i against the belief the earlier ones left.

        Blame asks this of one snapshot for a tick's readings and for each sensor's readings left out, and those
        runs share their beginnings: the beliefs along the way are kept for the last snapshot asked, keyed by the
        readings absorbed (the same objects), and a run starts from the longest beginning already made.  The
        products and K are the same either way, taken in the same order."""
        readings = [e for _, e in readings]
        if self._chain_of is not snapshot:
            self._chain_of, self._chain = snapshot, {}
        start, belief, keep = 0, snapshot, 1.0
        for i in range(len(readings), 0, -1):
            made = self._chain.get(tuple(readings[:i]))
            if made is not None and (made[0] is not None or i == len(readings)):  # a belief to go on from, or done
                start, (belief, keep) = i, made
                break
        for i in range(start, len(readings)):
            k, joint, top = self._combined(belief, readings[i])
            if joint is None:  # total conflict: kept nowhere, so a run through it meets it again and stops the same
                return 1.0
            keep *= 1.0 - k
            # The last reading's product is only asked whether it is all zero: no belief is made of it.
            belief = ContourBelief(joint, owned=True, top=top) if i + 1 < len(readings) else None
            self._chain[tuple(readings[: i + 1])] = (belief, keep)
        return 1.0 - keep

    def _combined(self, belief: ContourBelief, evidence: Evidence) -> tuple[float, np.ndarray | None, float]:
        """(K, the product contour, its maximum) of absorbing one reading; the contour None on total conflict."""
        k = self.reading_conflict(belief, evidence)
        joint, top = _product(belief.contour, evidence)
        return k, (None if k >= TOTAL_CONFLICT or top <= 0.0 else joint), top

    def overlay(self) -> None:
        return None  # the belief map shows the whole belief

    def distance(self, before: ContourBelief, after: ContourBelief) -> float:
        """Jousselme distance between the consonant beliefs (contours rounded up to geometric levels)."""
        return consonant_distance(before, after)

    # ----------------------------------------------------------------- queries
    def distribution(self) -> np.ndarray:
        """The plausibility transform: exact, and equal to the Bayes posterior under the identity above."""
        return self.belief.plausibility_transform()

    def pose_estimate(self) -> PoseEstimate:
        return estimate_pose(self.grid, self.distribution())

    def health(self) -> BeliefHealth:
        c = self.belief.contour
        return BeliefHealth(float(c.max()), float(c.min()), 1, 0, "plausibility")


def _product(contour: np.ndarray, evidence: Evidence) -> tuple[np.ndarray, float]:
    """The contour times the reading's likelihood r·c + (1 − r), and the product's maximum.  The compiled loop forms
    the likelihood cell by cell as ``Evidence.likelihood`` does, so the product is the same to the last bit without
    the likelihood written out, and finds the maximum in the same pass."""
    out = np.empty_like(contour)
    loops = compiled.kernels()
    c = evidence.contour
    if loops is not None and compiled.plain_vector(c) and compiled.plain_vector(contour) and c.shape == contour.shape:
        r = float(evidence.reliability)
        hi = loops.plain_product(contour, c, out) if r == 1.0 else loops.discounted_product(contour, c, r, out)
        if hi >= 0:
            return out, compiled.float_of_bits(hi)
    np.multiply(contour, evidence.likelihood, out=out)
    return out, float(out.max())
