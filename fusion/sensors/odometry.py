"""Odometry: a move forward/left in the robot's frame and a turn, with errors that grow with the
distance travelled and the angle turned, never with the number of records.

The error model has two readings, one per kind of motion a back end can apply (the case
chooses, ``[run] motion``):

- probabilistic: the errors of successive stretches are independent, so their *variances* add.
  After travelling d metres and turning θ radians,
  σ_t² = a² · d  and  σ_r² = b² · d + c² · |θ|,
  with a = ``sigma_per_m`` (m after 1 m), b = ``turn_sigma_per_m_deg`` (degrees after 1 m),
  c = ``turn_sigma_per_turn`` (radians after one radian of turning).  A path cut into N records
  has the same total variance for every N (a random walk in distance; the usual odometry error
  model, Thrun, Burgard & Fox 2005, §5.4, with its variances taken per unit travelled);
- bounded-error (set-valued): the error is at most ``bound_sigmas`` · (a · d) metres and
  ``bound_sigmas`` · (b · d + c · |θ|) in heading.  Bounds of successive stretches *add*, so the
  bound of a path is again independent of how it is cut into records.

There is no per-record floor: a record of zero motion adds no error, so a robot standing still
with its odometry logged at 10 Hz keeps the belief it had.  ``Motion`` is what the back ends
apply: for every heading bin the displacement in cells, the turn in heading bins, the noise in
cells and bins and the set-valued bounds.  Reliability r is the chance the odometry is right;
with 1 − r the wheels slipped and the move is only known within ``slip_m`` / ``slip_deg``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fusion.errors import ObservationError
from fusion.grid import PoseGrid
from fusion.sensors.limits import require_valid

__all__ = [
    "split_reading",
    "OdometryParams",
    "OdometryReading",
    "Motion",
    "OdometrySensor",
    "MAX_TURN_DEG",
    "check_reading",
    "noise_of",
    "Travel",
    "moved_pose",
    "check_odometry_step",
]


@dataclass(frozen=True)
class OdometryParams:
    sigma_per_m: float = 0.05
    turn_sigma_per_m_deg: float = 2.0
    turn_sigma_per_turn: float = 0.05
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
    reading: OdometryReading = OdometryReading(0.0)  # the move in metres and degrees, for back ends off the grid
    sigma_m: float = 0.0  # translation noise in metres
    sigma_turn_rad: float = 0.0  # heading noise in radians


_DEG_PER_RAD = math.degrees(1.0)
REMOVED_FIELDS = {
    "floor_m": "odometry noise is now per metre travelled (sigma_per_m), with no per-record floor; remove it",
    "floor_deg": "heading noise is now per metre and per radian turned (turn_sigma_per_m_deg, turn_sigma_per_turn), "
    "with no per-record floor; remove it",
}
"""Fields older case files may hold, with what replaced them (a per-record floor made the error depend on
how finely the odometry was logged)."""

MAX_TURN_DEG = 360.0
"""The largest turn one odometry record may report."""


@dataclass(frozen=True)
class Travel:
    """Odometry records composed into one: the net move, and the path length and turning behind it (the
    errors grow with these, not with the net move: a robot that went 1 m out and back has travelled 2 m)."""

    reading: OdometryReading = OdometryReading(0.0)
    path_m: float = 0.0
    turned_deg: float = 0.0

    def then(self, r: OdometryReading) -> Travel:
        """This travel followed by record ``r`` (exact pose composition, ``moved_pose``)."""
        a = self.reading
        x, y, th = moved_pose(a.forward_m, a.left_m, math.radians(a.turn_deg), r)
        net = OdometryReading(x, y, math.degrees(th))
        return Travel(net, self.path_m + math.hypot(r.forward_m, r.left_m), self.turned_deg + abs(r.turn_deg))


def moved_pose(x: float, y: float, heading_rad: float, r: OdometryReading) -> tuple[float, float, float]:
    """The pose reached from (x, y, heading) by record ``r``: forward/left in the frame at its start, then
    the turn."""
    c, s = math.cos(heading_rad), math.sin(heading_rad)
    return (
        x + c * r.forward_m - s * r.left_m,
        y + s * r.forward_m + c * r.left_m,
        heading_rad + math.radians(r.turn_deg),
    )


def split_reading(r: OdometryReading, share: float) -> tuple[OdometryReading, OdometryReading]:
    """Record ``r`` cut at ``share`` (0–1) of its time: the first part moves ``share`` of its translation
    and turn (constant velocity over the record); the rest is the remaining move seen from where the first
    part ends, so that the two composed (``moved_pose``) give exactly ``r``, and their path lengths and
    turns add up to ``r``'s."""
    share = min(max(share, 0.0), 1.0)
    first = OdometryReading(r.forward_m * share, r.left_m * share, r.turn_deg * share)
    a = math.radians(first.turn_deg)
    c, s = math.cos(a), math.sin(a)
    fx, fy = r.forward_m * (1 - share), r.left_m * (1 - share)
    rest = OdometryReading(c * fx + s * fy, -s * fx + c * fy, r.turn_deg * (1 - share))
    return first, rest


