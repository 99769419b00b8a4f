"""The Gaussian back end: an extended Kalman filter over (x, y, heading), with a χ² gate on every reading.

- **Prediction** by the odometry error model (``fusion.sensors.odometry.Motion``): the mean by exact pose
  composition, the covariance by its Jacobian, with the model's translation and heading variances; with wheel
  slip possible (reliability r < 1) the variances are the mixture's, r σ² + (1 − r) (slip / 2)², the same
  slip noise the histogram and particle filters apply.
- **Updates** from the same sensor models, linearised (``fusion.sensors.linearised``): marker range and
  bearing by the marker's id; a door contact that fired as a position in its zone; a scan by Gauss–Newton on
  the signed distance field (``fusion.belief.gaussian``).  A reading whose model gives no linearisation (a
  quiet contact, a camera that saw nothing) is moment-matched on the grid (``fusion.backends.gaussian_grid``).
- **Gate**: a reading whose normalised innovation squared exceeds the χ²_m quantile at ``gate_probability``
  is not absorbed; it is reported rejected and counts as a disagreement for the monitor.  The beams of a scan
  are gated one by one first (a person in a beam is an early return, not a wrong pose); a scan with fewer
  than half of its returns inside their gates is gated out whole (our choice).
- **Discounting**: a reading whose reliability was lowered (a quarantined sensor) enters with its information
  scaled by that share (R divided by it).
- **Re-seeding and start**: ``reset`` is given a probability per cell (a start region, or ignorance).  When the
  most probable mode (``fusion.backends.gaussian_grid.best_mode``) holds at least ``mode_share`` of it and is
  compact (``mode_spread_m``, ``mode_heading_deg``) the belief is that mode's Gaussian.  Otherwise no single
  Gaussian stands for it: the filter follows the readings on the histogram (``HistogramFilter``) until one mode
  holds that share, then collapses to it, and says so in the step's note.

Conflict figures are scored as for the histogram filter on the cells the Gaussian supports (density at least
``SUPPORT_SHARE`` of its peak), so the monitor compares like with like; the NIS and its gate come beside them.
"""

from __future__ import annotations

import copy
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
)
from fusion.backends.bayes import SUPPORT_SHARE, HistogramFilter
from fusion.backends.gaussian_grid import GridView, best_mode
from fusion.backends.tuning import require_settings
from fusion.belief.gaussian import NotLinearisable, PoseGaussian, iterated_update, kalman_update, predicted
from fusion.conflict import conflict_on, joint_conflict_on, support_conflict, support_joint_conflict
from fusion.errors import FrameMismatchError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.odometry import Motion

__all__ = ["GaussianFilter", "GaussianSettings"]

ELLIPSE_CHI2 = 5.991
"""χ²₂ at 0.95 (from memory; scipy.stats.chi2.ppf(0.95, 2) = 5.9915): the 95% ellipse of a position."""
REGION_CHI2 = 7.815
"""χ²₃ at 0.95 (from memory; scipy.stats.chi2.ppf(0.95, 3) = 7.8147): the 95% region of a pose Gaussian."""


@dataclass(frozen=True)
class GaussianSettings:
    gate_probability: float = 0.99  # χ² gate (Bar-Shalom, Li & Kirubarajan 2001 use 0.99 among others)
    iterations: int = 5  # Gauss–Newton steps of an iterated update (scan matching)
    mode_share: float = 0.95  # a histogram collapses to its best mode once it holds this share
    mode_spread_m: float = 1.0  # … and the mode's RMS spread is at most this (our choice)
    mode_heading_deg: float = 30.0  # … and its heading spread at most this (our choice)

    # field -> (low, high, whole, open_low): what ``fusion.backends.tuning`` accepts
    RULES = {
        "gate_probability": (0.0, 1.0 - 1e-12, False, True),
        "iterations": (1, 100, True, False),
        "mode_share": (0.0, 1.0, False, True),
        "mode_spread_m": (0.0, None, False, True),
        "mode_heading_deg": (0.0, 180.0, False, True),
    }

    def joint_problems(self) -> list[tuple[str, str]]:
        return []


