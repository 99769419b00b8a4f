"""Applying one odometry step to a belief on a pose grid, for each kind of belief.

- ``predict_density``: the Bayesian prediction.  Each heading slice is shifted by
  its own displacement and blurred with the odometry noise; then headings are
  rotated and blurred (wrapping round).  Each 1-D kernel is a discrete Gaussian
  convolved with the linear split of the fractional shift, so the mean moves by
  exactly the odometry and the variance grows by σ² plus at most 1/4 cell² (grid error).
- ``predict_sets``: the set-valued motion of the mass side.  Each focal set is
  moved and dilated by the odometry's error bound: it becomes the set of every
  pose reachable from it by a move within the bound (headings wrap).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

from fusion.sensors.odometry import Motion

__all__ = ["predict_density", "predict_sets", "shift_kernel"]


def shift_kernel(shift: float, sigma: float) -> tuple[int, np.ndarray]:
    """(integer part, weights over offsets −R..R) moving mass by ``shift`` with noise ``sigma`` (cells)."""
    whole = math.floor(shift)
    frac = shift - whole
    radius = int(math.ceil(4 * sigma)) + 1
    offsets = np.arange(-radius, radius + 1)
    if sigma > 1e-6:
        gauss = np.exp(-0.5 * (offsets / sigma) ** 2)
    else:
        gauss = (offsets == 0).astype(np.float64)
    gauss[0] = gauss[-1] = 0.0  # keep the ends empty so the roll below never wraps mass round
    gauss /= gauss.sum()
    # Split each cell's mass between offsets 0 and +1 in proportion (1 − frac, frac).
    weights = (1 - frac) * gauss + frac * np.roll(gauss, 1)
    return whole, weights


def _shift_zero(a: np.ndarray, s: int, axis: int) -> np.ndarray:
    """``a`` moved by ``s`` cells along ``axis``, zero-filled (mass moving off the map is lost)."""
    if s == 0:
        return a
    out = np.zeros_like(a)
    n = a.shape[axis]
    if abs(s) >= n:
        return out
    src = [slice(None)] * a.ndim
    dst = [slice(None)] * a.ndim
    src[axis], dst[axis] = (slice(0, n - s), slice(s, n)) if s > 0 else (slice(-s, n), slice(0, n + s))
    out[tuple(dst)] = a[tuple(src)]
    return out


def predict_density(
    belief: np.ndarray, motion: Motion, sigma: float | None = None, sigma_turn: float | None = None
) -> np.ndarray:
    """Predicted density of shape (headings, ny, nx); not renormalised (mass may leave the map)."""
    sigma = motion.sigma if sigma is None else sigma
    sigma_turn = motion.sigma_turn if sigma_turn is None else sigma_turn
    out = np.empty_like(belief)
    for h in range(belief.shape[0]):
        sx, kx = shift_kernel(motion.dx[h], sigma)
        sy, ky = shift_kernel(motion.dy[h], sigma)
        plane = _shift_zero(_shift_zero(belief[h], sx, 1), sy, 0)
        plane = ndimage.convolve1d(plane, kx, axis=1, mode="constant")
        ndimage.convolve1d(plane, ky, axis=0, mode="constant", output=out[h])
    st, kt = shift_kernel(motion.turn, sigma_turn)
    if len(kt) > belief.shape[0]:  # a heading blur wider than the circle: fold the kernel round it
        folded = np.zeros(belief.shape[0])
        np.add.at(folded, (np.arange(len(kt)) - len(kt) // 2) % belief.shape[0], kt)
        kt = np.roll(folded, len(folded) // 2)
    out = np.roll(out, st, axis=0)
    return ndimage.convolve1d(out, kt, axis=0, mode="wrap")


def _dilate_zero(a: np.ndarray, lo: int, hi: int, axis: int) -> np.ndarray:
    """OR of ``a`` shifted by every offset in [lo, hi] along ``axis`` (zero-filled), in O(log width) passes."""
    cur = _shift_zero(a, lo, axis)
    covered, width = 1, hi - lo + 1
    while covered < width:
        step = min(covered, width - covered)
        cur = cur | _shift_zero(cur, step, axis)
        covered += step
    return cur


def _dilate_wrap(a: np.ndarray, lo: int, hi: int, axis: int) -> np.ndarray:
    n = a.shape[axis]
    if hi - lo + 1 >= n:
        return np.broadcast_to(a.any(axis=axis, keepdims=True), a.shape).copy()
    cur = np.roll(a, lo, axis=axis)
    covered, width = 1, hi - lo + 1
    while covered < width:
        step = min(covered, width - covered)
        cur = cur | np.roll(cur, step, axis=axis)
        covered += step
    return cur


def predict_sets(
    masks: np.ndarray, motion: Motion, bound: int | None = None, bound_turn: int | None = None
) -> np.ndarray:
    """Set-valued motion of boolean focal sets of shape (k, headings, ny, nx)."""
    bound = motion.bound if bound is None else bound
    bound_turn = motion.bound_turn if bound_turn is None else bound_turn
    out = np.empty_like(masks)
    for h in range(masks.shape[1]):
        x_lo, x_hi = math.floor(motion.dx[h] - bound), math.ceil(motion.dx[h] + bound)
        y_lo, y_hi = math.floor(motion.dy[h] - bound), math.ceil(motion.dy[h] + bound)
        plane = _dilate_zero(masks[:, h], x_lo, x_hi, axis=2)
        out[:, h] = _dilate_zero(plane, y_lo, y_hi, axis=1)
    t_lo, t_hi = math.floor(motion.turn - bound_turn), math.ceil(motion.turn + bound_turn)
    return _dilate_wrap(out, t_lo, t_hi, axis=1)
