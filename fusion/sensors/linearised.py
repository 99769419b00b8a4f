"""Readings as measurements h(pose) + Gaussian noise, for the Gaussian filter (``fusion.belief.gaussian``).

Each sensor model that has one builds it beside the grid evidence (``Evidence.point``), from the same
parameters:

- ``MarkerPoint``: range and bearing to the marker read, h = (‖m − p‖, atan2(m − p) − θ), data association by
  the marker's id, R = diag(σ_r², σ_b²).  A sighting at a range below the range noise (the robot on the
  marker), or an estimate that close to the marker, has a bearing no linearisation can follow: refused.
- ``ZonePoint``: a door contact that fired, as a pseudo-measurement of position: the centre of the door's
  zone, with the zone's own spread (the covariance of a uniform position over its cells) as R.
- ``ScanPoint``: every beam with a return is a measurement of the signed distance from its end point to
  the nearest wall, expected 0 with the wall spread as noise, h_b = d(p + z_b (cos(θ + φ_b), sin(θ + φ_b))).
  The field is the site's distance field made signed (negative inside walls and racks, so a return read a
  little long pulls back) and read bilinearly, with its gradient.  The beams are separate measurements
  (gated one by one, then together) and the update iterates (Gauss–Newton on the likelihood field: scan
  matching with the prediction as prior).

A quiet door contact, a camera that saw nothing, and a site with no walls give no such model; the Gaussian
filter then applies the reading's grid likelihood by moment matching (``fusion.backends.gaussian_grid``).
"""

from __future__ import annotations

import math
from functools import cached_property

import numpy as np

from fusion.belief.gaussian import Linearised, NotLinearisable, wrap

__all__ = ["MarkerPoint", "ZonePoint", "ScanPoint", "SignedField"]


class MarkerPoint:
    rows_independent = False
    iterate = False

    def __init__(self, marker_id: str, marker_xy, range_m: float, bearing_rad: float, params):
        self.marker_id, self.marker = marker_id, (float(marker_xy[0]), float(marker_xy[1]))
        self.z = np.array([float(range_m), float(bearing_rad)])
        self.reliability = params.reliability
        self.closest = max(params.sigma_range_m, 1e-3)
        self.noise = np.diag([params.sigma_range_m**2, math.radians(params.sigma_bearing_deg) ** 2])

    def linearise(self, pose: np.ndarray, rows=None) -> Linearised:
        if self.z[0] < self.closest:
            raise NotLinearisable(
                f"marker {self.marker_id} was read at range {self.z[0]:.3g} m, below the range noise "
                f"({self.closest:g} m): a bearing from on top of the marker cannot be linearised"
            )
        dx, dy = self.marker[0] - pose[0], self.marker[1] - pose[1]
        q = dx * dx + dy * dy
        r = math.sqrt(q)
        if r < self.closest:
            raise NotLinearisable(
                f"the estimate is {r:.3g} m from marker {self.marker_id}, inside the range noise "
                f"({self.closest:g} m): its bearing cannot be linearised there"
            )
        predicted = np.array([r, math.atan2(dy, dx) - pose[2]])
        nu = self.z - predicted
        nu[1] = wrap(nu[1])
        jac = np.array([[-dx / r, -dy / r, 0.0], [dy / q, -dx / q, -1.0]])
        return Linearised(nu, jac, self.noise)


class ZonePoint:
    rows_independent = False
    iterate = False
    _H = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]])

    def __init__(self, centre, spread: np.ndarray, reliability: float):
        self.centre, self.noise, self.reliability = np.asarray(centre, float), spread, reliability

    @classmethod
    def of_zone(cls, grid, zone: np.ndarray, reliability: float) -> ZonePoint:
        """The pseudo-measurement of a door zone ((ny, nx) bool): its centre and the covariance of a uniform
        position over its cells (each cell adding res²/12 per axis)."""
        iy, ix = np.nonzero(zone)
        x, y = grid.x_centres()[ix], grid.y_centres()[iy]
        pts = np.column_stack([x, y])
        centre = pts.mean(axis=0)
        spread = np.cov(pts.T, bias=True) if len(pts) > 1 else np.zeros((2, 2))
        return cls(centre, spread + np.eye(2) * grid.resolution_m**2 / 12, reliability)

    def linearise(self, pose: np.ndarray, rows=None) -> Linearised:
        return Linearised(self.centre - pose[:2], self._H, self.noise)


class SignedField:
    """The site's distance to the nearest wall, signed (negative inside), read bilinearly with its gradient.  The
    field is built on first use: every scan carries one of these, and only the Gaussian filter reads it."""

    def __init__(self, site, pad: int):
        self.site, self.res, self.pad = site, site.resolution_m, pad
        self.x0, self.y0 = site.origin_m
        # distance_beyond is infinite everywhere exactly when nothing on the map is occupied
        self.finite = bool(site.occupied.any())

    @cached_property
    def values(self) -> np.ndarray:
        from scipy import ndimage

        outside = self.site.distance_beyond(self.pad)
        occupied = np.pad(self.site.occupied, self.pad, constant_values=False)
        inside = np.maximum(ndimage.distance_transform_edt(occupied, sampling=self.res) - self.res / 2, 0.0)
        return np.where(occupied, -inside, outside)

    def at(self, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Signed distance and its x and y gradients at points (clamped to the padded field)."""
        f, res = self.values, self.res
        u = (x - self.x0) / res + self.pad - 0.5
        v = (y - self.y0) / res + self.pad - 0.5
        ny, nx = f.shape
        u, v = np.clip(u, 0.0, nx - 1.000001), np.clip(v, 0.0, ny - 1.000001)
        i, j = np.floor(u).astype(np.int64), np.floor(v).astype(np.int64)
        fu, fv = u - i, v - j
        f00, f10, f01, f11 = f[j, i], f[j, i + 1], f[j + 1, i], f[j + 1, i + 1]
        d = (1 - fv) * ((1 - fu) * f00 + fu * f10) + fv * ((1 - fu) * f01 + fu * f11)
        gx = ((1 - fv) * (f10 - f00) + fv * (f11 - f01)) / res
        gy = ((1 - fu) * (f01 - f00) + fu * (f11 - f10)) / res
        return d, gx, gy


class ScanPoint:
    rows_independent = True
    iterate = True

    def __init__(self, field: SignedField, ranges: np.ndarray, bearings_rad: np.ndarray, params):
        self.field = field
        self.z, self.bearings = ranges, bearings_rad
        self.reliability = params.reliability
        self.sigma = params.wall_spread_m

    @cached_property
    def _noise(self) -> np.ndarray:
        return np.eye(len(self.z)) * self.sigma**2

    @property
    def size(self) -> int:
        return len(self.z)

    def linearise(self, pose: np.ndarray, rows=None) -> Linearised:
        z, b = (self.z, self.bearings) if rows is None else (self.z[rows], self.bearings[rows])
        angle = pose[2] + b
        c, s = np.cos(angle), np.sin(angle)
        d, gx, gy = self.field.at(pose[0] + z * c, pose[1] + z * s)
        jac = np.column_stack([gx, gy, z * (gy * c - gx * s)])
        noise = self._noise if rows is None else np.eye(len(z)) * self.sigma**2
        return Linearised(-d, jac, noise)
