"""The particle back end: Monte Carlo localization with KLD-sampling and random-particle recovery.

A belief is a set of weighted poses (x, y, heading) in continuous space.
- **Prediction** samples each particle's move from the same odometry error model the histogram filter
  convolves with (``fusion.sensors.odometry.Motion``: the reading's displacement turned by the particle's
  heading, Gaussian translation and turn noise of the step's sigmas; with probability 1 − r the wide slip
  noise instead).
- **Update** multiplies each weight by the reading's likelihood (``Evidence.likelihood``, the very values the
  histogram filter multiplies by) at the cell holding the particle; a particle off free space weighs 0.
  ``log_evidence`` is log Σ wᵢ Lᵢ, the particle estimate of p(z | past).
- **Resampling** is the low-variance sampler (Thrun, Burgard & Fox 2005, Probabilistic Robotics, table 4.4),
  run when the effective sample size 1 / Σ wᵢ² falls below half the count (common practice, no source).
- **Sample count** by KLD-sampling (Fox 2003, Adapting the sample size in particle filters through
  KLD-sampling): enough particles that, with probability 1 − δ, the sample-based distribution is within ε
  (Kullback–Leibler) of the true one, given the k histogram bins it occupies:
  n = (k − 1)/(2ε) · (1 − 2/(9(k − 1)) + √(2/(9(k − 1))) z₁₋δ)³, between ``min_particles`` and
  ``max_particles``.  The bins are the pose grid's cells merged 2 × 2 in x and y.  Fox draws particles one at a
  time until n is reached; here the resampled set is drawn at the largest size, in random order, and cut at the
  first prefix whose size reaches the bound for the bins it occupies (the same rule, vectorised).
- **Recovery** as augmented MCL (Thrun, Burgard & Fox 2005, table 8.3): short- and long-term averages of
  p(z | past), w_fast and w_slow; at each resampling each new particle is, with probability
  max(0, 1 − w_fast/w_slow), a random pose on free space instead of a resampled one.

``distribution()`` is the particles' weights summed per cell, so every tool that reads a back end's
probability per cell (estimate, region, conflict figures, maps) reads this one alike.  Seeded: the same seed
and readings give the same particles.
"""

from __future__ import annotations

import copy
import dataclasses
import math
import time
from dataclasses import dataclass

import numpy as np

from fusion.backends.base import (
    NO_OPINION,
    BeliefHealth,
    Overlay,
    PoseEstimate,
    SecondOpinion,
    StepReport,
    estimate_pose,
    free_cells,
    region_size,
)
from fusion.backends.bayes import SUPPORT_SHARE
from fusion.backends.tuning import require_settings
from fusion.conflict import conflict_on, joint_conflict_on, support_conflict, support_joint_conflict
from fusion.errors import FrameMismatchError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import Motion

__all__ = ["ParticleFilter", "ParticleSettings", "kld_bound", "PARTICLE_BYTES"]


PARTICLE_BYTES = 200
"""Memory per particle while a set is resampled: 120 bytes of temporaries (measured with tracemalloc at
100,000 and 400,000 particles) beside the 32 the set holds, with headroom for the prediction's arrays."""
MAX_PARTICLES = 50_000_000
"""Largest particle count accepted at all (10 GB while resampling); a case's memory budget may allow fewer."""


MODE_KERNEL_M = 0.5
"""Standard deviation of the kernel that smooths the particles' density before its mode is taken (our choice:
half the local-mean radius)."""
OVERLAY_POINTS = 2000
"""Most particles a view is given to draw (more only repaint the same characters)."""


@dataclass(frozen=True)
class ParticleSettings:
    min_particles: int = 300
    max_particles: int = 20_000
    kld_error: float = 0.05  # ε (Fox 2003 uses 0.05)
    kld_z: float = 2.326  # z₁₋δ for δ = 0.01 (upper 1% point of the standard normal, from memory)
    slow_rate: float = 0.001  # α_slow: long-term average of p(z | past)
    fast_rate: float = 0.1  # α_fast: short-term average (α_slow ≪ α_fast; values ours)
    bin_cells: int = 2  # KLD bins: grid cells merged this many times in x and y

    MEMORY_FIELD = "max_particles"  # the field a memory budget names
    # field -> (low, high, whole, open_low): what ``fusion.backends.tuning`` accepts
    RULES = {
        "min_particles": (1, MAX_PARTICLES, True, False),
        "max_particles": (1, MAX_PARTICLES, True, False),
        "kld_error": (0.0, 1.0, False, True),
        "kld_z": (0.0, 10.0, False, True),
        "slow_rate": (0.0, 1.0, False, True),
        "fast_rate": (0.0, 1.0, False, True),
        "bin_cells": (1, 64, True, False),
    }

    def joint_problems(self) -> list[tuple[str, str]]:
        out = []
        if self.max_particles < self.min_particles:
            out.append(
                ("max_particles", f"must be at least min_particles ({self.min_particles}), got {self.max_particles}")
            )
        if self.fast_rate <= self.slow_rate:
            out.append(("fast_rate", f"must be greater than slow_rate ({self.slow_rate:g}) for the recovery test"))
        return out

    def memory_bytes(self) -> int:
        """Memory the largest particle set takes while it is resampled (``PARTICLE_BYTES`` each)."""
        return int(self.max_particles) * PARTICLE_BYTES


