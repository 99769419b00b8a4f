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
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fusion.errors import ObservationError, SiteError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence, check_positive, check_probability, check_reliability
from fusion.site import SiteMap

__all__ = ["MarkerParams", "MarkerSighting", "MarkerMiss", "MarkerSensor"]


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
    levels: int = 4


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
        for f in ("max_range_m", "fov_deg", "sigma_range_m", "sigma_bearing_deg"):
            check_positive(getattr(p, f), name, f)
        for f in ("p_detect", "false_rate", "confusion"):
            check_probability(getattr(p, f), name, f)
        check_reliability(p.reliability, name)
        if not site.markers:
            raise SiteError(f"sensor {name!r} detects markers, but site {site.name!r} has none on its map")
        xs, ys = np.meshgrid(grid.x_centres(), grid.y_centres())
        mx = np.array([m.x for m in site.markers])[:, None, None]
        my = np.array([m.y for m in site.markers])[:, None, None]
        self._range = np.hypot(mx - xs, my - ys)  # (markers, ny, nx)
        self._direction = np.arctan2(my - ys, mx - xs)  # world bearing to each marker
        self._index = {m.marker_id: i for i, m in enumerate(site.markers)}

    def _relative_bearing(self, j: int) -> np.ndarray:
        """Bearing of marker j from each pose, relative to the heading: (headings, ny, nx), in (−π, π]."""
        theta = self.grid.heading_centres()[:, None, None]
        return np.angle(np.exp(1j * (self._direction[j][None] - theta)))

    def _visible(self, j: int, rel: np.ndarray) -> np.ndarray:
        half = math.radians(self.params.fov_deg) / 2
        return (self._range[j][None] <= self.params.max_range_m) & (np.abs(rel) <= half)

    def _seeing(self, j: int, r: float, b: float) -> np.ndarray:
        p = self.params
        rel = self._relative_bearing(j)
        sb = math.radians(p.sigma_bearing_deg)
        db = np.angle(np.exp(1j * (b - rel)))
        g = np.exp(-0.5 * ((r - self._range[j][None]) / p.sigma_range_m) ** 2 - 0.5 * (db / sb) ** 2)
        g /= 2 * math.pi * p.sigma_range_m * sb
        return p.p_detect * self._visible(j, rel) * g

    def likelihood(self, reading) -> np.ndarray:
        p = self.params
        if isinstance(reading, MarkerMiss):
            unseen = np.ones(self.grid.shape)
            for j in range(len(self.site.markers)):
                unseen *= 1 - p.p_detect * self._visible(j, self._relative_bearing(j))
            return (1 - p.false_rate) * unseen + p.false_rate
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
        dens = (1 - p.confusion) * self._seeing(k, r, b)
        others = [j for j in range(len(self.site.markers)) if j != k]
        if others and p.confusion > 0:
            dens += p.confusion / len(others) * sum(self._seeing(j, r, b) for j in others)
        uniform = 1.0 / (p.max_range_m * math.radians(p.fov_deg))
        return (1 - p.false_rate) * dens + p.false_rate * uniform

    def encode(self, reading) -> Evidence:
        lik = self.likelihood(reading).reshape(-1)
        top = lik.max()
        contour = lik / top if top > 0 else np.zeros_like(lik)
        return Evidence(self.name, contour, self.params.reliability, self.params.levels)
