"""The evidential back end for the rules that do not multiply contours (Yager, Dubois–Prade, PCR5,
Murphy's averaging, the disjunctive rule): a mass function over pose cells with explicit focal sets.

These rules send conflict to unions of sets or to the whole frame, so the belief cannot be kept as a
contour (``fusion.backends.contour`` holds Dempster's rule and the unnormalised conjunctive rule
exactly).  The approximation used here, documented and measured: after every prediction and update
the focal sets beyond ``max_focal`` are merged into supersets (``reduce_focal_sets``, an outer
approximation: no cell loses plausibility), and each ``StepReport`` carries the mass so moved.
Prediction moves every focal set and dilates it by the odometry's error bound (set-valued motion,
``fusion.motion.move_sets``); the bound follows the distance and turn travelled through a residual
box (``SubCellMotion``), so it does not depend on how the odometry is cut into records.
The conflict K of every update is m(∅) of the unnormalised conjunctive combination of the
(normalised) belief with the evidence.
"""

from __future__ import annotations

import copy
import time

import numpy as np

from fusion.backends import BACKENDS
from fusion.backends.base import (
    NO_OPINION,
    REGION_LEVEL,
    TOTAL_CONFLICT,
    BeliefHealth,
    PoseEstimate,
    SecondOpinion,
    StepReport,
    estimate_pose,
    free_cells,
)
from fusion.backends.contour import CORE_SHARE
from fusion.belief import bitset, rules
from fusion.belief.mass import MERGE_STRATEGIES, FocalAccumulator, MassFunction
from fusion.conflict import jousselme_distance, pignistic_disagreement, support_conflict
from fusion.errors import FrameMismatchError, RuleError, TotalConflictError
from fusion.grid import PoseGrid
from fusion.motion import SlicedSets, SubCellMotion, move_sets, predict_sets
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import Motion

__all__ = ["MassFilter", "FILTER_RULES"]

FILTER_RULES = BACKENDS["evidential"].rules
# Built for the rules the contour filter cannot hold; it also runs Dempster's and the conjunctive rule, with no
# cap, as the exact reference of the fidelity rows of ``fusion bench``.
# Rules that normalise conflict away and so cannot absorb a totally conflicting reading.
_NORMALISING = ("dempster", "murphy")