def check_odometry_step(previous_t: float | None, t: float, sensor: str) -> None:
    """Refuse an odometry record whose time is not after the previous record's: each record reports the
    motion since the one before, so two at one time (or going back) mean a duplicated or mis-stamped log."""
    if previous_t is not None and t <= previous_t:
        raise ObservationError(
            f"field t: odometry record of {sensor!r} at t = {t:g} s has a {'zero' if t == previous_t else 'negative'} "
            f"time step after the previous odometry record (t = {previous_t:g} s); each record must report the "
            "motion since an earlier one: drop the duplicate or fix its time stamp"
        )


def noise_of(p: OdometryParams, dist_m: float, turned_deg: float) -> tuple[float, float]:
    """(σ of the distance in metres, σ of the heading in degrees) after driving ``dist_m`` and turning
    ``turned_deg``: variances add along the path."""
    sigma_deg = math.sqrt((p.turn_sigma_per_m_deg**2) * dist_m + (p.turn_sigma_per_turn**2) * turned_deg * _DEG_PER_RAD)
    return p.sigma_per_m * math.sqrt(dist_m), sigma_deg


def check_reading(sensor: str, reading: OdometryReading, longest_m: float, longest: str) -> None:
    """Refuse an odometry record that is not finite, moves farther than ``longest_m`` (``longest`` names it) or
    turns more than ``MAX_TURN_DEG``."""
    fields = {"forward_m": reading.forward_m, "left_m": reading.left_m, "turn_deg": reading.turn_deg}
    for field, v in fields.items():
        if not isinstance(v, (int, float)) or not math.isfinite(v):
            raise ObservationError(f"sensor {sensor!r}: odometry {field} must be a finite number, got {v!r}")
    if math.hypot(reading.forward_m, reading.left_m) > longest_m:
        raise ObservationError(
            f"sensor {sensor!r}: odometry moves {math.hypot(reading.forward_m, reading.left_m):.4g} m in one "
            f"record, more than {longest} ({longest_m:.1f} m); check the log's units (metres)"
        )
    if abs(reading.turn_deg) > MAX_TURN_DEG:
        raise ObservationError(
            f"sensor {sensor!r}: odometry turns {reading.turn_deg:.4g}° in one record, more than "
            f"{MAX_TURN_DEG:g}°; check the log's units (degrees)"
        )


