"""From a labelled log to what each sensor model's parameters can be fitted on (numpy only).

Each reading is paired with the true pose of its tick (nearest truth record within
half a tick); readings with no true pose near them are set aside.  Per sensor kind:

- door: for every reading, whether the truth was inside the door's contact zone and
  whether the contact was active;
- markers: for every firing, whether a marker was visible from the truth (the
  model's visibility rule), and whether the reading was a miss, a sighting of a
  visible marker (with its range and bearing residuals) or an unexplained sighting;
- ranging: for every beam, the measured range and the range a ray cast from the true
  pose meets on the map (Thrun, Burgard & Fox 2005, §6.3: the beam model's parameters
  are learned from such pairs);
- odometry: for every tick, measured forward motion and turn against the true ones
  (ticks where the robot was carried are left out: the wheels did not see that move).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fusion.io.case import Case
from fusion.io.logs import SetAside
from fusion.sensors.markers import MarkerMiss, visible_markers

__all__ = ["DoorData", "MarkerData", "RangeData", "OdometryData", "datasets"]


@dataclass
class DoorData:
    inside: np.ndarray  # bool per reading
    active: np.ndarray


@dataclass
class MarkerData:
    visible: np.ndarray  # bool per firing: a marker was in view
    outcome: np.ndarray  # 0 miss, 1 sighting of a visible marker, 2 unexplained sighting
    range_residual_m: np.ndarray  # per explained sighting
    bearing_residual_deg: np.ndarray


@dataclass
class RangeData:
    measured_m: np.ndarray
    expected_m: np.ndarray
    max_range_m: float


@dataclass
class OdometryData:
    measured_forward_m: np.ndarray
    true_forward_m: np.ndarray
    measured_turn_deg: np.ndarray
    true_turn_deg: np.ndarray


@dataclass
class Datasets:
    by_sensor: dict = field(default_factory=dict)  # name -> one of the data classes above
    set_aside: list[SetAside] = field(default_factory=list)


def _wrap(a):
    return (np.asarray(a) + 180.0) % 360.0 - 180.0


def datasets(case: Case, observations, truth) -> Datasets:
    """``observations``: (line, Observation) pairs; ``truth``: (line, TruthPose) pairs, both in time order."""
    out = Datasets()
    poses = [p for _, p in truth]
    times = np.array([p.t for p in poses])
    gap = float(np.median(np.diff(times))) / 2 if len(times) > 1 else 0.5
    specs = {s.name: s for s in case.sensors}
    rows: dict[str, list] = {name: [] for name in specs}
    for line, obs in observations:
        spec = specs.get(obs.sensor)
        if spec is None:
            out.set_aside.append(SetAside(line, f"sensor {obs.sensor!r} is not in the case", ""))
            continue
        if spec.kind != obs.kind:
            out.set_aside.append(SetAside(line, f"sensor {obs.sensor!r} is a {spec.kind} sensor, not {obs.kind}", ""))
            continue
        k = int(np.searchsorted(times, obs.t))
        near = [j for j in (k - 1, k) if 0 <= j < len(times)]
        j = min(near, key=lambda i: abs(times[i] - obs.t)) if near else None
        if j is None or abs(times[j] - obs.t) > gap + 1e-9:
            out.set_aside.append(SetAside(line, f"no true pose within {gap:g} s of t = {obs.t:g} s", ""))
            continue
        rows[obs.sensor].append((j, obs.reading))
    for name, pairs in rows.items():
        if pairs:
            out.by_sensor[name] = _BUILDERS[specs[name].kind](case, specs[name], pairs, poses)
    return out


def _door(case, spec, pairs, poses) -> DoorData:
    site = case.site
    zone = site.door_zone(site.door(spec.door))
    inside, active = [], []
    for j, reading in pairs:
        p = poses[j]
        iy, ix = site.grid(1).plane_index(p.x_m, p.y_m)
        inside.append(bool(zone[iy, ix]))
        active.append(bool(reading.active))
    return DoorData(np.array(inside), np.array(active))


def _markers(case, spec, pairs, poses) -> MarkerData:
    visible, outcome, dr, db = [], [], [], []
    for j, reading in pairs:
        p = poses[j]
        seen = visible_markers(case.site, spec.params, p.x_m, p.y_m, p.heading_deg)
        visible.append(bool(seen))
        if isinstance(reading, MarkerMiss):
            outcome.append(0)
            continue
        match = [(r, b) for r, b, marker in seen if marker == reading.marker_id]
        if not match:
            outcome.append(2)
            continue
        r, b = match[0]
        outcome.append(1)
        dr.append(reading.range_m - r)
        db.append(float(_wrap(reading.bearing_deg - b)))
    return MarkerData(np.array(visible), np.array(outcome, dtype=np.int64), np.array(dr), np.array(db))


def _ranging(case, spec, pairs, poses) -> RangeData:
    site, params = case.site, spec.params
    measured, expected = [], []
    for j, reading in pairs:
        p = poses[j]
        for bearing, z in zip(params.bearings_deg, reading.ranges_m):
            expected.append(site.ray_range(p.x_m, p.y_m, math.radians(p.heading_deg + bearing), params.max_range_m))
            measured.append(min(float(z), params.max_range_m))
    return RangeData(np.array(measured), np.array(expected), float(params.max_range_m))


def _odometry(case, spec, pairs, poses) -> OdometryData:
    mf, tf, mt, tt = [], [], [], []
    for j, reading in pairs:
        if j == 0 or poses[j].carried:
            continue
        a, b = poses[j - 1], poses[j]
        turn = float(_wrap(b.heading_deg - a.heading_deg))
        h = math.radians(a.heading_deg + turn / 2)  # a tick may turn and then drive: sign from the mean heading
        dx, dy = b.x_m - a.x_m, b.y_m - a.y_m
        tf.append(math.copysign(math.hypot(dx, dy), dx * math.cos(h) + dy * math.sin(h)))
        tt.append(turn)
        mf.append(reading.forward_m)
        mt.append(reading.turn_deg)
    return OdometryData(np.array(mf), np.array(tf), np.array(mt), np.array(tt))


_BUILDERS = {"door": _door, "markers": _markers, "ranging": _ranging, "odometry": _odometry}
