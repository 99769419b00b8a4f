"""Detections of known markers: identity, range and bearing, with missed, false and confused detections.

A detection of marker k at range r and bearing b (relative to the robot's heading)
has density

    p(z | x) = (1 − f) · [(1 − c) · g_k(x) + c · mean_{j ≠ k} g_j(x)] + f · u

where g_j(x) = p_detect · v_j(x) · N(r; r_j(x), σ_r) · N(b; b_j(x), σ_b) is the density
of seeing marker j from pose x (v_j = 1 when j is within range and field of view),
f the share of detections that are false (reflections, look-alike prints), c the
chance the identity is read wrongly, and u = 1 / (max range · field of view) the
density of a false detection.  A *miss* (the camera looked and saw nothing) has
probability Π_j (1 − p_detect · v_j(x)) of being right where markers should be
visible; with false detections possible, (1 − f)·that + f.

As for range returns, a cell stands for all the poses in it, so the noise used on the
grid is widened: σ_r² + res²/6 for range, σ_b² + Δθ²/12 + res²/(6 r²) for bearing
(common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fusion.errors import ObservationError, SiteError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence
from fusion.sensors.limits import require_valid
from fusion.sensors.linearised import MarkerPoint
from fusion.site import SiteMap

__all__ = ["visible_markers", "range_bearing", "MarkerParams", "MarkerSighting", "MarkerMiss", "MarkerSensor"]


@dataclass(frozen=True)
class MarkerParams:
    max_range_m: float = 6.0
    fov_deg: float = 120.0
    p_detect: float = 0.9
    false_rate: float = 0.05
    confusion: float = 0.02
    sigma_range_m: float = 0.15
    sigma_bearing_deg: float = 3.0
    reliability: float = 0.9
    levels: int = 6


@dataclass(frozen=True)
class MarkerSighting:
    marker_id: str
    range_m: float
    bearing_deg: float


@dataclass(frozen=True)
class MarkerMiss:
    """The camera looked and saw no marker."""


class MarkerSensor:
    def __init__(self, name: str, site: SiteMap, grid: PoseGrid, params: MarkerParams = MarkerParams()):
        self.name, self.site, self.grid, self.params = name, site, grid, params
        p = params
        require_valid(p, name)
        if not site.markers:
            raise SiteError(f"sensor {name!r} detects markers, but site {site.name!r} has none on its map")
        xs, ys = np.meshgrid(grid.x_centres(), grid.y_centres())
        mx = np.array([m.x for m in site.markers])[:, None, None]
        my = np.array([m.y for m in site.markers])[:, None, None]
        self._range = np.hypot(mx - xs, my - ys)  # (markers, ny, nx)
        self._direction = np.arctan2(my - ys, mx - xs)  # world bearing to each marker
        self._index = {m.marker_id: i for i, m in enumerate(site.markers)}
        self._clear = np.stack([self._line_of_sight(m.x, m.y, j) for j, m in enumerate(site.markers)])
        self._miss = None

    @property
    def odd_rate(self) -> float:
        """A false detection, or a true one with its identity misread."""
        p = self.params
        return p.false_rate + (1 - p.false_rate) * p.confusion

    def _line_of_sight(self, mx: float, my: float, j: int) -> np.ndarray:
        """(ny, nx): cells within range from which no wall or rack hides the marker (the simulator's rule)."""
        site, res = self.site, self.grid.resolution_m
        clear = np.zeros(self._range[j].shape, dtype=bool)
        iy, ix = np.nonzero(self._range[j] <= self.params.max_range_m)
        if iy.size == 0:
            return clear
        x0, y0 = self.grid.x_centres()[ix], self.grid.y_centres()[iy]
        r = self._range[j][iy, ix]
        samples = int(math.ceil(self.params.max_range_m / (res / 2))) + 1
        frac = np.linspace(0.0, 1.0, samples)[None, :]
        # Stop 1.5 cells short of the marker: it is printed on the face of a rack.
        reach = np.clip((r - 1.5 * res) / np.maximum(r, 1e-9), 0.0, 1.0)[:, None] * frac
        px, py = x0[:, None] + (mx - x0)[:, None] * reach, y0[:, None] + (my - y0)[:, None] * reach
        cy, cx = self.grid.plane_index(px, py)
        clear[iy, ix] = ~site.occupied[cy, cx].any(axis=1)
        return clear

    def _relative_bearing(self, j: int, iy: np.ndarray, ix: np.ndarray) -> np.ndarray:
        """Bearing of marker j relative to each heading from the plane cells (iy, ix): (headings, m), in [−π, π)."""
        theta = self.grid.heading_centres()[:, None]
        return _wrap(self._direction[j][iy, ix][None, :] - theta)

    def _seeing(self, j: int, r: float, b: float, out: np.ndarray, weight: float) -> None:
        """Add ``weight`` × the density of sighting marker j at (r, b) from every cell to ``out`` (headings, ny, nx);
        it is zero where the marker is not in view."""
        p = self.params
        # Only plane cells at about the right range can contribute (beyond 8σ the density is < 1e-14).
        iy, ix = np.nonzero(
            (np.abs(self._range[j] - r) < 8 * p.sigma_range_m + self.grid.resolution_m) & self._clear[j]
        )
        if iy.size == 0:
            return
        rel = self._relative_bearing(j, iy, ix)
        res, step = self.grid.resolution_m, self.grid.heading_step
        sr = math.sqrt(p.sigma_range_m**2 + res**2 / 6)
        sb = np.sqrt(
            math.radians(p.sigma_bearing_deg) ** 2
            + step**2 / 12
            + res**2 / (6 * np.maximum(self._range[j][iy, ix], res) ** 2)
        )[None, :]
        in_view = np.abs(rel) <= math.radians(p.fov_deg) / 2
        g = np.exp(-0.5 * ((r - self._range[j][iy, ix]) / sr) ** 2)[None, :] * np.exp(-0.5 * (_wrap(b - rel) / sb) ** 2)
        out[:, iy, ix] += (weight * p.p_detect / (2 * math.pi * sr)) * in_view * g / sb

    def _miss_likelihood(self) -> np.ndarray:
        if self._miss is None:
            p = self.params
            unseen = np.ones(self.grid.shape)
            half = math.radians(p.fov_deg) / 2
            for j in range(len(self.site.markers)):
                iy, ix = np.nonzero(self._clear[j])
                visible = np.abs(self._relative_bearing(j, iy, ix)) <= half
                unseen[:, iy, ix] *= 1 - p.p_detect * visible
            self._miss = (1 - p.false_rate) * unseen + p.false_rate
        return self._miss

    def likelihood(self, reading) -> np.ndarray:
        p = self.params
        if isinstance(reading, MarkerMiss):
            return self._miss_likelihood()
        if not isinstance(reading, MarkerSighting):
            raise ObservationError(f"sensor {self.name!r}: expected a marker sighting or miss, got {reading!r}")
        if reading.marker_id not in self._index:
            known = ", ".join(self._index)
            raise ObservationError(
                f"sensor {self.name!r}: marker {reading.marker_id!r} is not on the map of site "
                f"{self.site.name!r} (known: {known}); is the log from another site?"
            )
        r, b = float(reading.range_m), math.radians(float(reading.bearing_deg))
        if not (math.isfinite(r) and math.isfinite(b)) or r < 0:
            raise ObservationError(
                f"sensor {self.name!r}: sighting of {reading.marker_id!r} needs a finite range ≥ 0 m and a finite "
                f"bearing, got range {reading.range_m!r}, bearing {reading.bearing_deg!r}"
            )
        k = self._index[reading.marker_id]
        dens = np.zeros(self.grid.shape)
        self._seeing(k, r, b, dens, 1 - p.confusion)
        others = [j for j in range(len(self.site.markers)) if j != k]
        if others and p.confusion > 0:
            for j in others:
                self._seeing(j, r, b, dens, p.confusion / len(others))
        uniform = 1.0 / (p.max_range_m * math.radians(p.fov_deg))
        return (1 - p.false_rate) * dens + p.false_rate * uniform

    def explain(self, reading, x: float, y: float, heading_deg: float) -> str:
        """The reading against the pose (x, y, heading): where the marker was seen and where it would be."""
        if isinstance(reading, MarkerMiss):
            seen = visible_markers(self.site, self.params, x, y, heading_deg)
            if not seen:
                return "saw no marker, and from there none is in view"
            names = ", ".join(f"{m} at {r:.2f} m, {b:+.0f}°" for r, b, m in seen[:3])
            return f"saw no marker, yet from there {names} would be in view"
        k = self._index.get(reading.marker_id)
        if k is None:
            return f"marker {reading.marker_id} is not on the map"
        m = self.site.markers[k]
        r, b = range_bearing(x, y, heading_deg, m.x, m.y)
        view = "" if _in_view(self.params, r, b) else " (out of the camera's view from there)"
        return (
            f"marker {reading.marker_id} measured at {reading.range_m:.2f} m, {reading.bearing_deg:+.0f}°; "
            f"expected at {r:.2f} m, {b:+.0f}°{view}"
        )

    def encode(self, reading) -> Evidence:
        lik = self.likelihood(reading).reshape(-1)
        top = lik.max()
        contour = lik / top if top > 0 else np.zeros_like(lik)
        point = None
        if isinstance(reading, MarkerSighting):
            m = self.site.markers[self._index[reading.marker_id]]
            point = MarkerPoint(
                reading.marker_id, (m.x, m.y), reading.range_m, math.radians(reading.bearing_deg), self.params
            )
        return Evidence(self.name, contour, self.params.reliability, self.params.levels, point=point)


def visible_markers(site: SiteMap, params: MarkerParams, x: float, y: float, heading_deg: float):
    """Markers a working camera at pose (x, y, heading) can see: in range, in the field of view, no rack
    in the way.  Returns (range m, bearing deg, marker id) per marker, in the site's order."""
    seen = []
    for m in site.markers:
        r, b = range_bearing(x, y, heading_deg, m.x, m.y)
        if not _in_view(params, r, b):
            continue
        clear = site.ray_range(x, y, math.radians(heading_deg + b), r)
        if clear < r - 1.5 * site.resolution_m:  # a rack is in the way
            continue
        seen.append((r, b, m.marker_id))
    return seen


def range_bearing(x: float, y: float, heading_deg: float, px: float, py: float) -> tuple[float, float]:
    """Range (m) and bearing (degrees in [−180, 180), relative to the heading) of the point (px, py) from the
    pose (x, y, heading)."""
    r = math.hypot(px - x, py - y)
    return r, (math.degrees(math.atan2(py - y, px - x)) - heading_deg + 180.0) % 360.0 - 180.0


def _in_view(params: MarkerParams, r: float, b: float) -> bool:
    return r <= params.max_range_m and abs(b) <= params.fov_deg / 2


def _wrap(angle):
    """Angles wrapped to [−π, π).  By floor rather than ``%``: the same values to the last bit or two, at
    a sixth of the cost on arrays (numpy's float remainder is slow; measured)."""
    return angle - _TWO_PI * np.floor((angle + math.pi) * (1.0 / _TWO_PI))


_TWO_PI = 2.0 * math.pi


# ----------------------------------------------------------------------------- the kind
def _record(reading) -> dict:
    if isinstance(reading, MarkerMiss):
        return {"marker": None}
    return {
        "marker": reading.marker_id,
        "range_m": round(reading.range_m, 4),
        "bearing_deg": round(reading.bearing_deg, 3),
    }


def _from_record(rec: dict, where: str):
    from fusion.io.json_line import number_field
    from fusion.text import MAX_NAME_CHARS

    marker = rec.get("marker", "missing")
    if marker is None:
        return MarkerMiss()
    if not isinstance(marker, str) or not marker or len(marker) > MAX_NAME_CHARS:
        raise ObservationError(f"{where}: field 'marker' must be a marker id, or null for no sighting")
    reading = MarkerSighting(marker, number_field(rec, "range_m", where), number_field(rec, "bearing_deg", where))
    if reading.range_m < 0:
        raise ObservationError(f"{where}: field 'range_m' must be ≥ 0, got {reading.range_m!r}")
    return reading


def _from_fields(value, feed):
    """A sighting (or a miss, for an empty id) from a recording's values, in the feed's units."""
    from fusion.sensors.field_values import MISSING_WORDS, number

    marker = value("marker")
    if marker is None or str(marker).strip().lower() in MISSING_WORDS:
        return MarkerMiss()
    marker = str(marker).strip()
    if marker in feed.not_markers:
        raise ObservationError(f"id {marker!r} is no marker of the site (the layout's not_markers)")
    r = number(value("range"), "range") * feed.length_unit
    if r < 0:
        raise ObservationError(f"'range' must be ≥ 0, got {r:g} m")
    bearing = number(value("bearing"), "bearing")
    return MarkerSighting(marker, r, bearing if feed.angle_unit == "deg" else math.degrees(bearing))


def _simulate(case, spec, truth, rng):
    """A firing from the true pose: the nearest marker seen (detection, confusion, noise), a false sighting, a
    miss; a ghost marker where none is (fault)."""
    p = spec.params
    site = case.site
    for f in spec.faults:
        if f.kind == "ghost" and f.active(truth.t) and rng.random() < float(f.options["rate"]):
            gx, gy = f.options["at_m"]
            r, b = range_bearing(truth.x_m, truth.y_m, truth.heading_deg, float(gx), float(gy))
            if _in_view(p, r, b):
                return MarkerSighting(
                    str(f.options["marker"]), r + rng.normal(0, p.sigma_range_m), b + rng.normal(0, p.sigma_bearing_deg)
                )
    seen = []
    for r, b, marker_id in visible_markers(site, p, truth.x_m, truth.y_m, truth.heading_deg):
        if rng.random() < p.p_detect:
            seen.append((r, b, marker_id))
    if rng.random() < p.false_rate:  # a look-alike print somewhere in view
        fake = site.markers[int(rng.integers(len(site.markers)))].marker_id
        return MarkerSighting(
            fake, float(rng.uniform(0.5, p.max_range_m)), float(rng.uniform(-p.fov_deg / 2, p.fov_deg / 2))
        )
    if not seen:
        return MarkerMiss()
    r, b, marker_id = min(seen)
    if len(site.markers) > 1 and rng.random() < p.confusion:
        marker_id = rng.choice([m.marker_id for m in site.markers if m.marker_id != marker_id])
    return MarkerSighting(str(marker_id), r + rng.normal(0, p.sigma_range_m), b + rng.normal(0, p.sigma_bearing_deg))


def _cost(spec, site):
    """The per-marker tables over the plane and the line-of-sight test's temporary arrays and time (bytes and
    seconds per sample measured on the development machine, no source)."""
    from fusion.sensors.kinds import ModelCost

    res = site.resolution_m
    plane = (site.width_m / res) * (site.height_m / res)
    r = spec.params.max_range_m / res
    in_range = min(plane, math.pi * r * r)
    samples = 2 * r + 2
    return ModelCost(
        {"marker tables": 17 * plane * len(site.markers), "line-of-sight test": 41 * in_range * samples},
        {"line-of-sight test": 10e-9 * in_range * samples * len(site.markers)},
    )


def _register() -> None:
    from fusion.sensors.kinds import Calibrator, FaultKind, Option, SensorKind, lazy, register

    ghost = FaultKind(
        "ghost",
        "sightings of a marker where it is not (marker, at_m = [x, y], rate: chance per firing)",
        {"rate": Option("rate"), "marker": Option("marker"), "at_m": Option("point")},
    )
    register(
        SensorKind(
            "markers",
            MarkerParams,
            lambda spec, site, grid: MarkerSensor(spec.name, site, grid, spec.params),
            _record,
            _from_record,
            _simulate,
            {"ghost": ghost},
            needs_markers=True,
            fields=("marker", "range", "bearing"),
            from_fields=_from_fields,
            cost=_cost,
            calibrator=Calibrator(
                ("p_detect", "false_rate", "sigma_range_m", "sigma_bearing_deg"),
                lazy("fusion.calibration.data:collect_markers"),
                lazy("fusion.calibration.models:fit_markers"),
                lambda draws: 1 - draws["false_rate"],  # sightings that are not false
            ),
        )
    )


_register()
