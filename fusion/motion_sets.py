"""Set-valued motion of packed focal sets on a pose grid (the mass side's ``bounded`` motion).

``predict_sets``: each focal set is moved and dilated by the odometry's error bound: it becomes the set of every
pose reachable from it by a move within the bound (headings wrap).  It works on the packed words themselves: a
move of s cells in x is a shift of s bits, in y of s·nx bits, so a whole step costs a few passes over the packed
sets and never unpacks them to one byte per cell.  ``SubCellMotion`` carries the part of the motion that has not
yet moved the sets.  ``fusion.motion`` re-exports these names.
"""

from __future__ import annotations

import math

import numpy as np

from fusion.belief import bitset
from fusion.grid import PoseGrid
from fusion.sensors.odometry import Motion

__all__ = ["SlicedSets", "predict_sets", "bound_offsets", "move_sets", "SubCellMotion"]


class SlicedSets:
    """Packed focal sets re-laid so each heading slice starts on a word boundary: shape (k, headings, S).

    In the frame's own packing a slice of ``nx·ny`` cells starts anywhere inside a
    word; aligning the slices lets each be shifted on its own with whole-word slicing.
    When ``nx·ny`` is a multiple of 64 the two layouts coincide and no copy is made.
    """

    def __init__(self, grid: PoseGrid):
        self.grid = grid
        self.cells = grid.nx * grid.ny  # bits per slice
        self.words = bitset.n_words(self.cells)
        self.aligned = self.cells % 64 == 0
        tail = self.cells - 64 * (self.words - 1)
        self.tail = np.full(self.words, np.uint64(2**64 - 1), dtype=np.uint64)
        self.tail[-1] = np.uint64(2**64 - 1) if tail == 64 else np.uint64((1 << tail) - 1)
        self._columns: dict[int, np.ndarray] = {}

    def _offsets(self):
        for h in range(self.grid.headings):
            yield h, *divmod(h * self.cells, 64)

    def split(self, sets: np.ndarray) -> np.ndarray:
        """(k, W) frame words -> (k, H, S) aligned slices."""
        k, s = len(sets), self.words
        if self.aligned:
            return sets.reshape(k, self.grid.headings, s)
        padded = np.zeros((k, sets.shape[1] + 2), dtype=bitset.WORD)
        padded[:, : sets.shape[1]] = sets
        out = np.empty((k, self.grid.headings, s), dtype=bitset.WORD)
        for h, q, r in self._offsets():
            if r:
                np.right_shift(padded[:, q : q + s], np.uint64(r), out=out[:, h])
                out[:, h] |= padded[:, q + 1 : q + s + 1] << np.uint64(64 - r)
            else:
                out[:, h] = padded[:, q : q + s]
            out[:, h] &= self.tail
        return out

    def join(self, slices: np.ndarray) -> np.ndarray:
        """(k, H, S) aligned slices -> (k, W) frame words (inverse of ``split``)."""
        k, _, s = slices.shape
        grid_words = bitset.n_words(self.grid.n_cells)
        if self.aligned:
            return np.ascontiguousarray(slices).reshape(k, grid_words)
        out = np.zeros((k, grid_words + 2), dtype=bitset.WORD)
        for h, q, r in self._offsets():
            if r:
                out[:, q : q + s] |= slices[:, h] << np.uint64(r)
                out[:, q + 1 : q + s + 1] |= slices[:, h] >> np.uint64(64 - r)
            else:
                out[:, q : q + s] |= slices[:, h]
        return out[:, :grid_words]

    def column_mask(self, shift: int) -> np.ndarray:
        """Packed slice mask of the cells a move of ``shift`` cells in x can land on from inside the row."""
        mask = self._columns.get(shift)
        if mask is None:
            ix = np.arange(self.grid.nx)
            valid = (ix >= shift) if shift >= 0 else (ix < self.grid.nx + shift)
            plane = np.broadcast_to(valid[None, :], (self.grid.ny, self.grid.nx)).reshape(-1)
            mask = bitset.pack_masks(plane)[0]
            self._columns[shift] = mask
        return mask


