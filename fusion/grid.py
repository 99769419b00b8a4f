"""The metric frame of discernment for localization: a pose grid.

``PoseGrid`` cells are (heading, row, column) bins laid out heading-major: cell
index = (h · ny + iy) · nx + ix, so one heading slice is a contiguous ``(ny, nx)``
image (motion shifts whole slices) and x varies fastest.  Positions are in metres
in the site's own frame, whose lower-left corner is ``(x0_m, y0_m)`` (the site's origin; 0, 0
unless the case sets one); headings in radians, bin 0 centred on 0 (east), counter-clockwise.

The second frame kind, a graph of places joined by passages, is ``fusion.places``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from fusion.errors import PoseError, ResourceError, SiteError

__all__ = ["PoseGrid", "MAX_CELLS"]

MAX_CELLS = 50_000_000
"""Largest pose grid accepted: at 8 bytes a cell and a few working copies per step, more would not
fit a robot's computer (about 2 GB at this size)."""

_BYTES_PER_CELL_IN_USE = 8 * 5  # float64 belief plus the working copies of one step (measured, rounded up)


def _cells_across(length_m: float, resolution_m: float) -> int:
    """Cells that cover ``length_m`` (a last partial cell counts: every point of the site lies in a cell)."""
    return max(1, math.ceil(length_m / resolution_m - 1e-9))