@dataclass(frozen=True)
class _State:
    gaussian: PoseGaussian | None  # None while following a histogram
    histogram: np.ndarray | None  # the histogram's probabilities while no Gaussian stands for it


class GaussianFilter:
    name = "gaussian"

    def __init__(
        self,
        grid: PoseGrid,
        free: np.ndarray | None = None,
        *,
        settings: GaussianSettings = GaussianSettings(),
        report_region: bool = True,
    ):
        require_settings(settings, self.name)
        self.grid, self.settings, self.report_region = grid, settings, report_region
        self.free = free_cells(grid, free)
        self.view = GridView(grid, self.free)
        self._histogram = HistogramFilter(grid, free, report_region=False)
        self._gates: dict[int, float] = {}
        self._gate(2)  # scipy.special is imported here, not at the first reading
        self.note: str | None = None
        self._held: np.ndarray | None = None  # the inner histogram filter's belief, as last taken (``_follow``)
        self.reset(self.free.astype(np.float64))

    # ----------------------------------------------------------------- belief
    def reset(self, prior: np.ndarray) -> str | None:
        """Start again from ``prior``; returns, when no single Gaussian stands for it, why (see ``_collapse``)."""
        prior = np.asarray(prior, dtype=np.float64).reshape(-1)
        if prior.shape != (self.grid.n_cells,):
            raise FrameMismatchError(f"the prior has {prior.size} cells, the grid {self.grid.n_cells}")
        self._histogram.reset(prior)
        self._hold()
        self.note = None
        self._collapse(reseeded=True)
        note, self.note = self.note, None
        return note

    def _follow(self, histogram: np.ndarray) -> HistogramFilter:
        """The inner histogram filter holding ``histogram``.  It is restored only when it holds another belief (a
        snapshot was restored, or a Gaussian stood in between): a restore copies and renormalises every cell."""
        if histogram is not self._held:
            self._histogram.restore(histogram)
        return self._histogram

    def _hold(self) -> None:
        """The inner histogram filter's belief becomes this filter's (the histogram is followed)."""
        self._held = self._histogram.snapshot()
        self.state = _State(None, self._held)

    def fork(self) -> GaussianFilter:
        other = copy.copy(self)
        other._histogram = self._histogram.fork()
        return other

    def snapshot(self) -> _State:
        return self.state

    def restore(self, snapshot: _State) -> None:
        self.state = snapshot

    @property
    def gaussian(self) -> PoseGaussian | None:
        """The belief as a Gaussian; None while the filter follows a histogram."""
        return self.state.gaussian

    def _collapse(self, reseeded: bool = False) -> None:
        """Make the histogram's best mode the belief when it stands for it (see the module docstring); the
        note says what happened."""
        cfg, p = self.settings, self.state.histogram
        # Between re-seeds only a mode the filter would collapse to is of use (nothing is said of another).
        mode = best_mode(self.grid, p) if reseeded else best_mode(self.grid, p, cfg.mode_share, cfg.mode_spread_m)
        if mode is None:
            return
        compact = mode.spread_m <= cfg.mode_spread_m and mode.heading_spread_deg <= cfg.mode_heading_deg
        if mode.share >= cfg.mode_share and compact:
            self.state = _State(mode.belief, None)
            if not reseeded:
                self.note = (
                    f"one mode now holds {mode.share:.0%} of the histogram (spread {mode.spread_m:.2f} m, "
                    f"{mode.heading_spread_deg:.0f}°): the Gaussian is re-seeded from it"
                )
        elif reseeded:
            self.note = (
                f"no single Gaussian stands for the re-seeded belief: its best mode holds {mode.share:.0%} with a "
                f"spread of {mode.spread_m:.2f} m and {mode.heading_spread_deg:.0f}° (a Gaussian needs "
                f"{cfg.mode_share:.0%}, ≤ {cfg.mode_spread_m:g} m, ≤ {cfg.mode_heading_deg:g}°); the readings are "
                "followed on the histogram until one mode does"
            )

    # ----------------------------------------------------------------- motion and readings
    def predict(self, motion: Motion) -> None:
        s = self.state
        if s.gaussian is None:
            self._follow(s.histogram).predict(motion)
            self._hold()
            return
        r = motion.reliability
        res, step = self.grid.resolution_m, self.grid.heading_step
        var_xy = r * motion.sigma_m**2 + (1 - r) * (motion.slip * res / 2) ** 2
        var_h = r * motion.sigma_turn_rad**2 + (1 - r) * (motion.slip_turn * step / 2) ** 2
        move = motion.reading
        self.state = _State(
            predicted(s.gaussian, move.forward_m, move.left_m, math.radians(move.turn_deg), var_xy, var_h), None
        )

    def update(self, evidence: Evidence) -> StepReport:
        if evidence.n != self.grid.n_cells:
            raise FrameMismatchError(
                f"evidence from {evidence.sensor!r} covers {evidence.n} cells, the grid has {self.grid.n_cells}"
            )
        start = time.perf_counter()
        if self.state.gaussian is None:
            report = self._follow(self.state.histogram).update(evidence)
            self._hold()
            self._collapse()
            return self._report(evidence, start, log_evidence=report.log_evidence, rejected=report.rejected)
        if evidence.point is None:
            return self._moment_matched(evidence, start)
        try:
            return self._linearised(evidence, start)
        except NotLinearisable as why:
            return self._report(evidence, start, rejected=True, refused=str(why))

    def _linearised(self, evidence: Evidence, start: float) -> StepReport:
        model, g = evidence.point, self.state.gaussian
        weight = min(1.0, evidence.reliability / model.reliability) if model.reliability > 0 else 1.0
        rows = None
        if model.rows_independent:
            rows = self._rows_in_gate(model, g, weight)
            if rows is None:  # the scan's NIS over every beam, to report
                whole = kalman_update(g, model.linearise(g.mean), weight)
                gate = self._gate(whole.dof)
                return self._report(
                    evidence,
                    start,
                    log_evidence=_with_floor(whole.log_fit, evidence),
                    rejected=True,
                    nis=whole.nis,
                    gate=gate,
                )
        if model.iterate:
            out = iterated_update(g, model, rows, weight, self.settings.iterations)
        else:
            out = kalman_update(g, model.linearise(g.mean, rows), weight)
        gate = self._gate(out.dof)
        gated = out.nis > gate
        if not gated:
            self.state = _State(out.belief, None)
        return self._report(
            evidence, start, log_evidence=_with_floor(out.log_fit, evidence), rejected=gated, nis=out.nis, gate=gate
        )

    def _rows_in_gate(self, model, g: PoseGaussian, weight: float) -> np.ndarray | None:
        """The rows (beams) each inside its own χ²₁ gate; None when fewer than half of them are."""
        lin = model.linearise(g.mean)
        h = lin.jacobian
        s = np.einsum("ij,jk,ik->i", h, g.cov, h) + np.diag(lin.noise) / weight
        inside = lin.innovation**2 / s <= self._gate(1)
        if 2 * int(inside.sum()) < len(inside):
            return None
        return np.flatnonzero(inside)

    def _moment_matched(self, evidence: Evidence, start: float) -> StepReport:
        out = self.view.absorbed(self.state.gaussian, evidence.likelihood)
        if out is None:
            return self._report(evidence, start, log_evidence=-math.inf, rejected=True)
        belief, log_z = out
        self.state = _State(belief, None)
        return self._report(evidence, start, log_evidence=log_z)

    def _gate(self, dof: int) -> float:
        if dof not in self._gates:
            # scipy.special's inverse χ² survival function: importing scipy.stats instead cost 2.7 s of CPU on
            # the first reading (measured).
            from scipy.special import chdtri

            self._gates[dof] = float(chdtri(dof, 1.0 - self.settings.gate_probability))
        return self._gates[dof]

    def _report(self, evidence: Evidence, start: float, **figures) -> StepReport:
        seconds = time.perf_counter() - start
        region = self.pose_estimate().region_cells if self.report_region else 0
        note, self.note = self.note, None
        return StepReport(self.name, evidence.sensor, seconds, region, note=note, **figures)

    # ----------------------------------------------------------------- what every back end reports
    def reading_conflict(self, snapshot: _State, evidence: Evidence) -> float:
        """As the histogram filter scores it, on the cells the snapshot supports."""
        if snapshot.gaussian is None:
            return support_conflict(snapshot.histogram, evidence, SUPPORT_SHARE)
        return conflict_on(self.view.support(snapshot.gaussian, SUPPORT_SHARE), evidence)

    def second_opinion(self, snapshot, evidence, k, conflict_k, clear_level) -> SecondOpinion:
        return NO_OPINION

    def joint_conflict(self, snapshot: _State, readings) -> float:
        if snapshot.gaussian is None:
            return support_joint_conflict(snapshot.histogram, readings, SUPPORT_SHARE)
        return joint_conflict_on(self.view.support(snapshot.gaussian, SUPPORT_SHARE), readings)

    def overlay(self) -> Overlay | None:
        """The outline of the 95% ellipse of the position (χ²₂ = 5.991), while the belief is a Gaussian."""
        g = self.state.gaussian
        if g is None:
            return None
        vals, vecs = np.linalg.eigh(g.cov[:2, :2])
        angle = np.linspace(0.0, 2 * math.pi, 72, endpoint=False)
        unit = np.column_stack([np.cos(angle), np.sin(angle)]) * np.sqrt(np.maximum(vals, 0.0) * ELLIPSE_CHI2)
        return Overlay("95% ellipse", g.mean[:2] + unit @ vecs.T)

    def distance(self, before, after) -> None:
        return None

    def distribution(self) -> np.ndarray:
        s = self.state
        return s.histogram if s.gaussian is None else self.view.density(s.gaussian)

    def health(self) -> BeliefHealth:
        s = self.state
        if s.gaussian is None:
            return BeliefHealth(float(s.histogram.sum()), float(s.histogram.min()), 1, 0, "probability")
        low = float(np.linalg.eigvalsh(s.gaussian.cov).min())
        return BeliefHealth(1.0, low, 1, 0, "covariance eigenvalues")

    def pose_estimate(self) -> PoseEstimate:
        s = self.state
        if s.gaussian is None:
            return estimate_pose(self.grid, s.histogram)  # as the histogram filter estimates it
        g, grid = s.gaussian, self.grid
        x = min(max(g.x, grid.x0_m), grid.x0_m + grid.width_m * (1 - 1e-12))
        y = min(max(g.y, grid.y0_m), grid.y0_m + grid.height_m * (1 - 1e-12))
        best = grid.cell_of(x, y, g.heading)
        cells, _, d2 = self.view.cells(g, math.sqrt(REGION_CHI2))
        region = max(1, int(np.count_nonzero(d2 <= REGION_CHI2)))
        spread = math.sqrt(max(float(g.cov[0, 0] + g.cov[1, 1]), 0.0))
        return PoseEstimate(g.x, g.y, g.heading, best, grid.pose_of(best), region, spread, g.x, g.y)


def _with_floor(log_fit: float, evidence: Evidence) -> float:
    """log p(z | past) on the scale every back end reports: log(r · fit + 1 − r), the reading's reliability r
    mixing the linearised fit with an outlier equally likely everywhere (the likelihood r·c + 1 − r of
    ``Evidence``).  Without the floor a gated reading's surprise runs to thousands of nats, and the slow/fast
    evidence ratio of the monitor with it; with it, it is bounded by −log(1 − r), as on the histogram side."""
    r = evidence.reliability
    if r >= 1.0:
        return log_fit
    return float(np.logaddexp(math.log(r) + log_fit, math.log1p(-r)))
