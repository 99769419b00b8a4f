"""Observation records: one reading of one sensor at one time, as a typed value and as a JSON object.

Log line format (our own; one JSON object per line):

    {"t": 12.25, "sensor": "front ranger", "kind": "ranging", "ranges_m": [3.1, 7.9, 2.2, 8.0]}
    {"t": 12.25, "sensor": "rack camera", "kind": "markers", "marker": "C3-end", "range_m": 2.4, "bearing_deg": -12.0}
    {"t": 12.25, "sensor": "rack camera", "kind": "markers", "marker": null}          (looked, saw nothing)
    {"t": 12.25, "sensor": "freezer door", "kind": "door", "active": false}
    {"t": 12.25, "sensor": "wheels", "kind": "odometry", "forward_m": 0.15, "left_m": 0.0, "turn_deg": 0.0}

``t`` is seconds since the start of the run; odometry is the motion since the
previous odometry record.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from fusion.errors import ObservationError
from fusion.io.json_line import finite_number, shown
from fusion.sensors.doors import DoorReading
from fusion.sensors.markers import MarkerMiss, MarkerSighting
from fusion.sensors.odometry import OdometryReading
from fusion.sensors.ranging import RangeScan
from fusion.text import MAX_NAME_CHARS

__all__ = ["Observation", "from_record", "KINDS"]

KINDS = ("ranging", "markers", "door", "odometry")
MAX_NAME = MAX_NAME_CHARS  # the same limit as in a case file
"""Longest sensor or marker name a record may hold."""


@dataclass(frozen=True)
class Observation:
    t: float
    sensor: str
    kind: str
    reading: object

    def to_record(self) -> dict:
        rec = {"t": round(self.t, 6), "sensor": self.sensor, "kind": self.kind}
        r = self.reading
        if isinstance(r, RangeScan):
            rec["ranges_m"] = [round(float(z), 4) for z in r.ranges_m]
        elif isinstance(r, MarkerSighting):
            rec.update(marker=r.marker_id, range_m=round(r.range_m, 4), bearing_deg=round(r.bearing_deg, 3))
        elif isinstance(r, MarkerMiss):
            rec["marker"] = None
        elif isinstance(r, DoorReading):
            rec["active"] = bool(r.active)
        elif isinstance(r, OdometryReading):
            rec.update(forward_m=round(r.forward_m, 5), left_m=round(r.left_m, 5), turn_deg=round(r.turn_deg, 4))
        return rec


def _number(rec: dict, key: str, where: str) -> float:
    if key not in rec:
        raise ObservationError(f"{where}: the field '{key}' is missing")
    v = finite_number(rec[key])
    if v is None:
        raise ObservationError(f"{where}: field '{key}' must be a finite number, got {shown(rec[key])}")
    return v


def from_record(rec) -> Observation:
    """Validate a decoded JSON object and turn it into an ``Observation``; ``ObservationError`` names the field."""
    if not isinstance(rec, dict):
        raise ObservationError(f"an observation must be a JSON object, got {type(rec).__name__}")
    t = _number(rec, "t", "observation")
    if t < 0:
        raise ObservationError(f"observation: field 't' must be ≥ 0 seconds, got {t!r}")
    sensor = rec.get("sensor")
    if not isinstance(sensor, str) or not sensor.strip() or len(sensor) > MAX_NAME:
        raise ObservationError(
            f"observation: field 'sensor' must name a sensor (1 to {MAX_NAME} characters), got {shown(sensor)}"
        )
    kind = rec.get("kind")
    where = f"observation of {sensor!r} at t={t:g}"
    if kind not in KINDS:
        raise ObservationError(f"{where}: field 'kind' must be one of {', '.join(KINDS)}, got {shown(kind)}")
    if kind == "ranging":
        ranges = rec.get("ranges_m")
        if not isinstance(ranges, list) or not ranges:
            raise ObservationError(f"{where}: field 'ranges_m' must be a non-empty array of numbers")
        values = []
        for i, z in enumerate(ranges):
            # +inf is allowed: a beam with no return
            value = math.inf if isinstance(z, float) and z == math.inf else finite_number(z)
            if value is None or value < 0:
                raise ObservationError(f"{where}: ranges_m[{i}] must be a number ≥ 0, got {shown(z)}")
            values.append(value)
        reading = RangeScan(tuple(values))
    elif kind == "markers":
        marker = rec.get("marker", "missing")
        if marker is None:
            reading = MarkerMiss()
        elif not isinstance(marker, str) or not marker or len(marker) > MAX_NAME:
            raise ObservationError(f"{where}: field 'marker' must be a marker id, or null for no sighting")
        else:
            reading = MarkerSighting(marker, _number(rec, "range_m", where), _number(rec, "bearing_deg", where))
            if reading.range_m < 0:
                raise ObservationError(f"{where}: field 'range_m' must be ≥ 0, got {reading.range_m!r}")
    elif kind == "door":
        active = rec.get("active")
        if not isinstance(active, bool):
            raise ObservationError(f"{where}: field 'active' must be true or false, got {shown(active)}")
        reading = DoorReading(active)
    else:
        left = _number(rec, "left_m", where) if rec.get("left_m") is not None else 0.0
        reading = OdometryReading(_number(rec, "forward_m", where), left, _number(rec, "turn_deg", where))
    return Observation(t, sensor, kind, reading)