def _shift_slice(a: np.ndarray, t: int, mask: np.ndarray | None) -> np.ndarray:
    """Words (k, S) of one slice shifted towards higher cell index by ``t`` bits (may be negative), masked."""
    out = np.zeros_like(a)
    q, r = divmod(t, 64)  # floor division: out[i] = a[i−q] << r | a[i−q−1] >> (64 − r)
    _or_words(out, a, q, (lambda w: w << np.uint64(r)) if r else (lambda w: w))
    if r:
        _or_words(out, a, q + 1, lambda w: w >> np.uint64(64 - r))
    if mask is not None:
        out &= mask
    return out


def _or_words(dst: np.ndarray, src: np.ndarray, offset: int, transform) -> None:
    """dst[:, i] |= transform(src[:, i − offset]) wherever both indices are inside the slice."""
    s = src.shape[1]
    lo, hi = max(0, offset), min(s, s + offset)
    if lo < hi:
        dst[:, lo:hi] |= transform(src[:, lo - offset : hi - offset])


def _dilate_slice(a: np.ndarray, lo: int, hi: int, unit: int, mask_for) -> np.ndarray:
    """OR of slice ``a`` shifted by every offset in [lo, hi] (in units of ``unit`` bits).

    Offsets ≥ 0 and < 0 are handled apart, each by doubling in its own direction: after a
    first shift, each pass ORs in a copy shifted by the width covered so far (about log2(width)
    passes).  Going one way only matters at the map's edge: a cell shifted off the map is then
    only ever needed further off it.  ``mask_for(offset)`` masks the cells a shift may land on.
    """
    out = None
    parts = []
    if hi >= 0:
        parts.append((1, max(lo, 0), hi - max(lo, 0) + 1))
    if lo < 0:
        parts.append((-1, min(hi, -1), min(hi, -1) - lo + 1))
    for sign, first, width in parts:
        cur = _shift_slice(a, first * unit, mask_for(first))
        covered = 1
        while covered < width:
            step = min(covered, width - covered) * sign
            cur |= _shift_slice(cur, step * unit, mask_for(step))
            covered += abs(step)
        out = cur if out is None else (out | cur)
    return out


def predict_sets(
    sets: np.ndarray,
    grid: PoseGrid,
    motion: Motion,
    bound: int | None = None,
    bound_turn: int | None = None,
    layout: SlicedSets | None = None,
) -> np.ndarray:
    """Set-valued motion of packed focal sets ``(k, W)`` on ``grid``; returns new packed sets.

    Every cell moves to every cell reachable by the odometry's move within ``bound`` cells
    (and ``bound_turn`` heading bins): the offsets [floor(d − bound), ceil(d + bound)].
    """
    bound = motion.bound if bound is None else bound
    bound_turn = motion.bound_turn if bound_turn is None else bound_turn
    return move_sets(sets, grid, *bound_offsets(motion, bound, bound_turn), layout)


def bound_offsets(motion: Motion, bound: float, bound_turn: float):
    """Whole offsets reachable by ``motion`` within ``bound`` cells and ``bound_turn`` heading bins:
    ((x_lo, x_hi), (y_lo, y_hi)) arrays per heading bin and one (t_lo, t_hi), i.e. [floor(d − b), ceil(d + b)]."""
    x = (np.floor(motion.dx - bound).astype(int), np.ceil(motion.dx + bound).astype(int))
    y = (np.floor(motion.dy - bound).astype(int), np.ceil(motion.dy + bound).astype(int))
    t = (math.floor(motion.turn - bound_turn), math.ceil(motion.turn + bound_turn))
    return x, y, t


