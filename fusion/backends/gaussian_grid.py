"""A Gaussian pose belief seen on a pose grid, and a Gaussian found in a histogram.

- ``GridView.cells``: the cells of a window around the mean (``WINDOW_SIGMAS`` standard deviations in x, y
  and heading), with each cell's squared Mahalanobis distance from the mean (heading differences wrapped);
- ``GridView.density``: the probability of each cell, normalised over free space: what every tool that reads
  a probability per cell reads.  A cell holds the Gaussian's integral over it, taken as the density at its
  centre of the Gaussian widened by a uniform cell's spread (res²/12 per axis, Δθ²/12 in heading; the
  variance of a uniform distribution), so a Gaussian narrower than a cell still spreads over the cells it
  straddles instead of sitting on the one whose centre is nearest;
- ``GridView.absorbed``: a reading with no linearisable model (a quiet door contact, a marker camera that
  saw nothing, a sensor kind registered without one) applied by moment matching on the window: the
  Gaussian times the reading's likelihood, its mean and covariance kept (an assumed-density update,
  Maybeck 1982, *Stochastic Models, Estimation and Control*, vol. 2, §12.7, from memory).  The moments of
  the Gaussian itself on the same cells are subtracted, so the grid's rounding cancels to first order;
- ``best_mode``: a histogram's most probable mode as a Gaussian (re-seeding the Gaussian filter), with the
  share of probability it holds and its spread, so the filter can say why it will not collapse to it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fusion.belief.gaussian import PoseGaussian, wrap
from fusion.grid import PoseGrid

__all__ = ["GridView", "Mode", "best_mode", "cell_spread", "WINDOW_SIGMAS", "MODE_FLOOR"]

WINDOW_SIGMAS = 4.5
"""Half-width of the window in standard deviations (beyond it the density is below 4e-5 of the peak per axis)."""
MODE_FLOOR = 1e-3
"""A histogram's best mode: the cells connected to the most probable one holding at least this share of its
probability: the level at which the conflict figures count a cell as still possible (``SUPPORT_SHARE``).  A
Gaussian cut there (squared Mahalanobis distance 13.8 in the plane) keeps 99.9% of its probability and 99.3%
of its variance; cut at 1% it would keep 95%."""


class GridView:
    """A Gaussian on a grid, with the site's free cells."""

    def __init__(self, grid: PoseGrid, free: np.ndarray):
        self.grid, self.free = grid, free

    def cells(
        self, belief: PoseGaussian, sigmas: float = WINDOW_SIGMAS, per_cell: bool = False
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(cells, offsets (k, 3) from the mean with the heading wrapped, squared Mahalanobis distances);
        ``per_cell``: distances under the covariance widened by a cell's spread (the cell's integral)."""
        if per_cell:
            belief = PoseGaussian(belief.mean, belief.cov + cell_spread(self.grid))
        g = self.grid
        sd = np.sqrt(np.maximum(np.diag(belief.cov), 0.0))
        ix = _span(belief.x, sd[0] * sigmas, g.x0_m, g.resolution_m, g.nx)
        iy = _span(belief.y, sd[1] * sigmas, g.y0_m, g.resolution_m, g.ny)
        half = sd[2] * sigmas
        if half >= math.pi:
            ih = np.arange(g.headings)
        else:
            lo = int(math.floor((belief.heading - half) / g.heading_step))
            hi = int(math.ceil((belief.heading + half) / g.heading_step))
            ih = np.unique(np.arange(lo, hi + 1) % g.headings)
        hh, yy, xx = np.meshgrid(ih, iy, ix, indexing="ij")
        cells = ((hh * g.ny + yy) * g.nx + xx).reshape(-1)
        x, y, h = g.poses_of(cells)
        offsets = np.column_stack([x - belief.x, y - belief.y, wrap(h - belief.heading)])
        inv = np.linalg.inv(belief.cov)
        d2 = np.einsum("ki,ij,kj->k", offsets, inv, offsets)
        return cells, offsets, d2

    def density(self, belief: PoseGaussian) -> np.ndarray:
        """Probability per cell (shape (n_cells,)): the Gaussian at the window's cell centres, normalised over
        the free ones (over all of them when none is free: the belief has left the map)."""
        cells, _, d2 = self.cells(belief, per_cell=True)
        w = np.exp(-0.5 * (d2 - d2.min()))
        on_free = w * self.free[cells]
        if on_free.sum() > 0:
            w = on_free
        out = np.zeros(self.grid.n_cells)
        out[cells] = w / w.sum()
        return out

    def support(self, belief: PoseGaussian, share: float) -> np.ndarray:
        """The free cells whose density is at least ``share`` of the densest cell's (squared Mahalanobis
        distance within 2 log(1 / share) of the nearest cell); the nearest cell when none is free."""
        cells, _, d2 = self.cells(belief, per_cell=True)
        keep = (d2 <= d2.min() + 2.0 * math.log(1.0 / share)) & self.free[cells]
        return cells[keep] if keep.any() else cells[[int(np.argmin(d2))]]

    def absorbed(self, belief: PoseGaussian, likelihood: np.ndarray) -> tuple[PoseGaussian, float] | None:
        """The belief after a reading of per-cell ``likelihood`` by moment matching on the window, and log
        p(z | past) on the likelihood's scale; None when the window gives the reading no weight."""
        cells, offsets, d2 = self.cells(belief)
        prior = np.exp(-0.5 * (d2 - d2.min())) * self.free[cells]
        if prior.sum() <= 0:
            prior = np.exp(-0.5 * (d2 - d2.min()))
        post = prior * likelihood[cells]
        z = float(post.sum())
        if z <= 0:
            return None
        m0, c0 = _moments(offsets, prior)
        m1, c1 = _moments(offsets, post)
        mean = belief.mean + (m1 - m0)
        mean[2] %= 2 * math.pi
        cov = _positive(belief.cov + (c1 - c0), belief.cov)
        return PoseGaussian(mean, cov), math.log(z / float(prior.sum()))


