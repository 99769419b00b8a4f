"""Door contact sensors: a binary reading with a hit rate and a false-alarm rate.

The sensor of a door is *active* when it senses the robot in the door's zone (free
cells within the door's radius on its open side).  p(active | in zone) = hit rate,
p(active | elsewhere) = false-alarm rate; an inactive reading has the complements.
The reading says nothing about heading.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from fusion.errors import ObservationError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.limits import require_valid
from fusion.sensors.linearised import ZonePoint
from fusion.site import SiteMap

__all__ = ["DoorParams", "DoorReading", "DoorSensor"]


@dataclass(frozen=True)
class DoorParams:
    hit_rate: float = 0.95
    false_alarm_rate: float = 0.02
    reliability: float = 0.98
    levels: int = 2


@dataclass(frozen=True)
class DoorReading:
    active: bool


class DoorSensor:
    def __init__(self, name: str, door: str, site: SiteMap, grid: PoseGrid, params: DoorParams = DoorParams()):
        self.name, self.grid, self.params = name, grid, params
        require_valid(params, name)
        self.door = site.door(door)
        self.zone = site.door_zone(self.door)
        self._made: dict[bool, Evidence] = {}  # the evidence of a fired and of a quiet contact, made on first use
        if not self.zone.any():
            raise ObservationError(
                f"sensor {name!r}: the zone of door {door!r} holds no free cell; check its position, facing and radius"
            )

    @property
    def odd_rate(self) -> float:
        """A false alarm away from the door or a miss at it, whichever is likelier (the bound for any route)."""
        return max(self.params.false_alarm_rate, 1 - self.params.hit_rate)

    def likelihood(self, reading) -> np.ndarray:
        active = self._active(reading)
        p = self.params
        inside, outside = (p.hit_rate, p.false_alarm_rate) if active else (1 - p.hit_rate, 1 - p.false_alarm_rate)
        return self.grid.broadcast(np.where(self.zone, inside, outside))

    def _active(self, reading) -> bool:
        active = getattr(reading, "active", reading)
        if not isinstance(active, (bool, np.bool_)):
            raise ObservationError(f"sensor {self.name!r}: a door reading is true or false, got {active!r}")
        return bool(active)

    def explain(self, reading, x: float, y: float, heading_deg: float) -> str:
        """The contact against the position (x, y): how far that is from the door."""
        active = self._active(reading)
        d = self.door
        away = math.hypot(x - d.x, y - d.y)
        said = "fired" if active else "stayed quiet"
        return f"door {d.name}'s contact {said}; the pose is {away:.2f} m from the door (zone radius {d.radius_m:g} m)"

    def encode(self, reading) -> Evidence:
        """The reading's evidence.  It depends on whether the contact fired and nothing else, so each of the two is
        made once and handed out again, with what it computes when asked (its likelihood, its mass function); its
        contour is read-only, as evidence is never changed in place."""
        active = self._active(reading)
        made = self._made.get(active)
        if made is None:
            lik = self.likelihood(active)
            top = lik.max()
            contour = lik / top if top > 0 else np.zeros(lik.shape)
            contour.flags.writeable = False
            # A contact that fired places the robot in the zone; a quiet one only makes the zone less likely,
            # which no Gaussian measurement says (the Gaussian filter moment-matches it instead).
            point = self._fired if active else None
            made = Evidence(self.name, contour, self.params.reliability, self.params.levels, point=point)
            self._made[active] = made
        return made

    @cached_property
    def _fired(self) -> ZonePoint:
        return ZonePoint.of_zone(self.grid, self.zone, self.params.reliability)


# ----------------------------------------------------------------------------- the kind
def _from_record(rec: dict, where: str) -> DoorReading:
    from fusion.io.json_line import flag_field

    return DoorReading(flag_field(rec, "active", where))


def _from_fields(value, feed) -> DoorReading:
    from fusion.sensors.field_values import flag

    return DoorReading(flag(value("active"), "active"))


def _simulate(case, spec, truth, rng) -> DoorReading:
    """The contact from the true pose: fires in the door's zone at its hit rate, elsewhere at its false-alarm
    rate; stuck at a value (fault)."""
    for f in spec.faults:
        if f.kind == "stuck" and f.active(truth.t):
            return DoorReading(bool(f.options["value"]))
    site = case.site
    zone = site.door_zone(site.door(spec.door))
    iy, ix = site.grid(1).plane_index(truth.x_m, truth.y_m)
    inside = bool(zone[iy, ix])
    rate = spec.params.hit_rate if inside else spec.params.false_alarm_rate
    return DoorReading(bool(rng.random() < rate))


def _cost(spec, site):
    """The door's contact zone: one byte per cell of the plane."""
    from fusion.sensors.kinds import ModelCost

    return ModelCost({"door zone": (site.width_m / site.resolution_m) * (site.height_m / site.resolution_m)})


def _register() -> None:
    from fusion.sensors.kinds import Calibrator, FaultKind, Option, SensorKind, lazy, register

    stuck = FaultKind("stuck", "the contact reads a fixed value (value = true or false)", {"value": Option("flag")})
    register(
        SensorKind(
            "door",
            DoorParams,
            lambda spec, site, grid: DoorSensor(spec.name, spec.door, site, grid, spec.params),
            lambda reading: {"active": bool(reading.active)},
            _from_record,
            _simulate,
            {"stuck": stuck},
            needs_door=True,
            fields=("active",),
            default_fields={"active": "data"},  # as in std_msgs/Bool
            from_fields=_from_fields,
            cost=_cost,
            calibrator=Calibrator(
                ("hit_rate", "false_alarm_rate"),
                lazy("fusion.calibration.data:collect_door"),
                lazy("fusion.calibration.models:fit_door"),
                # the worse of the two ways the contact can be right
                lambda draws: np.minimum(draws["hit_rate"], 1 - draws["false_alarm_rate"]),
            ),
        )
    )


_register()