def move_sets(sets: np.ndarray, grid: PoseGrid, x, y, turn, layout: SlicedSets | None = None) -> np.ndarray:
    """Dilate packed focal sets by integer offset intervals: ``x`` and ``y`` are (lo, hi) arrays per heading
    bin, ``turn`` one (lo, hi) pair of heading bins.

    Each heading slice is dilated in x and y on its own (small arrays that stay in cache), then
    headings are combined: slice h of the result is the union of the moved slices h − t for every
    turn t in the interval (headings wrap).
    """
    layout = layout or SlicedSets(grid)
    a = layout.split(sets)
    headings = grid.headings
    tail = None if layout.cells % 64 == 0 else layout.tail

    def columns(offset):
        return layout.column_mask(int(offset))

    def rows(offset):
        return tail

    moved = np.empty_like(a)
    for h in range(headings):
        plane = np.ascontiguousarray(a[:, h])
        plane = _dilate_slice(plane, int(x[0][h]), int(x[1][h]), 1, columns)
        moved[:, h] = _dilate_slice(plane, int(y[0][h]), int(y[1][h]), grid.nx, rows)
    t_lo, t_hi = int(turn[0]), int(turn[1])
    if t_hi - t_lo + 1 >= headings:
        union = np.bitwise_or.reduce(moved, axis=1)
        out = np.broadcast_to(union[:, None, :], moved.shape).copy()
    else:
        out = np.empty_like(moved)
        for h in range(headings):
            acc = moved[:, (h - t_lo) % headings].copy()
            for t in range(t_lo + 1, t_hi + 1):
                acc |= moved[:, (h - t) % headings]
            out[:, h] = acc
    return layout.join(out)


class SubCellMotion:
    """Keeps track of the part of the motion that has not yet moved the focal sets.

    Moves of a few centimetres per tick would be lost if each tick's offsets were rounded to
    whole cells, and rounding their error bounds *up* every tick would grow the sets by a cell
    per tick.  Instead the pose of the robot relative to a set's cell is known to lie in a
    residual box [lo, hi] (cells, per heading bin and axis; heading bins for turns).  Each tick
    widens and shifts the box by the move and its bound; the sets are then moved by whole
    offsets [A, B] chosen so the box that remains keeps a width under two cells and a centre
    within half a cell.  Over many ticks the sets grow with the *sum* of the bounds (the
    set-valued view of accumulated odometry error), not with the number of ticks.
    """

    def __init__(self, headings: int):
        self.x = np.zeros((2, headings))
        self.y = np.zeros((2, headings))
        self.t = np.zeros(2)

    def reset(self) -> None:
        self.x[:] = 0.0
        self.y[:] = 0.0
        self.t[:] = 0.0

    def advance(self, motion: Motion, bound: float, bound_turn: float):
        """Add one move (``bound``: error bound in cells, ``bound_turn`` in bins); returns the whole offsets
        ((x_lo, x_hi), (y_lo, y_hi), (t_lo, t_hi)) to apply to the sets now."""
        offsets = []
        for box, d in ((self.x, motion.dx), (self.y, motion.dy)):
            box[0] += d - bound
            box[1] += d + bound
            offsets.append(_whole_offsets(box))
        self.t[0] += motion.turn - bound_turn
        self.t[1] += motion.turn + bound_turn
        t_lo, t_hi = _whole_offsets(self.t)
        turn = (int(t_lo), int(t_hi))
        if turn != (0, 0):
            # Cells change heading bin: a bin's residual box becomes the union of the boxes of the
            # bins that move into it.
            for box in (self.x, self.y):
                lo, hi = box[0].copy(), box[1].copy()
                for k in range(turn[0], turn[1] + 1):
                    rolled_lo, rolled_hi = np.roll(lo, k), np.roll(hi, k)
                    box[0] = rolled_lo if k == turn[0] else np.minimum(box[0], rolled_lo)
                    box[1] = rolled_hi if k == turn[0] else np.maximum(box[1], rolled_hi)
        return offsets[0], offsets[1], turn


def _whole_offsets(box: np.ndarray):
    """Choose integer offsets [A, B] for a residual box [lo, hi] and leave the remainder in the box."""
    lo, hi = box[0], box[1]
    width = hi - lo
    spread = np.maximum(0, np.floor(width - 1.0)).astype(np.int64)  # B − A ≤ width − 1 keeps coverage
    a = np.round((lo + hi - spread) / 2).astype(np.int64)
    b = a + spread
    box[0] = lo - a
    box[1] = hi - b
    return a, b