def cell_spread(grid: PoseGrid) -> np.ndarray:
    """The covariance of a pose uniform over one cell (res²/12, res²/12, Δθ²/12)."""
    return np.diag([grid.resolution_m**2 / 12, grid.resolution_m**2 / 12, grid.heading_step**2 / 12])


def _span(centre: float, half: float, origin: float, res: float, n: int) -> np.ndarray:
    """Indices of the cells within ``half`` of ``centre`` along one axis (at least the cell holding it)."""
    lo = int(math.floor((centre - half - origin) / res))
    hi = int(math.floor((centre + half - origin) / res))
    mid = min(max(int(math.floor((centre - origin) / res)), 0), n - 1)
    lo, hi = min(max(lo, 0), mid), max(min(hi, n - 1), mid)
    return np.arange(lo, hi + 1)


def _moments(offsets: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    w = w / w.sum()
    mean = w @ offsets
    d = offsets - mean
    return mean, (d * w[:, None]).T @ d


def _positive(cov: np.ndarray, fallback: np.ndarray) -> np.ndarray:
    """``cov`` made symmetric with its eigenvalues kept above a millionth of the fallback's smallest."""
    cov = 0.5 * (cov + cov.T)
    vals, vecs = np.linalg.eigh(cov)
    floor = 1e-6 * float(np.linalg.eigvalsh(fallback).min())
    if vals.min() >= floor:
        return cov
    vals = np.maximum(vals, floor)
    return (vecs * vals) @ vecs.T


@dataclass(frozen=True)
class Mode:
    """A histogram's best mode as a Gaussian: the share of probability in it and its RMS spread."""

    belief: PoseGaussian
    share: float
    spread_m: float
    heading_spread_deg: float


def best_mode(grid: PoseGrid, p: np.ndarray, at_least: float = 0.0, within_m: float = math.inf) -> Mode | None:
    """The most probable mode of a probability per cell (``MODE_FLOOR``), as a Gaussian of its moments with
    the spread of a uniform cell added (res²/12 per axis, Δθ²/12 in heading): each cell is read as a uniform
    pose over it.  For a histogram of a smooth density (cell integrals, as ``GridView.density`` gives) that
    reads the variance one cell's spread wide, on top of the cell's spread the grouping itself adds (Sheppard
    1898); the error is on the wide side on purpose (an EKF seeded too narrow gates out the readings that would
    correct it), and it keeps a mode of one heading bin from a singular covariance.

    None for an all-zero ``p``; None too when the mode holds less than ``at_least`` of it, or spreads wider than
    ``within_m``: a caller that would not use such a mode is spared its moments, most of the work on a wide mode.
    Both are first judged on the heading-summed plane, which needs no pass over every cell; only a figure within
    ``ROUNDING`` of its bound is worked out on the cells, so the answer is the one the cells give."""
    from scipy import ndimage

    cube = p.reshape(grid.shape)
    plane = cube.sum(axis=0)
    top = float(plane.max())
    if top <= 0:
        return None
    labels, _ = ndimage.label(plane >= MODE_FLOOR * top, structure=np.ones((3, 3)))
    iy, ix = np.unravel_index(int(np.argmax(plane)), plane.shape)
    inside = labels == labels[iy, ix]
    if not _may_hold(grid, np.where(inside, plane, 0.0), float(plane.sum()), at_least, within_m):
        return None
    weights = cube * inside[None]
    share = float(weights.sum()) / float(p.sum())
    if share < at_least:
        return None
    rows, cols = np.flatnonzero(inside.any(axis=1)), np.flatnonzero(inside.any(axis=0))
    box = weights[:, rows[0] : rows[-1] + 1, cols[0] : cols[-1] + 1]  # the mode's cells lie in its bounding box
    hh, yy, xx = np.nonzero(box)  # in the order of the whole cube's cells
    cells = (hh * grid.ny + yy + rows[0]) * grid.nx + xx + cols[0]
    w = box[hh, yy, xx]
    x, y, h = grid.poses_of(cells)
    ww = w / w.sum()
    heading = math.atan2(float(ww @ np.sin(h)), float(ww @ np.cos(h))) % (2 * math.pi)
    centre = np.array([float(ww @ x), float(ww @ y), heading])
    offsets = np.column_stack([x - centre[0], y - centre[1], wrap(h - heading)])
    cov = (offsets * ww[:, None]).T @ offsets
    cov += cell_spread(grid)
    spread = math.sqrt(float(cov[0, 0] + cov[1, 1]))
    if spread > within_m:
        return None
    return Mode(PoseGaussian(centre, 0.5 * (cov + cov.T)), share, spread, math.degrees(math.sqrt(float(cov[2, 2]))))


ROUNDING = 1e-6
"""How far apart two float64 sums of the same positive terms in another order may be, relatively, at the most:
pairwise summation of n terms errs by about log₂(n)·2⁻⁵³ (Higham 1993, "The accuracy of floating point
summation"), some 3e-15 for 10⁸ cells; the bound is set far wider, at no cost but a rare extra pass."""


def _may_hold(grid: PoseGrid, held: np.ndarray, total: float, at_least: float, within_m: float) -> bool:
    """False when the mode, its probability per position ``held`` out of ``total``, surely holds less than
    ``at_least`` or surely spreads wider than ``within_m`` (RMS, a cell's spread included, as ``best_mode``):
    the same sums as on the cells, in another order, beyond ``ROUNDING``."""
    mass = float(held.sum())
    if mass < at_least * total * (1 - ROUNDING):
        return False
    if not math.isfinite(within_m):
        return True
    px, py = held.sum(axis=0), held.sum(axis=1)
    xs, ys = grid.x_centres(), grid.y_centres()
    mx, my = float(px @ xs) / mass, float(py @ ys) / mass
    var = (float(px @ (xs - mx) ** 2) + float(py @ (ys - my) ** 2)) / mass + grid.resolution_m**2 / 6
    return var <= within_m**2 * (1 + ROUNDING)