def kld_bound(k, error: float, z: float):
    """Fox (2003): particles needed for k occupied bins, (k − 1)/(2ε) times the Wilson–Hilferty approximation of
    the χ²ₖ₋₁ quantile over k − 1; 1 for a single bin.  ``k`` may be an array."""
    k = np.asarray(k, dtype=np.float64)
    a = 2.0 / (9.0 * np.maximum(k - 1, 1))
    return np.where(k > 1, (k - 1) / (2.0 * error) * (1.0 - a + np.sqrt(a) * z) ** 3, 1.0)


@dataclass(frozen=True)
class _State:
    poses: np.ndarray  # (n, 3): x m, y m, heading rad; never changed in place
    weights: np.ndarray  # (n,), sum 1
    slow: float
    fast: float
    prior: np.ndarray | None = None  # a reset to ignorance, until the first reading (``_first_reading``)


class ParticleFilter:
    name = "particles"

    def __init__(
        self,
        grid: PoseGrid,
        free: np.ndarray | None = None,
        *,
        settings: ParticleSettings = ParticleSettings(),
        seed: int = 0,
        report_region: bool = True,
    ):
        require_settings(settings, self.name)
        self.grid, self.settings, self.report_region = grid, settings, report_region
        self.free = free_cells(grid, free)
        if not self.free.any():
            raise FrameMismatchError("the site has no free cell for a particle")
        self.rng = np.random.default_rng(seed)
        self.injected = 0  # random poses injected at the last resampling (augmented MCL)
        self.state = self._sampled(self.free.astype(np.float64), settings.max_particles, 0.0, 0.0)

    # ----------------------------------------------------------------- belief
    def reset(self, prior: np.ndarray) -> None:
        prior = np.asarray(prior, dtype=np.float64).reshape(-1)
        if prior.shape != (self.grid.n_cells,):
            raise FrameMismatchError(f"the prior has {prior.size} cells, the grid {self.grid.n_cells}")
        prior = prior * self.free
        drawn = self._sampled(prior, self.settings.max_particles, 0.0, 0.0)
        support = prior[self.free]
        ignorant = support.size > 0 and float(support.min()) == float(support.max())
        # Ignorance over free space stays ignorance under any motion, so it waits for the first reading.
        self.state = dataclasses.replace(drawn, prior=prior) if ignorant else drawn

    def fork(self) -> ParticleFilter:
        other = copy.copy(self)
        other.rng = copy.deepcopy(self.rng)  # the fork draws what the original would; the original is not moved
        return other

    def snapshot(self) -> _State:
        return self.state

    def restore(self, snapshot: _State) -> None:
        self.state = snapshot

    @property
    def count(self) -> int:
        return len(self.state.weights)

    def effective_share(self) -> float:
        """Effective sample size 1 / Σ w² as a share of the particle count (1: all weights equal)."""
        w = self.state.weights
        return float(1.0 / (w @ w) / len(w))

    # ----------------------------------------------------------------- motion and readings
    def predict(self, motion: Motion) -> None:
        g, s = self.grid, self.state
        res, step = g.resolution_m, g.heading_step
        forward, left = motion.dx[0] * res, motion.dy[0] * res  # heading bin 0 is heading 0: the robot-frame move
        n = len(s.weights)
        slipped = self.rng.random(n) >= motion.reliability
        sigma = np.where(slipped, motion.slip / 2 * res, motion.sigma * res)
        sigma_turn = np.where(slipped, motion.slip_turn / 2 * step, motion.sigma_turn * step)
        h = s.poses[:, 2]
        c, sn = np.cos(h), np.sin(h)
        x = s.poses[:, 0] + forward * c - left * sn + self.rng.normal(0.0, 1.0, n) * sigma
        y = s.poses[:, 1] + forward * sn + left * c + self.rng.normal(0.0, 1.0, n) * sigma
        heading = (h + motion.turn * step + self.rng.normal(0.0, 1.0, n) * sigma_turn) % (2 * math.pi)
        poses = np.column_stack([x, y, heading])
        weights = s.weights * self._on_free(poses)
        total = float(weights.sum())
        if total <= 0:  # every particle moved off free space: keep the belief, the monitor will see it
            return
        self.state = _State(poses, weights / total, s.slow, s.fast, s.prior)

    def update(self, evidence: Evidence) -> StepReport:
        if evidence.n != self.grid.n_cells:
            raise FrameMismatchError(
                f"evidence from {evidence.sensor!r} covers {evidence.n} cells, the grid has {self.grid.n_cells}"
            )
        start = time.perf_counter()
        s = self.state
        if s.prior is not None:
            return self._first_reading(evidence, start)
        # A particle off free space already weighs 0 (``predict``; drawn particles are drawn on free cells).
        likelihood = evidence.likelihood[self._cells(s.poses)]
        z = float(s.weights @ likelihood)  # p(z | past), by the particles
        if z <= 0:
            return self._reported(evidence, start, z)
        cfg = self.settings
        slow = z if s.slow == 0 else s.slow + cfg.slow_rate * (z - s.slow)
        fast = z if s.fast == 0 else s.fast + cfg.fast_rate * (z - s.fast)
        weights = s.weights * likelihood / z
        self.state = _State(s.poses, weights, slow, fast)
        share = self.effective_share()  # before resampling: how well the particles covered this reading
        if share < 0.5:
            self._resample()
        return self._reported(evidence, start, z, share)

    def _first_reading(self, evidence: Evidence, start: float) -> StepReport:
        """The first reading after a reset: the particles are drawn from prior × likelihood on the grid (the
        first posterior, sampled directly, as sensor-resetting localization draws poses from the readings,
        Lenser & Veloso 2000), then cut to the KLD count.  Weighting particles drawn from a flat prior would
        leave the true pose to whichever few particles happened to fall near it."""
        prior = self.state.prior
        post = prior * evidence.likelihood
        z = float(post.sum()) / float(prior.sum())
        if z <= 0:
            return self._reported(evidence, start, z)
        drawn = self._sampled(post, self.settings.max_particles, z, z)
        m = self._kld_count(drawn.poses)
        self.state = _State(drawn.poses[:m], np.full(m, 1.0 / m), z, z)
        return self._reported(evidence, start, z, 1.0)

    def _reported(self, evidence: Evidence, start: float, z: float, share: float | None = None) -> StepReport:
        """The update's report: log p(z | past) = log z, or, for a reading no particle (no cell) allows, rejected
        with the belief left as it was."""
        seconds = time.perf_counter() - start
        if z <= 0:
            return StepReport(self.name, evidence.sensor, seconds, 0, log_evidence=-math.inf, rejected=True)
        region = self._region() if self.report_region else 0
        return StepReport(self.name, evidence.sensor, seconds, region, log_evidence=math.log(z), effective_share=share)

    def _resample(self) -> None:
        """Low-variance resampling at the largest count, injection of random poses (augmented MCL), then the
        KLD cut (see the module docstring)."""
        s, cfg = self.state, self.settings
        n = cfg.max_particles
        cum = np.cumsum(s.weights)
        cum[-1] = 1.0
        picks = np.searchsorted(cum, (self.rng.random() + np.arange(n)) / n, side="right")
        poses = s.poses[np.minimum(picks, len(cum) - 1)]
        inject = max(0.0, 1.0 - s.fast / s.slow) if s.slow > 0 else 0.0
        self.injected = 0
        if inject > 0:
            fresh = self.rng.random(n) < inject
            self.injected = int(fresh.sum())
            if fresh.any():
                poses = poses.copy()
                poses[fresh] = self._sampled(self.free.astype(np.float64), int(fresh.sum()), 0, 0).poses
        poses = poses[self.rng.permutation(n)]
        m = self._kld_count(poses)
        self.state = _State(poses[:m], np.full(m, 1.0 / m), s.slow, s.fast)

    def _kld_count(self, poses: np.ndarray) -> int:
        cfg, g = self.settings, self.grid
        b = max(1, cfg.bin_cells)
        ix = ((poses[:, 0] - g.x0_m) / (g.resolution_m * b)).astype(np.int64)
        iy = ((poses[:, 1] - g.y0_m) / (g.resolution_m * b)).astype(np.int64)
        ih = g.heading_bin(poses[:, 2])
        key = (ih * (g.ny // b + 2) + iy) * (g.nx // b + 2) + ix
        _, first = np.unique(key, return_index=True)
        new = np.zeros(len(key), bool)
        new[first] = True
        need = kld_bound(np.cumsum(new), cfg.kld_error, cfg.kld_z)
        enough = np.flatnonzero(np.arange(1, len(key) + 1) >= np.maximum(need, cfg.min_particles))
        return int(enough[0] + 1) if len(enough) else len(key)

    # ----------------------------------------------------------------- poses and cells
    def _inside(self, poses: np.ndarray) -> np.ndarray:
        g = self.grid
        x, y = poses[:, 0] - g.x0_m, poses[:, 1] - g.y0_m
        return (x >= 0) & (x < g.width_m) & (y >= 0) & (y < g.height_m)

    def _cells(self, poses: np.ndarray) -> np.ndarray:
        """The cell of each particle (particles off the site are clipped to its edge; ``_on_free`` weighs them 0)."""
        g = self.grid
        ix = np.clip(((poses[:, 0] - g.x0_m) / g.resolution_m).astype(np.int64), 0, g.nx - 1)
        iy = np.clip(((poses[:, 1] - g.y0_m) / g.resolution_m).astype(np.int64), 0, g.ny - 1)
        return (g.heading_bin(poses[:, 2]) * g.ny + iy) * g.nx + ix

    def _on_free(self, poses: np.ndarray) -> np.ndarray:
        return (self._inside(poses) & self.free[self._cells(poses)]).astype(np.float64)

    def _sampled(self, prior: np.ndarray, n: int, slow: float, fast: float) -> _State:
        """``n`` particles drawn from a probability per cell, spread uniformly inside each drawn cell."""
        total = float(prior.sum())
        if total <= 0:
            raise FrameMismatchError("the prior gives no free cell any probability; particles cannot be drawn")
        cells = self.rng.choice(len(prior), size=n, p=prior / total)
        x, y, h = self.grid.poses_of(cells)
        g = self.grid
        x = x + (self.rng.random(n) - 0.5) * g.resolution_m
        y = y + (self.rng.random(n) - 0.5) * g.resolution_m
        h = (h + (self.rng.random(n) - 0.5) * g.heading_step) % (2 * math.pi)
        return _State(np.column_stack([x, y, h]), np.full(n, 1.0 / n), slow, fast)

    # ----------------------------------------------------------------- what every back end reports
    def distribution(self) -> np.ndarray:
        return self._histogram(self.state)

    def _region(self) -> int:
        return region_size(self.distribution())

    def reading_conflict(self, snapshot: _State, evidence: Evidence) -> float:
        """As the histogram filter scores it (``fusion.conflict.support_conflict``), on the particles' cells."""
        support = self._support(snapshot)
        if support is None:
            return support_conflict(self._histogram(snapshot), evidence, SUPPORT_SHARE)
        return conflict_on(support, evidence)

    def second_opinion(self, snapshot, evidence, k, conflict_k, clear_level) -> SecondOpinion:
        return NO_OPINION

    def joint_conflict(self, snapshot: _State, readings) -> float:
        support = self._support(snapshot)
        if support is None:
            return support_joint_conflict(self._histogram(snapshot), readings, SUPPORT_SHARE)
        return joint_conflict_on(support, readings)

    def _support(self, snapshot: _State) -> np.ndarray | None:
        """``support_cells`` of the histogram, from the cells the particles occupy alone: a cell's weight is summed
        in the particles' order either way (so the same sums, to the last bit), and a cell with no particle has
        weight 0, below the support's share of a positive maximum.  None when no cell has weight (the histogram's
        own rule applies then)."""
        occupied, inverse = np.unique(self._cells(snapshot.poses), return_inverse=True)
        sums = np.bincount(inverse.reshape(-1), weights=snapshot.weights, minlength=len(occupied))
        top = float(sums.max()) if sums.size else 0.0
        return occupied[sums >= SUPPORT_SHARE * top] if top > 0 else None

    def _histogram(self, snapshot: _State) -> np.ndarray:
        """The weights summed per cell: the probability per cell every tool reads."""
        return np.bincount(self._cells(snapshot.poses), weights=snapshot.weights, minlength=self.grid.n_cells)

    def overlay(self) -> Overlay:
        """Up to ``OVERLAY_POINTS`` of the particles (every one when fewer), in their stored order."""
        poses = self.state.poses
        take = poses[:: max(1, len(poses) // OVERLAY_POINTS)]
        return Overlay("particles", take[:, :2])

    def distance(self, before, after) -> None:
        return None

    def health(self) -> BeliefHealth:
        w = self.state.weights
        return BeliefHealth(float(w.sum()), float(w.min()), len(w), self.settings.max_particles, "particle weights")

    def pose_estimate(self) -> PoseEstimate:
        """As every back end's (``estimate_pose``), with the mode found in the particles' density smoothed by a
        Gaussian kernel of ``MODE_KERNEL_M``: a histogram of samples has its highest cell by chance, and a few
        particles stacked in one cell of a wrong aisle would otherwise outvote a wider cloud at the right one."""
        from scipy import ndimage

        p = self.distribution()
        plane = p.reshape(self.grid.shape).sum(axis=0)
        smooth = ndimage.gaussian_filter(plane, MODE_KERNEL_M / self.grid.resolution_m, mode="constant")
        return estimate_pose(self.grid, p, mode_plane=smooth, plane=plane)
