"""The prior of a known start on a pose grid: a disc of positions and a band of headings around the pose, or a
Gaussian with a given covariance, on the free cells (``Localizer.start_at``)."""

from __future__ import annotations

import math

import numpy as np

from fusion.errors import ObservationError
from fusion.grid import PoseGrid

__all__ = ["known_start_prior"]


def known_start_prior(
    grid: PoseGrid, free: np.ndarray, x_m, y_m, heading_deg, radius_m=0.5, heading_tol_deg=15.0, covariance=None
) -> np.ndarray:
    """Every free cell (``free``: one bool per cell) within ``radius_m`` and ``heading_tol_deg`` of the pose, alike;
    or, given a 3 × 3 ``covariance`` in (m, m, rad), that Gaussian around the pose on the free cells.  ``PoseError``
    when the pose is off the site; ``ObservationError`` when no free cell is within reach."""
    grid.cell_of(x_m, y_m, math.radians(heading_deg))  # PoseError if off the site
    if covariance is not None:
        from fusion.backends.gaussian_grid import GridView
        from fusion.belief.gaussian import PoseGaussian, check_covariance

        cov = check_covariance(covariance, "start covariance")
        mean = np.array([x_m, y_m, math.radians(heading_deg) % (2 * math.pi)])
        prior = GridView(grid, free).density(PoseGaussian(mean, cov)) * free
    else:
        xs, ys, hs = grid.poses_of(np.arange(grid.n_cells))
        near = (xs - x_m) ** 2 + (ys - y_m) ** 2 <= max(radius_m, grid.resolution_m) ** 2
        dh = np.abs((np.degrees(hs) - heading_deg + 180.0) % 360.0 - 180.0)
        prior = (near & (dh <= max(heading_tol_deg, math.degrees(grid.heading_step) / 2)) & free).astype(np.float64)
    if not prior.any():
        reach = "the start covariance's reach" if covariance is not None else f"{radius_m} m"
        raise ObservationError(f"no free cell within {reach} of ({x_m}, {y_m}); is the start inside a rack?")
    return prior
