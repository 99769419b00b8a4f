"""Odometry on a place graph: the distance driven moves belief along passages, a turn at a place changes
the passage faced (the turn rule of ``fusion.places.frame``).

The error model is the odometry's own (``fusion.sensors.odometry``): the distance driven has variance
σ² = (σ per metre)² · metres driven, the turn its own.  Both filters on the graph apply it the same way
(the histogram filter to its probabilities, the evidential filter to its contour), so with the same
readings they hold the same belief (``tests/test_places.py``).

Records are rarely whole steps long, so ``PlaceMotion`` carries what a record leaves over:

- the distance: the belief moves round(D / step) − (steps already moved) whole steps, D the distance
  driven since the last reset, so the position error stays within half a step however finely the odometry
  is logged;
- the noise: its variance is added up, and a discrete Gaussian is applied once it reaches a quarter of a
  step² (below that it would round to nothing); the variance that kernel actually has is then taken off,
  so the blur follows the distance driven, not the number of records;
- the turn: a record's turn counts after its drive; turns are added up until the belief next moves a whole
  step, and applied by the turn rule just before that step (the belief reaches a place half a step before
  the robot does, and leaves it half a step after, so a turn made standing at a place is applied there).
"""

from __future__ import annotations

import copy
import math
from dataclasses import dataclass

import numpy as np

from fusion.places.frame import FLOOR, MIN_TURN_DEG, PlaceFrame

__all__ = ["PlaceMove", "PlaceMotion", "gaussian_taps"]

_APPLY_VARIANCE = 0.25  # steps²: the pending variance at which a kernel is applied (half a step, squared)


@dataclass(frozen=True)
class PlaceMove:
    """One odometry record on a graph: metres driven forward, the turn, their noise, and the wheels'
    reliability (with 1 − r they slipped, and the distance is known within ``slip_m``)."""

    forward_m: float
    turn_rad: float = 0.0
    sigma_m: float = 0.0
    sigma_turn_rad: float = 0.0
    reliability: float = 1.0
    slip_m: float = 0.0


def gaussian_taps(variance: float) -> tuple[np.ndarray, np.ndarray]:
    """(offsets, weights) of a discrete Gaussian of ``variance`` steps², to ±4σ (at least ±1)."""
    sigma = math.sqrt(max(variance, 0.0))
    radius = max(1, int(math.ceil(4 * sigma)))
    offsets = np.arange(-radius, radius + 1)
    w = np.exp(-0.5 * (offsets / sigma) ** 2) if sigma > 0 else (offsets == 0).astype(float)
    return offsets, w / w.sum()


class PlaceMotion:
    """Moves a density over the cells of ``frame`` by odometry, carrying the record-to-record remainders."""

    def __init__(self, frame: PlaceFrame):
        self.frame = frame
        self.reset()

    def __deepcopy__(self, memo) -> PlaceMotion:
        other = copy.copy(self)  # the remainders are numbers; the frame is shared
        return other

    def reset(self) -> None:
        self.driven = 0.0  # steps driven since the reset (odometry)
        self.moved = 0  # whole steps the belief has moved
        self.variance = 0.0  # steps², not yet applied
        self.turn = 0.0  # radians turned at a place, not yet applied
        self.turn_variance = 0.0

    def apply(self, p: np.ndarray, move: PlaceMove) -> np.ndarray:
        """The density after ``move``: a new array (``p`` is not changed)."""
        frame = self.frame
        step = frame.resolution_m
        self.driven += move.forward_m / step
        whole = int(round(self.driven)) - self.moved
        self.moved += whole
        if whole != 0:  # the belief leaves its cells: the turn made there is applied first
            if abs(self.turn) >= math.radians(MIN_TURN_DEG):
                p = self.rotate(frame.snap @ p, self.turn, math.sqrt(frame.tolerance**2 + self.turn_variance))
            self.turn = self.turn_variance = 0.0
        self.turn += move.turn_rad  # a record's turn counts after its drive
        self.turn_variance += move.sigma_turn_rad**2
        self.variance += (move.sigma_m / step) ** 2
        taps = {whole: 1.0}
        if self.variance >= _APPLY_VARIANCE:
            offsets, w = gaussian_taps(self.variance)
            self.variance = max(self.variance - float(w @ offsets.astype(float) ** 2), 0.0)
            taps = {whole + int(o): float(wo) for o, wo in zip(offsets, w)}
        moved = self.shifted(p, taps)
        if move.reliability < 1.0:  # with 1 − r the wheels slipped: the distance is known within the slip bound
            offsets, w = gaussian_taps((move.slip_m / 2 / step) ** 2)
            slipped = self.shifted(p, {whole + int(o): float(wo) for o, wo in zip(offsets, w)})
            moved = move.reliability * moved + (1.0 - move.reliability) * slipped
        return moved

    def shifted(self, p: np.ndarray, taps: dict[int, float]) -> np.ndarray:
        """Σ w · (p moved m steps), over the taps {m: w}; negative m move back."""
        out = np.zeros_like(p)
        for operator, sign in ((self.frame.forward, 1), (self.frame.backward, -1)):
            wanted = {sign * m: w for m, w in taps.items() if sign * m > 0}
            q = p
            for m in range(1, max(wanted, default=0) + 1):
                q = operator @ q
                if m in wanted:
                    out += wanted[m] * q
        if 0 in taps:
            out += taps[0] * p
        return out

    def rotate(self, p: np.ndarray, turn_rad: float, sigma_rad: float) -> np.ndarray:
        """The density after turning ``turn_rad`` at a place: the cells at every place mix by the turn rule
        (``PlaceFrame.turn_weights``; the places with bearings all at once)."""
        frame = self.frame
        out = p.copy()
        table = frame.turn_table
        if len(table["faced"]):
            padded = np.append(p, 0.0)
            cells = np.concatenate([table["faced"], table["arrived"]], axis=1)
            headings = np.concatenate([table["faced_b"], table["arrived_b"]], axis=1) + turn_rad
            gap = (table["faced_b"][:, :, None] - headings[:, None, :] + math.pi) % (2 * math.pi) - math.pi
            w = np.exp(-0.5 * (gap / sigma_rad) ** 2) + FLOOR
            w[np.isnan(w)] = 0.0  # padding: no such passage to face
            w /= np.maximum(w.sum(axis=1, keepdims=True), 1.0)  # a column sums to the turn's fit (turn_weights)
            turned = np.einsum("mij,mj->mi", w, padded[cells])
            real = table["faced"] < frame.n_cells
            out[table["faced"][real]] = turned[real]
            out[table["arrived"][table["arrived"] < frame.n_cells]] = 0.0
        for place in table["others"]:
            cells, w = frame.turn_weights(place, turn_rad, sigma_rad)
            k = w.shape[0]
            out[cells[:k]] = w @ p[cells]
            out[cells[k:]] = 0.0
        return out