class MassFilter:
    name = "evidential"

    def __init__(
        self,
        grid: PoseGrid,
        free: np.ndarray | None = None,
        *,
        rule: str = "dempster",
        max_focal: int = 32,
        report_region: bool = True,
        refine_evidence: bool = True,
        merge: str = "nearest",
    ):
        if rule not in FILTER_RULES:
            raise RuleError(
                f"unknown combination rule {rule!r} for the evidential back end; choose one of: "
                f"{', '.join(FILTER_RULES)}"
            )
        if isinstance(max_focal, bool) or not isinstance(max_focal, int) or max_focal < 1:
            raise RuleError(f"max_focal must be a whole number ≥ 1, got {max_focal!r}")
        self.grid, self.rule, self.max_focal, self.report_region = grid, rule, max_focal, report_region
        self.refine_evidence = refine_evidence
        if merge not in MERGE_STRATEGIES:
            raise RuleError(f"unknown merge strategy {merge!r}; choose one of: {', '.join(MERGE_STRATEGIES)}")
        self.merge = merge
        free_mask = free_cells(grid, free)
        self._free_words = bitset.pack_masks(free_mask)[0]
        self.belief = MassFunction.categorical(grid.n_cells, np.flatnonzero(free_mask))
        self._layout = SlicedSets(grid) if isinstance(grid, PoseGrid) else None
        self._residual = SubCellMotion(grid.headings)
        self._distribution, self._distribution_of = None, None
        self.motion_lost = 0.0  # mass whose focal sets moved wholly off free space at the last prediction

    def fork(self) -> MassFilter:
        """A filter on the same grid and map with its own belief and motion state (for a trial replay)."""
        other = copy.copy(self)
        other._residual = copy.deepcopy(self._residual)
        return other

    def reset(self, prior) -> None:
        """Start from ignorance over the cells where ``prior`` > 0 (or from a given ``MassFunction``)."""
        self._residual.reset()
        if isinstance(prior, MassFunction):
            if prior.n != self.grid.n_cells:
                raise FrameMismatchError(f"the prior is over {prior.n} cells, the grid has {self.grid.n_cells}")
            self.belief = prior
            return
        prior = np.asarray(prior).reshape(-1)
        if prior.shape != (self.grid.n_cells,):
            raise FrameMismatchError(f"the prior has {prior.size} cells, the grid {self.grid.n_cells}")
        words = bitset.pack_masks(prior > 0)[0] & self._free_words
        self.belief = MassFunction._trusted(self.grid.n_cells, words[None, :].copy(), np.ones(1))

    def snapshot(self) -> MassFunction:
        return self.belief

    def restore(self, snapshot: MassFunction) -> None:
        self.reset(snapshot)

    # ----------------------------------------------------------------- prediction
    def predict(self, motion: Motion) -> None:
        m = self.belief
        n = self.grid.n_cells
        empty = m.cardinalities == 0
        sets = m.sets[~empty]
        masses = m.masses[~empty]
        acc = FocalAccumulator(n)
        lost = 0.0
        offsets = self._residual.advance(motion, motion.bound_cells, motion.bound_bins)
        variants = [(move_sets(sets, self.grid, *offsets, layout=self._layout), masses * motion.reliability)]
        if motion.reliability < 1.0:  # wheel slip: the move is only known within the slip bound
            slipped = predict_sets(
                sets, self.grid, motion, bound=motion.slip, bound_turn=motion.slip_turn, layout=self._layout
            )
            variants.append((slipped, masses * (1.0 - motion.reliability)))
        for moved, w in variants:
            words = moved & self._free_words
            gone = ~words.any(axis=1)
            lost += float(w[gone].sum())
            acc.add(words[~gone], w[~gone], owned=True)
        if empty.any():
            acc.add(m.sets[empty], m.masses[empty])
        self.motion_lost = lost
        if lost >= TOTAL_CONFLICT:
            return  # everything moved into walls: keep the belief; the next update will show the conflict
        out = MassFunction.collected(acc)
        if lost > 0:
            out = MassFunction._trusted(n, out.sets.copy(), out.masses / out.masses.sum())
        self.belief = rules.reduce_focal_sets(out, self.max_focal, self.merge).mass_function

    # ----------------------------------------------------------------- update
    def update(self, evidence: Evidence) -> StepReport:
        if evidence.n != self.grid.n_cells:
            raise FrameMismatchError(
                f"evidence from {evidence.sensor!r} covers {evidence.n} cells, the grid has {self.grid.n_cells}"
            )
        start = time.perf_counter()
        # Every rule combines the normalised belief, so K is the conflict of this reading alone.
        belief = self.belief if self.belief.is_normal else _drop_conflict(self.belief)
        if self.rule in ("dempster", "conjunctive", "yager"):
            k_outside = 0.0
            if self.refine_evidence and evidence.form == "consonant":
                e, k_outside = self._refined(evidence, belief)
            else:
                e = evidence.masses
            # One pass: conjunctive combination and the focal-set cap (the ranking of non-empty sets is
            # the same before and after normalisation, so the cap may come first).
            reduction = rules.conjunctive_reduced(belief, e, self.max_focal, self.merge)
            k_inside = reduction.mass_function.conflict
            k = 1.0 - (1.0 - k_outside) * (1.0 - k_inside)
            rejected = k >= TOTAL_CONFLICT and self.rule == "dempster"
            if k_outside > 0 and self.rule != "dempster" and k < TOTAL_CONFLICT:
                reduction = reduction._replace(mass_function=_with_conflict(reduction.mass_function, k))
            moved = (
                reduction.mass_moved / (1.0 - k_inside)
                if self.rule == "dempster" and not rejected
                else reduction.mass_moved
            )
        else:
            e = evidence.masses
            k = rules.conflict_mass(belief, e)
            rejected = k >= TOTAL_CONFLICT and self.rule in _NORMALISING
            reduction = (
                None
                if rejected
                else rules.reduce_focal_sets(rules.combine(belief, e, rule=self.rule), self.max_focal, self.merge)
            )
            moved = 0.0 if rejected else reduction.mass_moved
        if not rejected:
            self.belief = self._finish(reduction.mass_function)
        seconds = time.perf_counter() - start
        return StepReport(
            self.name,
            evidence.sensor,
            seconds,
            self.region_cells() if self.report_region else 0,
            conflict=k,
            focal_sets=len(self.belief),
            mass_moved=moved,
            rejected=rejected,
        )

    def _refined(self, evidence: Evidence, belief: MassFunction) -> tuple[MassFunction, float]:
        """The reading's mass function conditioned on the cells the belief still allows, and the conflict
        that conditioning removed.

        For consonant evidence with contour c and reliability r, and a belief whose focal sets all lie
        in U: combining with the evidence equals combining with the evidence conditioned on U (Dempster's
        rule is associative and the belief already implies U).  That conditioned evidence is consonant
        with contour c/max_U c, discounted with r' = r·m/(r·m + 1 − r), m = max_U c, and the
        conditioning carries the conflict r·(1 − m).  Quantising *after* conditioning spends the
        evidence's levels on the poses still in question instead of on the whole site.
        """
        nonempty = belief.cardinalities > 0
        if not nonempty.any():
            return evidence.masses, 0.0
        support = bitset.unpack(np.bitwise_or.reduce(belief.sets[nonempty], axis=0), belief.n)
        inside = np.where(support, evidence.contour, 0.0)
        top = float(inside.max())
        r = evidence.reliability
        if top <= 0.0:
            if r >= 1.0:
                return MassFunction.from_contour(inside), 0.0  # all mass on ∅: total conflict
            return MassFunction.vacuous(belief.n), r
        # (1 − r) added whole: (r·m + 1) − r rounds, and for r = 1 gave r' a hair over 1, which discount refuses
        r_cond = r * top / (r * top + (1.0 - r))
        masses = rules.discount(
            MassFunction.from_contour(inside / top, levels=evidence.levels, spacing=evidence.spacing), r_cond
        )
        return masses, r * (1.0 - top)

    def _finish(self, joint: MassFunction) -> MassFunction:
        if self.rule == "dempster":
            return joint.normalised()
        if self.rule == "yager":
            return _conflict_to_free(joint, self._free_words)
        return joint  # conjunctive: this step's conflict stays visible as m(∅) until the next update

    # ----------------------------------------------------------------- queries
    def region_cells(self, level: float = REGION_LEVEL) -> int:
        """Cells in the union of the most massive focal sets that together hold ``level`` of the belief."""
        m = self.belief
        nonempty = np.flatnonzero(m.cardinalities > 0)
        if len(nonempty) == 0:
            return 0
        order = nonempty[np.argsort(-m.masses[nonempty], kind="stable")]
        cum = np.cumsum(m.masses[order])
        top = int(np.searchsorted(cum, level * cum[-1] * (1 - 1e-12))) + 1
        union = np.bitwise_or.reduce(m.sets[order[:top]], axis=0)
        return int(bitset.cardinality(union))

    # ----------------------------------------------------------------- conflict, scored on this belief
    def reading_conflict(self, snapshot: MassFunction, evidence: Evidence) -> float:
        """Dempster's K between the normalised snapshot and the reading's mass function."""
        return rules.conflict_mass(_drop_conflict(snapshot), evidence.masses)

    def second_opinion(self, snapshot, evidence: Evidence, k: float, conflict_k: float, clear_level: float):
        """(pignistic disagreement when K > ``conflict_k``, conflict with the belief's core when K is
        neither clear nor above it); see ``ContourFilter.second_opinion``."""
        if k > conflict_k:
            return SecondOpinion(disagreement=pignistic_disagreement(_pignistic(snapshot), evidence.masses.pignistic()))
        if k >= clear_level:
            return SecondOpinion(core=support_conflict(_pignistic(snapshot), evidence, CORE_SHARE))
        return NO_OPINION

    def joint_conflict(self, snapshot: MassFunction, readings) -> float:
        """1 − Π (1 − K_i) of absorbing the readings one after another (focal sets capped as in a run)."""
        m, keep = _drop_conflict(snapshot), 1.0
        for _, e in readings:
            red = rules.conjunctive_reduced(m, e.masses, self.max_focal)
            k = red.mass_function.conflict
            keep *= 1.0 - k
            if k >= 1.0:
                return 1.0
            m = red.mass_function.normalised()
        return 1.0 - keep

    def overlay(self) -> None:
        return None  # the belief map shows the whole belief

    def distance(self, before: MassFunction, after: MassFunction) -> float:
        return jousselme_distance(before, after)

    def health(self) -> BeliefHealth:
        masses = self.belief.masses
        return BeliefHealth(float(masses.sum()), float(masses.min()), len(masses), self.max_focal + 1, "mass")

    def distribution(self) -> np.ndarray:
        """Pignistic probability of the belief; the belief is immutable, so it is computed once per belief
        (the pose estimate, the monitor and the live view all ask for it in the same tick)."""
        if self._distribution_of is not self.belief:
            try:
                p = self.belief.pignistic()
            except TotalConflictError:  # all mass on ∅ (conjunctive rule after total conflict): no information
                free = bitset.unpack(self._free_words, self.grid.n_cells).astype(np.float64)
                p = free / free.sum()
            p.flags.writeable = False
            self._distribution, self._distribution_of = p, self.belief
        return self._distribution

    def pose_estimate(self) -> PoseEstimate:
        return estimate_pose(self.grid, self.distribution())


