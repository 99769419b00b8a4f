"""The a-priori site map: occupancy, doors with contact sensors, and known markers.

Occupancy is a boolean ``(ny, nx)`` image at the pose grid's resolution (true =
wall or rack).  The distance from every map cell to the nearest occupied cell is
computed once with ``scipy.ndimage.distance_transform_edt``; range models read it
instead of ray casting (the likelihood-field idea, Thrun, Burgard & Fox 2005, §6.4).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from fusion.errors import SiteError
from fusion.grid import PoseGrid

__all__ = ["Door", "Marker", "SiteMap"]


@dataclass(frozen=True)
class Door:
    """A door whose contact sensor fires when the robot is within ``radius_m`` on its open side.

    ``facing_deg`` is the direction (degrees, counter-clockwise from east) the open side faces.
    """

    name: str
    x: float
    y: float
    facing_deg: float
    radius_m: float = 1.0


@dataclass(frozen=True)
class Marker:
    """A printed marker with a known identity at a surveyed position."""

    marker_id: str
    x: float
    y: float


@dataclass
class SiteMap:
    width_m: float
    height_m: float
    resolution_m: float
    occupied: np.ndarray  # (ny, nx) bool
    doors: tuple[Door, ...] = ()
    markers: tuple[Marker, ...] = ()
    name: str = "site"
    origin_m: tuple[float, float] = (0.0, 0.0)  # site-frame coordinates of the map's lower-left corner
    _marker_index: dict = field(init=False, repr=False)

    def __post_init__(self):
        self.occupied = np.asarray(self.occupied, dtype=bool)
        self.origin_m = (float(self.origin_m[0]), float(self.origin_m[1]))
        plane = self.grid(1)
        if self.occupied.shape != (plane.ny, plane.nx):
            raise SiteError(
                f"occupancy of site {self.name!r} must have shape (ny, nx) = {(plane.ny, plane.nx)} for "
                f"{self.width_m} m × {self.height_m} m at {self.resolution_m} m, got {self.occupied.shape}"
            )
        for kind, items in (("door", self.doors), ("marker", self.markers)):
            for item in items:
                label = getattr(item, "name", None) or getattr(item, "marker_id", "?")
                if not (math.isfinite(item.x) and math.isfinite(item.y)):
                    raise SiteError(f"{kind} {label!r} of site {self.name!r} has a non-finite position")
                if not self.contains(item.x, item.y):
                    raise SiteError(
                        f"{kind} {label!r} at ({item.x} m, {item.y} m) is off the map of site {self.name!r} "
                        f"({plane.spans()})"
                    )
        ids = [m.marker_id for m in self.markers]
        if len(set(ids)) != len(ids):
            dup = next(i for i in ids if ids.count(i) > 1)
            raise SiteError(f"marker id {dup!r} appears twice on site {self.name!r}; marker ids must be unique")
        self._marker_index = {m.marker_id: i for i, m in enumerate(self.markers)}

    # ----------------------------------------------------------------- builders
    @classmethod
    def empty(cls, width_m: float, height_m: float, resolution_m: float, *, border: bool = True, **kw) -> SiteMap:
        """A site with no obstacles, walled round its edge when ``border`` is true."""
        plane = PoseGrid(width_m, height_m, resolution_m, 1)  # the shape only: the origin does not change it
        occ = np.zeros((plane.ny, plane.nx), dtype=bool)
        if border:
            occ[0, :] = occ[-1, :] = occ[:, 0] = occ[:, -1] = True
        return cls(width_m, height_m, resolution_m, occ, **kw)

    def with_box(self, x0: float, y0: float, x1: float, y1: float) -> SiteMap:
        """A copy with the axis-aligned box [x0, x1] × [y0, y1] (metres) marked occupied."""
        occ = self.occupied.copy()
        r, (ox, oy) = self.resolution_m, self.origin_m
        x0, x1, y0, y1 = x0 - ox, x1 - ox, y0 - oy, y1 - oy
        ix0, ix1 = int(math.floor(min(x0, x1) / r)), int(math.ceil(max(x0, x1) / r))
        iy0, iy1 = int(math.floor(min(y0, y1) / r)), int(math.ceil(max(y0, y1) / r))
        occ[max(iy0, 0) : max(iy1, 0), max(ix0, 0) : max(ix1, 0)] = True
        return SiteMap(self.width_m, self.height_m, r, occ, self.doors, self.markers, self.name, self.origin_m)

    def contains(self, x: float, y: float) -> bool:
        """Whether the point (site frame, metres) lies on the map."""
        (ox, oy) = self.origin_m
        return ox <= x < ox + self.width_m and oy <= y < oy + self.height_m

    def occupied_at(self, x: float, y: float) -> bool:
        """Whether the cell holding the point (on the map) is a wall or rack."""
        iy, ix = self.grid(1).plane_index(x, y)
        return bool(self.occupied[iy, ix])

    @property
    def extent(self) -> tuple[float, float, float, float]:
        """(left, right, bottom, top) in metres, site frame: for plots."""
        (ox, oy) = self.origin_m
        return (ox, ox + self.width_m, oy, oy + self.height_m)

    # ----------------------------------------------------------------- derived maps
    def grid(self, headings: int = 36) -> PoseGrid:
        return PoseGrid(self.width_m, self.height_m, self.resolution_m, headings, *self.origin_m)

    @property
    def free(self) -> np.ndarray:
        """(ny, nx) bool: where the robot's reference point may be."""
        return ~self.occupied

    @cached_property
    def distance_m(self) -> np.ndarray:
        """(ny, nx) distance in metres from each cell centre to the nearest obstacle surface.

        The Euclidean distance to the nearest occupied cell centre, less half a cell: a range
        return ends on the face of a wall, half a cell before the centre of its first cell
        (0 inside obstacles)."""
        return self.distance_beyond(0)

    def distance_beyond(self, pad: int) -> np.ndarray:
        """``distance_m`` over the map and ``pad`` cells of open ground around it, (ny + 2 pad, nx + 2 pad).
        A return measured a little long off a border wall ends past the map's edge, yet only as far
        from that wall as its noise put it (an infinite distance there would call it a random return)."""
        from scipy import ndimage  # on first use: importing scipy costs about 0.15 s at start-up

        occupied = np.pad(self.occupied, pad, constant_values=False)
        if not occupied.any():
            return np.full(occupied.shape, np.inf)
        centres = ndimage.distance_transform_edt(~occupied, sampling=self.resolution_m)
        return np.maximum(centres - self.resolution_m / 2, 0.0)

    def marker(self, marker_id: str) -> Marker:
        try:
            return self.markers[self._marker_index[marker_id]]
        except KeyError:
            known = ", ".join(self._marker_index) or "none"
            raise SiteError(f"marker {marker_id!r} is not on the map of site {self.name!r} (known: {known})") from None

    def door(self, name: str) -> Door:
        for d in self.doors:
            if d.name == name:
                return d
        known = ", ".join(d.name for d in self.doors) or "none"
        raise SiteError(f"door {name!r} is not on the map of site {self.name!r} (known: {known})")

    def door_zone(self, door: Door) -> np.ndarray:
        """(ny, nx) bool: free cells within the door's radius on its open side."""
        g = self.grid(1)
        dx = g.x_centres()[None, :] - door.x
        dy = g.y_centres()[:, None] - door.y
        facing = math.radians(door.facing_deg)
        near = dx**2 + dy**2 <= door.radius_m**2
        in_front = dx * math.cos(facing) + dy * math.sin(facing) >= -self.resolution_m / 2
        return near & in_front & self.free

    def ray_range(self, x: float, y: float, angle_rad: float, max_range_m: float) -> float:
        """Distance along a ray to the first occupied cell (marching at a quarter cell), capped at ``max_range_m``."""
        step = self.resolution_m / 4
        t = np.arange(step, max_range_m + step, step)
        px, py = x - self.origin_m[0] + t * math.cos(angle_rad), y - self.origin_m[1] + t * math.sin(angle_rad)
        ix, iy = np.floor(px / self.resolution_m).astype(int), np.floor(py / self.resolution_m).astype(int)
        outside = (ix < 0) | (iy < 0) | (ix >= self.occupied.shape[1]) | (iy >= self.occupied.shape[0])
        hit = outside.copy()
        inside = ~outside
        hit[inside] = self.occupied[iy[inside], ix[inside]]
        first = np.flatnonzero(hit)
        return float(min(t[first[0]], max_range_m)) if first.size else float(max_range_m)
