"""Applying one odometry step to a belief on a pose grid, for each kind of belief.

- ``predict_density``: the Bayesian prediction.  Each heading slice is shifted by
  its own displacement and blurred with the odometry noise; then headings are
  rotated and blurred (wrapping round).  Each 1-D kernel is a discrete Gaussian
  convolved with the linear split of the fractional shift, so the mean moves by
  exactly the odometry and the variance grows by σ² plus at most 1/4 cell² (grid error).
- ``dilate_density``: the bounded motion of the evidential contour (its running maximum over the bound).
- ``predict_sets``: the set-valued motion of the mass side's focal sets, in ``fusion.motion_sets`` (re-exported
  here with ``move_sets``, ``bound_offsets``, ``SlicedSets`` and ``SubCellMotion``).
"""

from __future__ import annotations

import functools
import math

import numpy as np

from fusion import compiled
from fusion.motion_sets import SlicedSets, SubCellMotion, bound_offsets, move_sets, predict_sets
from fusion.sensors.odometry import Motion

__all__ = [
    "predict_density",
    "predict_on_free",
    "predict_into",
    "predict_sets",
    "move_sets",
    "dilate_density",
    "bound_offsets",
    "shift_kernel",
    "SlicedSets",
    "SubCellMotion",
    "MOTION_MODELS",
]

MOTION_MODELS = ("probabilistic", "bounded")
"""How the evidential back end applies odometry (``[run] motion``): the odometry error model convolved
with the belief, as on the Bayes side, or every pose within the error bound (set-valued)."""


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


def _tap_table(shifts: np.ndarray, sigma: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``shift_kernel``'s taps of every shift in ``shifts`` (one per heading), weights under 1e-15 of the total dropped,
    as padded tables (offsets, weights, counts): row h holds heading h's taps in its first counts[h] entries.  The
    Gaussian is built once per σ, and the weights are the same, bit for bit, as ``shift_kernel`` gives each shift (the
    same operations on the same numbers).  A row's kept taps are one run: both of its terms rise to their peaks (one
    offset apart) and fall after, so their sum does too, and the taps above 1e-15 of it are consecutive."""
    gauss, rolled = _gaussian(sigma)
    shifts = np.asarray(shifts, dtype=np.float64)
    wholes = np.floor(shifts)
    fracs = shifts - wholes
    weights = (1 - fracs)[:, None] * gauss + fracs[:, None] * rolled
    keep = weights > 1e-15
    counts, first = keep.sum(axis=1), keep.argmax(axis=1)
    columns = np.minimum(first[:, None] + np.arange(max(int(counts.max(initial=0)), 1)), gauss.size - 1)
    offsets = wholes.astype(np.int64)[:, None] + columns - gauss.size // 2
    return offsets, np.take_along_axis(weights, columns, axis=1), counts.astype(np.int64)


def _tap_tables(across: np.ndarray, along: np.ndarray, sigma: float):
    """``_tap_table`` of the x shifts and of the y shifts, made as one table; each part keeps its own counts, so
    padding changes nothing.  With the compiled loops, made by one of them (``tap_tables``: the same weights,
    tested), whose table is padded with zeros to the Gaussian's width; otherwise by numpy."""
    across = np.ascontiguousarray(across, dtype=np.float64).reshape(-1)
    along = np.ascontiguousarray(along, dtype=np.float64).reshape(-1)
    n = across.size
    loops = compiled.kernels()
    if loops is None:
        offsets, weights, counts = _tap_table(np.concatenate((across, along)), sigma)
    else:
        gauss, rolled = _gaussian(sigma)
        rows = n + along.size
        offsets, weights = np.zeros((rows, gauss.size), np.int64), np.zeros((rows, gauss.size))
        counts = np.zeros(rows, np.int64)
        loops.tap_tables(across, along, gauss, rolled, offsets, weights, counts)
    return (offsets[:n], weights[:n], counts[:n]), (offsets[n:], weights[n:], counts[n:])


