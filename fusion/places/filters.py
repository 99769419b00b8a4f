"""The histogram filter and the evidential contour filter on a place graph.

Both are the pose grid's filters (``fusion.backends.bayes``, ``fusion.backends.contour``) with the graph's
prediction (``fusion.places.moves``) and estimate: updates, conflict figures, snapshots and health are
theirs unchanged, so the monitor reads a graph run as it reads a metric one.  On the evidential side
the motion is the probabilistic one (the belief averaged over the odometry error model, as on the Bayes
side); with it and reliable Bayesian evidence the plausibility transform equals the Bayes posterior
(Shafer 1976; Cobb & Shenoy 2006), which ``tests/test_places.py`` checks.  Set-valued (bounded) motion on a
graph is not built: a case asking for it is refused.
"""

from __future__ import annotations

import copy
import math

import numpy as np

from fusion.backends.base import PoseEstimate, region_size
from fusion.backends.bayes import HistogramFilter
from fusion.backends.contour import CONTOUR_RULES, ContourFilter
from fusion.belief.contour import ContourBelief
from fusion.errors import RuleError
from fusion.places.frame import PlaceFrame
from fusion.places.moves import PlaceMotion, PlaceMove

__all__ = ["PlaceHistogramFilter", "PlaceContourFilter", "estimate_on_graph", "build_on"]


def estimate_on_graph(frame: PlaceFrame, p: np.ndarray) -> PoseEstimate:
    """The pose estimate of a belief on the graph, drawn on its layout: the most probable cell's position
    and the direction it faces; the spread is the RMS distance on the layout from that position."""
    xy = frame.positions()
    cell = int(np.argmax(p))
    x, y = (float(v) for v in xy[cell])
    bearing = frame.bearings[frame.edge_of[cell]]
    heading = float(bearing % (2 * math.pi)) if np.isfinite(bearing) else 0.0
    spread = math.sqrt(max(float(p @ ((xy[:, 0] - x) ** 2 + (xy[:, 1] - y) ** 2)), 0.0))
    mean_x, mean_y = (float(v) for v in p @ xy)
    return PoseEstimate(x, y, heading, cell, (x, y, heading), region_size(p), spread, mean_x, mean_y)


class PlaceHistogramFilter(HistogramFilter):
    """The histogram filter over the cells of a ``PlaceFrame``."""

    def __init__(self, frame: PlaceFrame, free=None, *, report_region: bool = True):
        super().__init__(frame, free, report_region=report_region)
        self.moves = PlaceMotion(frame)

    def fork(self) -> PlaceHistogramFilter:
        other = super().fork()
        other.moves = copy.deepcopy(self.moves)
        return other

    def reset(self, prior: np.ndarray) -> None:
        super().reset(prior)
        self.moves.reset()

    def restore(self, snapshot: np.ndarray) -> None:
        HistogramFilter.reset(self, snapshot)  # the odometry's remainders stay: the robot has not moved

    def predict(self, move: PlaceMove) -> None:
        moved = self.moves.apply(self.belief.probabilities, move) * self.free
        if moved.sum() > 0:
            self.belief.set(moved, owned=True)

    def pose_estimate(self) -> PoseEstimate:
        return estimate_on_graph(self.grid, self.belief.probabilities)


class PlaceContourFilter(ContourFilter):
    """The evidential contour filter (Dempster's or the unnormalised conjunctive rule) over a ``PlaceFrame``."""

    def __init__(
        self,
        frame: PlaceFrame,
        free=None,
        *,
        rule: str = "dempster",
        motion: str = "probabilistic",
        report_region: bool = True,
    ):
        if motion != "probabilistic":
            raise RuleError(
                f"motion {motion!r} is not built on a place graph: the evidential filter there moves its belief "
                'by the odometry error model; set [run] motion = "probabilistic"'
            )
        super().__init__(frame, free, rule=rule, motion=motion, report_region=report_region)

    def _motion_state(self) -> PlaceMotion:
        return PlaceMotion(self.grid)

    def restore(self, snapshot: ContourBelief) -> None:
        residual = self._residual
        super().restore(snapshot)
        self._residual = residual  # the odometry's remainders stay: the robot has not moved

    def predict(self, move: PlaceMove) -> None:
        moved = self._residual.apply(self.belief.contour, move) * self.free
        if moved.max() > 0:
            self.belief = ContourBelief(moved, self.belief.empty, owned=True)

    def pose_estimate(self) -> PoseEstimate:
        return estimate_on_graph(self.grid, self.distribution())


def build_on(
    name: str, frame: PlaceFrame, *, rule: str = "dempster", motion: str = "probabilistic", report_region: bool = True
):
    """The filter called ``name`` on a place graph: "bayes" or "evidential" (the families built there)."""
    if name == "bayes":
        return PlaceHistogramFilter(frame, report_region=report_region)
    if name == "evidential":
        if rule not in CONTOUR_RULES:
            raise RuleError(
                f"the evidential filter on a place graph runs {' and '.join(CONTOUR_RULES)}, not {rule!r}: the rules "
                "that keep focal sets are not built on graphs"
            )
        return PlaceContourFilter(frame, rule=rule, motion=motion, report_region=report_region)
    raise RuleError(
        f"the {name!r} back end does not run on a place graph; the graph runs the 'bayes' and 'evidential' back ends"
    )