class OdometrySensor:
    def __init__(self, name: str, grid: PoseGrid, params: OdometryParams = OdometryParams()):
        self.name, self.grid, self.params = name, grid, params
        require_valid(params, name)

    def check(self, reading: OdometryReading) -> None:
        """Refuse a record that is not finite, moves farther than the site's diagonal or turns more than
        ``MAX_TURN_DEG``: a unit or logging fault, which taken as given would build a kernel of any size."""
        check_reading(self.name, reading, math.hypot(self.grid.width_m, self.grid.height_m), "the site's diagonal")

    def motion(self, reading: OdometryReading, travelled: Travel | None = None) -> Motion:
        """The move of ``reading`` on the grid; its errors follow ``travelled`` (the path length and the
        turning of the checked records composed into it: their net move is not checked again, since a
        composition may go past one record's limits) or, by default, the reading's own distance and turn."""
        if travelled is None:
            self.check(reading)
        g, p, res = self.grid, self.params, self.grid.resolution_m
        theta = g.heading_centres()
        fwd, left = reading.forward_m, reading.left_m
        dx = (fwd * np.cos(theta) - left * np.sin(theta)) / res
        dy = (fwd * np.sin(theta) + left * np.cos(theta)) / res
        dist = math.hypot(fwd, left) if travelled is None else travelled.path_m
        turned = abs(reading.turn_deg) if travelled is None else travelled.turned_deg
        # Variances add along the path (probabilistic); bounds add along the path (set-valued).
        sigma_m, sigma_deg = noise_of(p, dist, turned)
        bound_m = p.bound_sigmas * p.sigma_per_m * dist
        bound_deg = p.bound_sigmas * (p.turn_sigma_per_m_deg * dist + p.turn_sigma_per_turn * turned)
        step_deg = math.degrees(g.heading_step)
        return Motion(
            dx=dx,
            dy=dy,
            turn=reading.turn_deg / step_deg,
            sigma=sigma_m / res,
            sigma_turn=sigma_deg / step_deg,
            bound=int(math.ceil(bound_m / res - 1e-9)),
            bound_turn=int(math.ceil(bound_deg / step_deg - 1e-9)),
            bound_cells=bound_m / res,
            bound_bins=bound_deg / step_deg,
            reliability=p.reliability,
            slip=int(math.ceil(p.slip_m / res)),
            slip_turn=int(math.ceil(p.slip_deg / step_deg)),
            reading=reading,
            sigma_m=sigma_m,
            sigma_turn_rad=math.radians(sigma_deg),
        )


# ----------------------------------------------------------------------------- the kind
def _record(r: OdometryReading) -> dict:
    return {"forward_m": round(r.forward_m, 5), "left_m": round(r.left_m, 5), "turn_deg": round(r.turn_deg, 4)}


def _from_record(rec: dict, where: str) -> OdometryReading:
    from fusion.io.json_line import number_field

    left = number_field(rec, "left_m", where) if rec.get("left_m") is not None else 0.0
    return OdometryReading(number_field(rec, "forward_m", where), left, number_field(rec, "turn_deg", where))


def simulate_odometry(spec, forward: float, turn: float, t: float, dt: float, rng) -> OdometryReading:
    """The wheels' report of a true move (forward m, turn deg) over (t, t + dt]: noise per the error model;
    drift and a wheel slip (faults)."""
    p = spec.params
    measured_f = forward + rng.normal(0.0, p.sigma_per_m * abs(forward) + 1e-4)
    measured_t = turn + rng.normal(
        0.0, p.turn_sigma_per_m_deg * abs(forward) + p.turn_sigma_per_turn * abs(turn) + 0.05
    )
    for fault in spec.faults:
        if fault.kind == "drift" and fault.active(t):
            measured_f *= float(fault.options.get("scale", 1.0))
            measured_t += float(fault.options.get("turn_deg_per_m", 0.0)) * abs(forward)
        if fault.kind == "slip" and t <= fault.start_s < t + dt:
            measured_f += float(fault.options.get("forward_m", 0.0))
            measured_t += float(fault.options.get("turn_deg", 0.0))
    return OdometryReading(float(measured_f), 0.0, float(measured_t))


def _register() -> None:
    from fusion.sensors.kinds import Calibrator, FaultKind, Option, SensorKind, lazy, register

    drift = FaultKind(
        "drift",
        "heading drift (turn_deg_per_m) and scale error (scale) on every move",
        {"turn_deg_per_m": Option("number", 0.0), "scale": Option("positive", 1.0)},
    )
    slip = FaultKind(
        "slip",
        "one wheel slip at start_s: forward_m and turn_deg added to the true move",
        {"forward_m": Option("number", 0.0), "turn_deg": Option("number", 0.0)},
        instant=True,
    )
    register(
        SensorKind(
            "odometry",
            OdometryParams,
            lambda spec, site, grid: OdometrySensor(spec.name, grid, spec.params),
            _record,
            _from_record,
            simulate_odometry,
            {"drift": drift, "slip": slip},
            motion=True,
            removed_fields=REMOVED_FIELDS,
            place_model=lazy("fusion.places.odometry:place_odometry"),
            # No reliability is derived: the slip model has no counterpart in the fit, so the case's is kept.
            calibrator=Calibrator(
                ("sigma_per_m", "turn_sigma_per_m_deg", "turn_sigma_per_turn"),
                lazy("fusion.calibration.data:collect_odometry"),
                lazy("fusion.calibration.models:fit_odometry"),
            ),
        )
    )


_register()
