"""Odometry: a move forward/left in the robot's frame and a turn, with noise growing with distance.

Translation noise σ_t = a · distance + floor, turn noise σ_r = b · distance + c · |turn| + floor
(the usual odometry error model, noise proportional to distance travelled, Thrun,
Burgard & Fox 2005, §5.4).  ``Motion`` is what the back ends apply: for every heading
bin the displacement in cells, the turn in heading bins, the noise in cells and
bins, and a bound (``bound_sigmas`` · σ) for the set-valued motion of the mass side.
Reliability r is the chance the odometry is right; with 1 − r the wheels slipped and
the move is only known within ``slip_m`` / ``slip_deg``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fusion.errors import ObservationError
from fusion.grid import PoseGrid
from fusion.sensors.base import check_reliability

__all__ = ["OdometryParams", "OdometryReading", "Motion", "OdometrySensor", "MAX_TURN_DEG"]


@dataclass(frozen=True)
class OdometryParams:
    sigma_per_m: float = 0.05
    turn_sigma_per_m_deg: float = 2.0
    turn_sigma_per_turn: float = 0.05
    floor_m: float = 0.01
    floor_deg: float = 0.5
    bound_sigmas: float = 3.0
    reliability: float = 1.0
    slip_m: float = 0.5
    slip_deg: float = 15.0


@dataclass(frozen=True)
class OdometryReading:
    forward_m: float
    left_m: float = 0.0
    turn_deg: float = 0.0


@dataclass(frozen=True)
class Motion:
    """One odometry step resolved on a grid (all in cells and heading bins)."""

    dx: np.ndarray  # (headings,) displacement along x in cells, for each heading bin
    dy: np.ndarray
    turn: float  # heading bins, may be fractional
    sigma: float  # translation noise in cells
    sigma_turn: float  # heading bins
    bound: int  # cells: set-valued translation error bound, rounded up
    bound_turn: int  # heading bins, rounded up
    reliability: float
    slip: int  # cells, error bound when the wheels slipped
    slip_turn: int
    bound_cells: float = 0.0  # the bounds before rounding up
    bound_bins: float = 0.0


MAX_TURN_DEG = 360.0
"""The largest turn one odometry record may report."""


class OdometrySensor:
    def __init__(self, name: str, grid: PoseGrid, params: OdometryParams = OdometryParams()):
        self.name, self.grid, self.params = name, grid, params
        check_reliability(params.reliability, name)
        for f in (
            "sigma_per_m",
            "turn_sigma_per_m_deg",
            "turn_sigma_per_turn",
            "floor_m",
            "floor_deg",
            "bound_sigmas",
            "slip_m",
            "slip_deg",
        ):
            v = getattr(params, f)
            if not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
                raise ObservationError(f"sensor {name!r}: {f} must be a finite number ≥ 0, got {v!r}")

    def motion(self, reading: OdometryReading) -> Motion:
        fields = {"forward_m": reading.forward_m, "left_m": reading.left_m, "turn_deg": reading.turn_deg}
        for field, v in fields.items():
            if not isinstance(v, (int, float)) or not math.isfinite(v):
                raise ObservationError(f"sensor {self.name!r}: odometry {field} must be a finite number, got {v!r}")
        g, p, res = self.grid, self.params, self.grid.resolution_m
        # One record cannot move the robot off the site or turn it round more than once; such a value
        # is a unit or logging fault, and taken as given it would build a motion kernel of any size.
        diagonal = math.hypot(g.width_m, g.height_m)
        if math.hypot(reading.forward_m, reading.left_m) > diagonal:
            raise ObservationError(
                f"sensor {self.name!r}: odometry moves {math.hypot(reading.forward_m, reading.left_m):.4g} m in one "
                f"record, more than the site's diagonal ({diagonal:.1f} m); check the log's units (metres)"
            )
        if abs(reading.turn_deg) > MAX_TURN_DEG:
            raise ObservationError(
                f"sensor {self.name!r}: odometry turns {reading.turn_deg:.4g}° in one record, more than "
                f"{MAX_TURN_DEG:g}°; check the log's units (degrees)"
            )
        theta = g.heading_centres()
        fwd, left = reading.forward_m, reading.left_m
        dx = (fwd * np.cos(theta) - left * np.sin(theta)) / res
        dy = (fwd * np.sin(theta) + left * np.cos(theta)) / res
        dist = math.hypot(fwd, left)
        sigma_m = p.sigma_per_m * dist + p.floor_m
        sigma_deg = p.turn_sigma_per_m_deg * dist + p.turn_sigma_per_turn * abs(reading.turn_deg) + p.floor_deg
        step_deg = math.degrees(g.heading_step)
        return Motion(
            dx=dx,
            dy=dy,
            turn=reading.turn_deg / step_deg,
            sigma=sigma_m / res,
            sigma_turn=sigma_deg / step_deg,
            bound=int(math.ceil(p.bound_sigmas * sigma_m / res - 1e-9)),
            bound_turn=int(math.ceil(p.bound_sigmas * sigma_deg / step_deg - 1e-9)),
            bound_cells=p.bound_sigmas * sigma_m / res,
            bound_bins=p.bound_sigmas * sigma_deg / step_deg,
            reliability=p.reliability,
            slip=int(math.ceil(p.slip_m / res)),
            slip_turn=int(math.ceil(p.slip_deg / step_deg)),
        )