def _with_conflict(m: MassFunction, k: float) -> MassFunction:
    """``m`` with its non-empty masses scaled so that m(∅) = k."""
    empty = m.cardinalities == 0
    acc = FocalAccumulator(m.n)
    acc.add(m.sets[~empty], m.masses[~empty] * (1.0 - k) / max(m.masses[~empty].sum(), 1e-300))
    acc.add(np.zeros((1, m.sets.shape[1]), dtype=bitset.WORD), [k])
    return MassFunction.collected(acc)


def _pignistic(m: MassFunction) -> np.ndarray:
    try:
        return m.pignistic()
    except TotalConflictError:  # all mass on the empty set: no opinion left
        return np.full(m.n, 1.0 / m.n)


def _drop_conflict(m: MassFunction) -> MassFunction:
    try:
        return m.normalised()
    except TotalConflictError:
        return m


def _conflict_to_free(joint: MassFunction, free_words: np.ndarray) -> MassFunction:
    """Yager's rule on a site: the conflict goes to the whole of free space (the frame the robot can be in)."""
    empty = joint.cardinalities == 0
    if not empty.any():
        return joint
    acc = FocalAccumulator(joint.n)
    acc.add(joint.sets[~empty], joint.masses[~empty])
    acc.add(free_words[None, :], [joint.masses[empty].sum()])
    return MassFunction.collected(acc)