@functools.lru_cache(maxsize=16)
def _gaussian(sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """``shift_kernel``'s Gaussian for σ (its ends emptied, normalised) and the same rolled one offset on, read-only:
    an odometry model's σ is fixed, and building them was a fifth of the tap tables' time (measured)."""
    _, gauss = shift_kernel(0.0, sigma)  # frac 0: the Gaussian itself
    rolled = np.roll(gauss, 1)
    gauss.flags.writeable = rolled.flags.writeable = False
    return gauss, rolled


def _overlap(shape: tuple, offset: int, axis: int):
    """(destination, source) index tuples of a move by ``offset`` cells along ``axis``; None when nothing
    stays on the array."""
    n = shape[axis]
    if abs(offset) >= n:
        return None
    dst = [slice(None)] * len(shape)
    src = [slice(None)] * len(shape)
    dst[axis] = slice(max(0, offset), n + min(0, offset))
    src[axis] = slice(max(0, -offset), n - max(0, offset))
    return tuple(dst), tuple(src)


def _convolve_zero(plane: np.ndarray, taps, axis: int) -> np.ndarray:
    """Σ w · (plane moved by offset along ``axis``), zero-filled: mass moving off the map is lost."""
    out = np.zeros_like(plane)
    for offset, w in taps:
        where = _overlap(plane.shape, offset, axis)
        if where is not None:
            out[where[0]] += w * plane[where[1]]
    return out


def predict_density(
    belief: np.ndarray,
    motion: Motion,
    sigma: float | None = None,
    sigma_turn: float | None = None,
    free: np.ndarray | None = None,
    out: np.ndarray | None = None,
) -> np.ndarray:
    """Predicted density of shape (headings, ny, nx); not renormalised (mass may leave the map).  ``free``: a mask of
    the same shape (or one entry per cell); the density is set to 0 where it is False.  ``out``: a C-ordered float64
    buffer of as many cells to write it into (not the belief itself).

    Kernels are short (a move of a few tenths of a metre has two or three taps per axis), so
    the convolutions are written as a few shifted multiply-adds per heading slice; with numba
    installed a compiled loop does the same operations a block of rows at a time (``fusion.compiled``).
    """
    return _density(belief, motion, sigma, sigma_turn, free, out)[0]


def _density(belief, motion, sigma, sigma_turn, free, out) -> tuple[np.ndarray, int | None]:
    """``predict_density``, and the fixed-point sum of what it wrote when the compiled loop made it (None otherwise;
    see ``predict_into``)."""
    sigma = motion.sigma if sigma is None else sigma
    sigma_turn = motion.sigma_turn if sigma_turn is None else sigma_turn
    across, along = _tap_tables(motion.dx, motion.dy, sigma)
    turn = _turn_taps(motion.turn, sigma_turn, belief.shape[0])
    mask = None if free is None else np.asarray(free, dtype=bool).reshape(belief.shape)
    loops = compiled.kernels()
    if out is not None and not (out.dtype == np.float64 and out.flags.c_contiguous and out.size == belief.size):
        raise ValueError(f"out must be a C-ordered float64 buffer of {belief.size} cells")
    if loops is not None and belief.dtype == np.float64:
        target = np.empty(belief.shape) if out is None else out.reshape(belief.shape)
        given = _NO_MASK if mask is None else np.ascontiguousarray(mask)
        total = loops.predict_density(np.ascontiguousarray(belief), *across, *along, *_pair(turn), given, target, _UNIT)
        return target, int(total)
    target = _predict_numpy(belief, across, along, turn)
    if out is not None:  # the numpy code makes its own array: copied into the caller's buffer
        np.copyto(out.reshape(belief.shape), target)
        target = out.reshape(belief.shape)
    if mask is not None:
        target *= mask
    return target, None


_NO_MASK = np.zeros((0, 0, 0), dtype=bool)

_UNIT = 2.0**62
"""Fixed-point unit of a prediction's total (``predict_into``): a normalised belief's prediction holds at most 1,
so its integer sum stays below 2⁶², inside an int64."""


def predict_into(belief: np.ndarray, motion: Motion, free: np.ndarray, out: np.ndarray) -> float | None:
    """``predict_on_free`` of a normalised belief (it sums to 1) written into the flat buffer ``out``, and the sum of
    what it wrote, for renormalising it: Σ ⌊v · 2⁶²⌋ / 2⁶², which the compiled loop adds up as it writes (integer sums
    are exact in any order, so numpy's sum of the same integers is the same number).  Each cell truncated drops less
    than 2⁻⁶² of it: under 3·10⁻¹³ over 1.4 M cells, so it is used only when the prediction kept at least half the
    mass (a relative error under 6·10⁻¹³).  None otherwise, or when the wheels may have slipped: sum ``out`` then."""
    if motion.reliability != 1.0:
        predict_on_free(belief, motion, free, out=out)
        return None
    target, fixed = _density(belief, motion, None, None, free, out)
    if fixed is None:  # the numpy code: the compiled loop's integers, summed
        fixed = int((target * _UNIT).astype(np.int64).sum())
    return fixed / _UNIT if fixed >= _UNIT / 2 else None


def predict_on_free(belief: np.ndarray, motion: Motion, free: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """The prediction both grid filters apply, flat and 0 off ``free``: with probability 1 − reliability the wheels
    slipped and the move is known only within the slip bound, so that prediction is mixed in; without slip the
    mask is applied as the prediction is made.  ``out``: a flat float64 buffer to write it into."""
    if motion.reliability == 1.0:
        return predict_density(belief, motion, free=free, out=out).reshape(-1)
    moved = predict_density(belief, motion)
    slipped = predict_density(belief, motion, sigma=motion.slip / 2, sigma_turn=motion.slip_turn / 2)
    mixed = np.multiply(moved, motion.reliability, out=None if out is None else out.reshape(moved.shape))
    mixed += (1.0 - motion.reliability) * slipped
    mixed = mixed.reshape(-1)
    mixed *= np.asarray(free).reshape(-1)
    return mixed


def _turn_taps(turn: float, sigma_turn: float, headings: int) -> dict[int, float]:
    """The heading kernel's taps (``shift_kernel``'s, weights under 1e-15 dropped) with each offset folded round the
    circle (headings wrap).  Built in plain floats from the cached Gaussian: the same operations on the same numbers
    as ``shift_kernel``'s arrays, so the same weights (tested), in 1 µs against 14 for the arrays (measured)."""
    gauss, rolled = _gaussian_values(sigma_turn)
    whole = math.floor(turn)
    frac = turn - whole
    keep = 1 - frac
    start = whole - len(gauss) // 2
    taps: dict[int, float] = {}
    for i, (g, r) in enumerate(zip(gauss, rolled)):
        w = keep * g + frac * r
        if w > 1e-15:
            offset = (start + i) % headings
            taps[offset] = taps.get(offset, 0.0) + w
    return taps


@functools.lru_cache(maxsize=16)
def _gaussian_values(sigma: float) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """``_gaussian(sigma)`` as tuples of floats."""
    gauss, rolled = _gaussian(sigma)
    return tuple(gauss.tolist()), tuple(rolled.tolist())


def _pair(taps: dict[int, float]) -> tuple[np.ndarray, np.ndarray]:
    return np.array(list(taps), dtype=np.int64), np.array(list(taps.values()), dtype=np.float64)


def _row_taps(table: tuple[np.ndarray, np.ndarray, np.ndarray], h: int) -> list[tuple[int, float]]:
    offsets, weights, counts = table
    return list(zip(offsets[h, : counts[h]].tolist(), weights[h, : counts[h]].tolist()))


def _predict_numpy(belief: np.ndarray, across, along, turn: dict[int, float]) -> np.ndarray:
    """The numpy prediction (the reference for the compiled loop)."""
    headings = belief.shape[0]
    moved = np.empty_like(belief)
    for h in range(headings):
        plane = _convolve_zero(belief[h], _row_taps(across, h), axis=1)
        moved[h] = _convolve_zero(plane, _row_taps(along, h), axis=0)
    out = np.empty_like(belief)
    for h in range(headings):
        first = True
        for offset, w in turn.items():
            src = moved[(h - offset) % headings]
            if first:
                np.multiply(src, w, out=out[h])
                first = False
            else:
                out[h] += w * src
    return out


def _max_shifted(plane: np.ndarray, lo: int, hi: int, axis: int) -> np.ndarray:
    """out[i] = max over offsets o in [lo, hi] of plane[i − o] along ``axis`` (zero where nothing lands).

    Offsets are covered by doubling: after the first shift each pass takes the maximum with a copy
    moved by the width covered so far, about log2(hi − lo + 1) passes."""
    out = _moved(plane, lo, axis)
    covered = 1
    width = hi - lo + 1
    while covered < width:
        step = min(covered, width - covered)
        np.maximum(out, _moved(out, step, axis), out=out)
        covered += step
    return out


def _moved(plane: np.ndarray, offset: int, axis: int) -> np.ndarray:
    """``plane`` moved by ``offset`` cells along ``axis``, zero-filled."""
    out = np.zeros_like(plane)
    where = _overlap(plane.shape, offset, axis)
    if where is not None:
        out[where[0]] = plane[where[1]]
    return out


def dilate_density(values: np.ndarray, x, y, turn) -> np.ndarray:
    """Grey-scale dilation of a (headings, ny, nx) array by integer offset intervals: cell c of heading
    slice h receives the largest value among the cells c − o for o in [x_lo[h], x_hi[h]] × [y_lo[h], y_hi[h]],
    then slice h takes the largest over the slices h − t for t in ``turn`` (headings wrap).

    For a contour this is set-valued motion: a consonant belief whose every focal set is moved to every
    pose within the bound keeps its contour's running maximum (``fusion.belief.contour``)."""
    headings = values.shape[0]
    moved = np.empty_like(values)
    for h in range(headings):
        plane = _max_shifted(values[h], int(x[0][h]), int(x[1][h]), axis=1)
        moved[h] = _max_shifted(plane, int(y[0][h]), int(y[1][h]), axis=0)
    t_lo, t_hi = int(turn[0]), int(turn[1])
    if t_hi - t_lo + 1 >= headings:
        return np.broadcast_to(moved.max(axis=0), moved.shape).copy()
    out = np.roll(moved, t_lo, axis=0)
    for t in range(t_lo + 1, t_hi + 1):
        np.maximum(out, np.roll(moved, t, axis=0), out=out)
    return out
