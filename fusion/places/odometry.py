"""Odometry on a place graph: records checked as on a pose grid, composed records turned into a ``PlaceMove``.

The error model is the pose grid's (``fusion.sensors.odometry.OdometryParams``): the distance driven has
standard deviation σ_per_m · √(metres driven), the turn the per-metre and per-turn terms.  A graph has no
sideways direction: the distance is the path length of the composed records (signed by the net move, so
a robot reversing moves back), the turn their net turn.
"""

from __future__ import annotations

import math

from fusion.places.frame import PlaceFrame
from fusion.places.moves import PlaceMove
from fusion.sensors.limits import require_valid
from fusion.sensors.odometry import OdometryParams, OdometryReading, Travel, check_reading, noise_of

__all__ = ["PlaceOdometry", "place_odometry"]


class PlaceOdometry:
    def __init__(self, name: str, frame: PlaceFrame, params: OdometryParams | None = None):
        params = OdometryParams() if params is None else params
        self.name, self.frame, self.params = name, frame, params
        require_valid(params, name)
        self.longest_m = float(sum(p.length_m for p in frame.graph.passages))

    def check(self, reading: OdometryReading) -> None:
        check_reading(self.name, reading, self.longest_m, "all the graph's passages together")

    def motion(self, reading: OdometryReading, travelled: Travel | None = None) -> PlaceMove:
        if travelled is None:
            self.check(reading)
            travelled = Travel().then(reading)
        p = self.params
        dist, turned = travelled.path_m, travelled.turned_deg
        sign = -1.0 if reading.forward_m < 0 and abs(reading.forward_m) >= abs(reading.left_m) else 1.0
        sigma_m, sigma_deg = noise_of(p, dist, turned)
        return PlaceMove(
            forward_m=sign * dist,
            turn_rad=math.radians(reading.turn_deg),
            sigma_m=sigma_m,
            sigma_turn_rad=math.radians(sigma_deg),
            reliability=p.reliability,
            slip_m=p.slip_m,
        )


def place_odometry(spec, graph, frame: PlaceFrame) -> PlaceOdometry:
    """The registry's builder (``fusion.sensors.kinds.SensorKind.place_model``)."""
    return PlaceOdometry(spec.name, frame, spec.params)
