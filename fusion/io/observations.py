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

from dataclasses import dataclass

from fusion.errors import ObservationError
from fusion.io.json_line import number_field, shown
from fusion.sensors.kinds import kinds, sensor_kind
from fusion.text import MAX_NAME_CHARS

__all__ = ["Observation", "from_record"]

MAX_NAME = MAX_NAME_CHARS  # the same limit as in a case file
"""Longest sensor or marker name a record may hold."""


@dataclass(frozen=True)
class Observation:
    t: float
    sensor: str
    kind: str
    reading: object

    @property
    def moves(self) -> bool:
        """A motion reading (odometry): it drives the prediction rather than updating the belief."""
        return sensor_kind(self.kind).motion

    def to_record(self) -> dict:
        """The log record: time, sensor, kind, and the reading's fields as its kind writes them
        (``fusion.sensors.kinds``)."""
        rec = {"t": round(self.t, 6), "sensor": self.sensor, "kind": self.kind}
        rec.update(sensor_kind(self.kind).to_record(self.reading))
        return rec


def from_record(rec) -> Observation:
    """Validate a decoded JSON object and turn it into an ``Observation``; ``ObservationError`` names the field."""
    if not isinstance(rec, dict):
        raise ObservationError(f"an observation must be a JSON object, got {type(rec).__name__}")
    t = number_field(rec, "t", "observation")
    if t < 0:
        raise ObservationError(f"observation: field 't' must be ≥ 0 seconds, got {t!r}")
    sensor = rec.get("sensor")
    if not isinstance(sensor, str) or not sensor.strip() or len(sensor) > MAX_NAME:
        raise ObservationError(
            f"observation: field 'sensor' must name a sensor (1 to {MAX_NAME} characters), got {shown(sensor)}"
        )
    kind = rec.get("kind")
    where = f"observation of {sensor!r} at t={t:g}"
    known = kinds()
    if not isinstance(kind, str) or kind not in known:
        raise ObservationError(f"{where}: field 'kind' must be one of {', '.join(known)}, got {shown(kind)}")
    return Observation(t, sensor, kind, known[kind].from_record(rec, where))
