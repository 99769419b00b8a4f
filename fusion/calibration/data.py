"""From a labelled log to what each sensor model's parameters can be fitted on (numpy only).

Each reading is paired with the true pose at its own time (interpolated between the
true poses around it, ``MAX_TRUTH_GAP_S`` apart at most); readings with no true pose
around them are set aside.  Each sensor kind's ``Calibrator`` (``fusion.sensors.kinds``) names the
function that builds its data set; for the built-in kinds they are here:

- door: for every reading, whether the truth was inside the door's contact zone and
  whether the contact was active;
- markers: for every firing, whether a marker was visible from the truth (the
  model's visibility rule), and whether the reading was a miss, a sighting of a
  visible marker (with its range and bearing residuals) or an unexplained sighting;
- ranging: for every beam, the measured range and the range a ray cast from the true
  pose meets on the map (Thrun, Burgard & Fox 2005, §6.3: the beam model's parameters
  are learned from such pairs);
- odometry: consecutive records composed into windows of at least ``ODOMETRY_WINDOW_S``,
  each window's measured path and turn against the true ones between the true poses
  interpolated at its ends.  The error model grows with distance and turn, not with the
  number of records, so windows make the fit independent of the record rate; they also keep
  the truth's own noise (a millimetre per pose of motion capture) small against the motion.
  Windows where the robot was carried are left out: the wheels did not see that move.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fusion.case_model import Case
from fusion.io.logs import SetAside, TruthPose
from fusion.sensors.kinds import sensor_kind
from fusion.sensors.markers import MarkerMiss, visible_markers

__all__ = ["DoorData", "MarkerData", "RangeData", "OdometryData", "datasets", "ODOMETRY_WINDOW_S"]

MAX_TRUTH_GAP_S = 1.0
"""Longest gap between true poses across which a reading's true pose is interpolated (our choice)."""
ODOMETRY_WINDOW_S = 0.5
"""Shortest span of odometry compared with the truth (our choice: at 0.3 m/s a robot moves 15 cm, two orders
of magnitude above motion-capture noise, and a window this short rarely holds a reversal)."""


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
    false_density: float = 1.0  # of a false reading's (range, bearing): uniform over range and field of view, 1/(m·deg)


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
    no_model: list[str] = field(default_factory=list)  # sensors of a kind calibration has no model for


def _wrap(a):
    return (np.asarray(a) + 180.0) % 360.0 - 180.0


def datasets(case: Case, observations, truth) -> Datasets:
    """``observations``: (line, Observation) pairs; ``truth``: (line, TruthPose) pairs, both in time order."""
    out = Datasets()
    poses = [p for _, p in truth]
    times = np.array([p.t for p in poses])
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
        pose = _pose_at(times, poses, obs.t)
        if pose is None:
            out.set_aside.append(
                SetAside(line, f"no true pose at t = {obs.t:g} s (none within {MAX_TRUTH_GAP_S:g} s on both sides)", "")
            )
            continue
        rows[obs.sensor].append((pose, obs.reading, obs.t))
    for name, pairs in rows.items():
        calibrator = sensor_kind(specs[name].kind).calibrator
        if calibrator is None:
            out.no_model.append(name)
        elif pairs:
            out.by_sensor[name] = calibrator.collect(case, specs[name], pairs, poses)
    return out


def collect_door(case, spec, pairs, poses) -> DoorData:
    site = case.site
    zone = site.door_zone(site.door(spec.door))
    inside, active = [], []
    for p, reading, _ in pairs:
        iy, ix = site.grid(1).plane_index(p.x_m, p.y_m)
        inside.append(bool(zone[iy, ix]))
        active.append(bool(reading.active))
    return DoorData(np.array(inside), np.array(active))


def collect_markers(case, spec, pairs, poses) -> MarkerData:
    visible, outcome, dr, db = [], [], [], []
    for p, reading, _ in pairs:
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
    density = 1.0 / (spec.params.max_range_m * min(spec.params.fov_deg, 360.0))
    return MarkerData(np.array(visible), np.array(outcome, dtype=np.int64), np.array(dr), np.array(db), density)


def collect_ranging(case, spec, pairs, poses) -> RangeData:
    site, params = case.site, spec.params
    measured, expected = [], []
    for p, reading, _ in pairs:
        for bearing, z in zip(params.bearings_deg, reading.ranges_m):
            expected.append(site.ray_range(p.x_m, p.y_m, math.radians(p.heading_deg + bearing), params.max_range_m))
            measured.append(min(float(z), params.max_range_m))
    return RangeData(np.array(measured), np.array(expected), float(params.max_range_m))


def collect_odometry(case, spec, pairs, poses) -> OdometryData:
    """Windows of records (see the module docstring); ``pairs`` hold (nearest true pose, record) in time order."""
    times = np.array([p.t for p in poses])
    mf, tf, mt, tt = [], [], [], []
    start_t, path, turned = None, 0.0, 0.0
    for _, reading, t in pairs:
        if start_t is None:  # the first record's span is unknown: it starts the first window
            start_t = t
            continue
        path += math.copysign(math.hypot(reading.forward_m, reading.left_m), reading.forward_m)
        turned += reading.turn_deg
        if t - start_t < ODOMETRY_WINDOW_S:
            continue
        a, b = _pose_at(times, poses, start_t), _pose_at(times, poses, t)
        inside = poses[int(np.searchsorted(times, start_t, side="right")) : int(np.searchsorted(times, t)) + 1]
        if a is not None and b is not None and not any(p.carried for p in inside):
            change = float(_wrap(b.heading_deg - a.heading_deg))
            turn = change + 360.0 * round((turned - change) / 360.0)  # the true turn, whole turns as measured
            h = math.radians(a.heading_deg + turn / 2)  # a window may turn and then drive: sign from the mean heading
            dx, dy = b.x_m - a.x_m, b.y_m - a.y_m
            tf.append(math.copysign(math.hypot(dx, dy), dx * math.cos(h) + dy * math.sin(h)))
            tt.append(turn)
            mf.append(path)
            mt.append(turned)
        start_t, path, turned = t, 0.0, 0.0
    return OdometryData(np.array(mf), np.array(tf), np.array(mt), np.array(tt))


def _pose_at(times: np.ndarray, poses, t: float) -> TruthPose | None:
    """The true pose at ``t``: a true pose at that time, or the two around it interpolated linearly (heading the
    shorter way); None outside the truth, or where the poses around it are more than ``MAX_TRUTH_GAP_S`` apart
    or the robot was carried between them."""
    k = int(np.searchsorted(times, t))
    if k < len(times) and abs(times[k] - t) < 1e-9:
        return poses[k]
    if k == 0 or k >= len(times) or times[k] - times[k - 1] > MAX_TRUTH_GAP_S or poses[k].carried:
        return None
    a, b = poses[k - 1], poses[k]
    w = (t - a.t) / (b.t - a.t)
    turn = float(_wrap(b.heading_deg - a.heading_deg))
    return TruthPose(t, a.x_m + w * (b.x_m - a.x_m), a.y_m + w * (b.y_m - a.y_m), a.heading_deg + w * turn)