@dataclass(frozen=True)
class PoseGrid:
    """x, y and heading bins over a rectangular site of ``width_m`` × ``height_m``."""

    width_m: float
    height_m: float
    resolution_m: float
    headings: int = 36
    x0_m: float = 0.0  # the site frame's coordinates of the grid's lower-left corner
    y0_m: float = 0.0

    def __post_init__(self):
        for name in ("width_m", "height_m", "resolution_m"):
            value = getattr(self, name)
            if not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
                raise SiteError(f"grid {name} must be a positive finite number of metres, got {value!r}")
        for name in ("x0_m", "y0_m"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise SiteError(f"grid origin {name} must be a finite number of metres, got {value!r}")
        if isinstance(self.headings, bool) or not isinstance(self.headings, int) or self.headings < 1:
            raise SiteError(f"grid headings must be a whole number ≥ 1, got {self.headings!r}")
        across = (self.width_m / self.resolution_m) * (self.height_m / self.resolution_m) * self.headings
        # In floating point first: a size of 1e300 must not build a 300-digit integer.
        cells = self.nx * self.ny * self.headings if across <= 1e15 else across
        if not cells <= MAX_CELLS:
            gib = cells * _BYTES_PER_CELL_IN_USE / 1024**3
            count = f"{cells:,}" if isinstance(cells, int) else f"{cells:.3g}"
            size = f"{gib:.1f}" if gib < 1e6 else f"{gib:.3g}"
            raise ResourceError(
                f"a {self.width_m:g} m × {self.height_m:g} m site at {self.resolution_m:g} m with {self.headings} "
                f"headings needs {count} cells, about {size} GiB while running (limit {MAX_CELLS:,} cells); use a "
                "coarser resolution or fewer headings"
            )

    # ----------------------------------------------------------------- shape
    @cached_property  # read on every conversion; a frozen dataclass's fields never change
    def nx(self) -> int:
        return _cells_across(self.width_m, self.resolution_m)

    @cached_property
    def ny(self) -> int:
        return _cells_across(self.height_m, self.resolution_m)

    @property
    def shape(self) -> tuple[int, int, int]:
        """Array shape of a belief over the grid: (headings, ny, nx)."""
        return (self.headings, self.ny, self.nx)

    @property
    def n_cells(self) -> int:
        return self.headings * self.ny * self.nx

    @property
    def heading_step(self) -> float:
        return 2 * math.pi / self.headings

    def memory_bytes(self) -> int:
        """Rough memory a back end needs while running on this grid."""
        return self.n_cells * _BYTES_PER_CELL_IN_USE

    # ----------------------------------------------------------------- centres
    def x_centres(self) -> np.ndarray:
        return self.x0_m + (np.arange(self.nx) + 0.5) * self.resolution_m

    def y_centres(self) -> np.ndarray:
        return self.y0_m + (np.arange(self.ny) + 0.5) * self.resolution_m

    @property
    def x_span(self) -> tuple[float, float]:
        """Lowest and highest x on the site (metres, site frame)."""
        return (self.x0_m, self.x0_m + self.width_m)

    @property
    def y_span(self) -> tuple[float, float]:
        return (self.y0_m, self.y0_m + self.height_m)

    def heading_centres(self) -> np.ndarray:
        return np.arange(self.headings) * self.heading_step

    # ----------------------------------------------------------------- conversions
    def cell_of(self, x: float, y: float, heading: float = 0.0) -> int:
        """Cell holding the pose (x, y, heading); ``PoseError`` when it is off the site or not finite."""
        ix, iy, ih = self._bins(np.asarray([x]), np.asarray([y]), np.asarray([heading]))
        return int((ih[0] * self.ny + iy[0]) * self.nx + ix[0])

    def cells_of(self, x, y, heading) -> np.ndarray:
        """Vectorised ``cell_of`` for arrays of poses."""
        ix, iy, ih = self._bins(np.asarray(x, float), np.asarray(y, float), np.asarray(heading, float))
        return (ih * self.ny + iy) * self.nx + ix

    def pose_of(self, cell: int) -> tuple[float, float, float]:
        """Centre (x, y, heading) of a cell."""
        if isinstance(cell, bool) or not isinstance(cell, (int, np.integer)) or not 0 <= cell < self.n_cells:
            raise PoseError(f"cell {cell!r} is not a cell of this grid (valid: 0 to {self.n_cells - 1})")
        ih, rest = divmod(int(cell), self.ny * self.nx)
        iy, ix = divmod(rest, self.nx)
        return (
            float(self.x0_m + (ix + 0.5) * self.resolution_m),
            float(self.y0_m + (iy + 0.5) * self.resolution_m),
            float(ih * self.heading_step),
        )

    def poses_of(self, cells) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        cells = np.asarray(cells, dtype=np.int64)
        ih, rest = np.divmod(cells, self.ny * self.nx)
        iy, ix = np.divmod(rest, self.nx)
        return (
            self.x0_m + (ix + 0.5) * self.resolution_m,
            self.y0_m + (iy + 0.5) * self.resolution_m,
            ih * self.heading_step,
        )

    def heading_bin(self, heading) -> np.ndarray:
        return np.round(np.asarray(heading, float) / self.heading_step).astype(np.int64) % self.headings

    def _bins(self, x, y, heading):
        for name, v in (("x", x), ("y", y), ("heading", heading)):
            if not np.isfinite(v).all():
                raise PoseError(f"pose {name} must be a finite number, got {v[~np.isfinite(v)][0]!r}")
        x, y = x - self.x0_m, y - self.y0_m
        off = (x < 0) | (x >= self.width_m) | (y < 0) | (y >= self.height_m)
        if off.any():
            i = int(np.flatnonzero(off)[0])
            raise PoseError(
                f"position ({float(x[i] + self.x0_m):.3f} m, {float(y[i] + self.y0_m):.3f} m) is off the site, which "
                f"spans {self.spans()}"
            )
        ix = np.minimum((x / self.resolution_m).astype(np.int64), self.nx - 1)
        iy = np.minimum((y / self.resolution_m).astype(np.int64), self.ny - 1)
        return ix, iy, self.heading_bin(heading)

    def spans(self) -> str:
        """The site's extent for messages: "x 0–30 m, y 0–20 m"."""
        (xa, xb), (ya, yb) = self.x_span, self.y_span
        return f"{xa:g}–{xb:g} m in x and {ya:g}–{yb:g} m in y"

    def plane_index(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """(row, column) of the plane cells holding positions (x, y), clipped to the site (no error off it)."""
        ix = np.clip(np.floor((np.asarray(x, float) - self.x0_m) / self.resolution_m), 0, self.nx - 1).astype(np.int64)
        iy = np.clip(np.floor((np.asarray(y, float) - self.y0_m) / self.resolution_m), 0, self.ny - 1).astype(np.int64)
        return iy, ix

    def broadcast(self, plane: np.ndarray) -> np.ndarray:
        """Repeat a ``(ny, nx)`` map (e.g. free space) over every heading, flattened to one value per cell."""
        plane = np.asarray(plane)
        if plane.shape != (self.ny, self.nx):
            raise SiteError(f"a map plane must have shape (ny, nx) = {(self.ny, self.nx)}, got {plane.shape}")
        return np.broadcast_to(plane, self.shape).reshape(-1)
