"""The frame of discernment on a place graph: where along which passage, facing which way.

Every passage of length L is cut into n = max(1, round(L / resolution)) steps of L / n, in each
direction.  A cell is (directed passage a→b, i), i = 0 … n: the robot is i · L / n from a, going toward b.
Two of them are at places: i = 0 is *at a, facing the passage to b* (about to leave by it), and i = n is
*at b, arrived from a* (its heading still the passage's).  A place with k passages thus has 2k cells.
Lengths are rounded to whole steps (at most half a step per passage: the frame's grid error, as the pose
grid's cell size is).

Moving one step forward takes (a→b, i) to (a→b, i + 1); from the arrival cell (a→b, n) the robot goes
on into the passage the **turn rule** gives, one step along it:

- *driving through*: each onward passage c at b gets weight exp(−½ (Δβ / σ)²) + ``FLOOR``, Δβ the angle
  between c's bearing and the arriving heading, σ the junction tolerance, normalised over b's passages;
- *turning at a place*: a turn Δ measured while the robot stands at b takes an arrival cell (heading h)
  to the cell facing c with weight exp(−½ ((β_c − h − Δ) / σ)²) + ``FLOOR``, and a cell facing c to one
  facing c' with weight exp(−½ ((β_c' − β_c − Δ) / σ)²) + ``FLOOR``; the weights are normalised only when
  they sum to more than 1, so a turn toward no passage of the place (its fit, the sum, is small) keeps
  little of the mass there: the turn is evidence about where the robot is;
- turns smaller than ``MIN_TURN_DEG`` are the robot following its passage, not choosing another;
- a robot turns at places only: a turn applied while the belief is one step from a place (odometry a little
  short or long) first moves that mass onto the place (``snap``), then turns it;
- without bearings (a place or neighbour with no coordinates) driving through goes into every onward
  passage but the one it came by alike (back only at a dead end); a turn of less than 135° does the same
  from an arrival, and faces every other passage alike from a cell facing one; 135° or more turns back.

``FLOOR`` keeps every onward passage possible: a robot that took a passage the rule calls unlikely
is found again by the readings, not ruled out for good.  Moving one step back is the reverse of a
step forward along a passage; from a cell facing a passage at a place it goes to the arriving passages'
last steps, weighted alike.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fusion.errors import PoseError, SiteError
from fusion.places.graph import PlaceGraph

__all__ = ["PlaceFrame", "PlaceFix", "frame_size", "passage_steps", "FLOOR", "MIN_TURN_DEG", "TURN_TOLERANCE_DEG"]

FLOOR = 1e-3
"""Weight of every onward passage beside the turn rule's (our choice: one in a thousand)."""
MIN_TURN_DEG = 15.0
"""Turns below this, measured at a place, leave the passage faced unchanged (our choice)."""
TURN_TOLERANCE_DEG = 25.0
"""Default spread of a passage's bearing at a junction against its drawn direction (common practice, no
source: corridors meet at roughly, not exactly, the angles a plan shows)."""


def _wrap(angle):
    return (np.asarray(angle) + math.pi) % (2 * math.pi) - math.pi


@dataclass(frozen=True)
class PlaceFix:
    """Where a belief on a graph puts the robot: the most probable place and the probability it holds (every cell
    counted for the nearer end of its passage), and the most probable cell, also in words."""

    place: str
    share: float
    cell: int
    where: str

    def to_record(self) -> dict:
        return {"name": self.place, "share": round(self.share, 6), "where": self.where}


def passage_steps(lengths_m, resolution_m: float) -> np.ndarray:
    """Steps of each passage: max(1, round(length / resolution))."""
    return np.maximum(1, np.rint(np.asarray(lengths_m, dtype=np.float64) / resolution_m)).astype(np.int64)


def frame_size(graph: PlaceGraph, resolution_m: float) -> int:
    """Cells of the frame of ``graph`` at ``resolution_m``, without building it: n + 1 a passage, each way."""
    return int(2 * (passage_steps([p.length_m for p in graph.passages], resolution_m) + 1).sum())


class PlaceFrame:
    """Cells along every directed passage of ``graph`` at ``resolution_m``; the one-step operators."""

    def __init__(self, graph: PlaceGraph, resolution_m: float = 1.0, turn_tolerance_deg: float = TURN_TOLERANCE_DEG):
        if not isinstance(resolution_m, (int, float)) or not math.isfinite(resolution_m) or resolution_m <= 0:
            raise SiteError(f"the passage resolution must be a positive number of metres, got {resolution_m!r}")
        if not graph.passages:
            raise SiteError("a place graph needs at least one passage: the robot moves along passages")
        self.graph, self.resolution_m = graph, float(resolution_m)
        self.tolerance = math.radians(turn_tolerance_deg)
        ends = [(graph.cell_of(p.a), graph.cell_of(p.b), k) for k, p in enumerate(graph.passages)]
        self.edges = [e for a, b, k in ends for e in ((a, b, k), (b, a, k))]  # directed: (from, to, passage)
        lengths = np.array([graph.passages[k].length_m for _, _, k in self.edges], float)
        self.steps = passage_steps(lengths, self.resolution_m)
        self.offsets = np.concatenate([[0], np.cumsum(self.steps + 1)])  # n + 1 cells a directed passage
        self.n_cells = int(self.offsets[-1])
        self.edge_of = np.repeat(np.arange(len(self.edges)), self.steps + 1)
        self.index = np.arange(self.n_cells) - self.offsets[self.edge_of]
        self.step_m = (lengths / self.steps)[self.edge_of]
        self.length_m = lengths[self.edge_of]
        self.from_place = np.array([a for a, _, _ in self.edges])[self.edge_of]
        self.to_place = np.array([b for _, b, _ in self.edges])[self.edge_of]
        self.along_m = self.index * self.step_m
        self.out_edges = [[] for _ in graph.places]
        self.in_edges = [[] for _ in graph.places]
        for e, (a, b, _) in enumerate(self.edges):
            self.out_edges[a].append(e)
            self.in_edges[b].append(e)
        self.arrival = self.offsets[1:] - 1  # per directed passage: its arrival cell
        self.bearings = self._bearings()
        self.forward, self.backward = self._step_operators()
        self.snap = self._snap_operator()
        self.turn_table = self._turn_table()
        self._positions = None
        self._distances = None

    # ----------------------------------------------------------------- shape
    @property
    def shape(self) -> tuple[int]:
        return (self.n_cells,)

    def cell_of(self, place: str, toward: str | None = None, along_m: float = 0.0) -> int:
        """The cell ``along_m`` from ``place`` on the passage toward ``toward`` (its first passage when None);
        ``along_m`` is clipped to the passage's length."""
        a = self.graph.cell_of(place)
        if not self.out_edges[a]:
            raise PoseError(f"place {place!r} has no passage, so the robot cannot be there")
        e = self.out_edges[a][0] if toward is None else self.edge_between(place, toward)
        return self.cell_on(e, along_m)

    def start_prior(self, text: str) -> np.ndarray:
        """The prior of a start given as "PLACE" (every cell at the place alike) or "PLACE,TOWARD" (at the place,
        facing the passage to TOWARD); ``PoseError`` naming the places when it names none of the graph's."""
        place, _, toward = (part.strip() for part in text.partition(","))
        prior = np.zeros(self.n_cells)
        if toward:
            prior[self.cell_of(place, toward)] = 1.0
            return prior
        at = self.graph.cell_of(place)
        prior[self.offsets[self.out_edges[at]]] = 1.0
        prior[self.arrival[self.in_edges[at]]] = 1.0
        if not prior.any():
            raise PoseError(f"place {place!r} has no passage, so the robot cannot be there")
        return prior

    def cell_on(self, e: int, along_m: float) -> int:
        """The cell ``along_m`` metres along directed passage ``e`` (from half a step before its end: its arrival cell)."""
        step = self.length_m[self.offsets[e]] / self.steps[e]
        i = min(int(np.rint(max(along_m, 0.0) / step)), int(self.steps[e]))
        return int(self.offsets[e] + i)

    def edge_between(self, a: str, b: str) -> int:
        ia, ib = self.graph.cell_of(a), self.graph.cell_of(b)
        for e in self.out_edges[ia]:
            if self.edges[e][1] == ib:
                return e
        raise PoseError(f"no passage joins {a!r} to {b!r}")

    def describe(self, cell: int) -> str:
        """A cell in words: "at pharmacy, facing lift lobby" or "3.0 m from pharmacy toward lift lobby"."""
        a, b = self.graph.places[self.from_place[cell]], self.graph.places[self.to_place[cell]]
        if self.index[cell] == 0:
            return f"at {a}, facing {b}"
        if cell == self.arrival[self.edge_of[cell]]:
            return f"at {b}, arrived from {a}"
        return f"{self.along_m[cell]:.1f} m from {a} toward {b}"

    # ----------------------------------------------------------------- places
    def place_distance(self) -> tuple[np.ndarray, np.ndarray]:
        """Per cell: the nearer end place of its passage, and the distance to it in metres."""
        back = self.length_m - self.along_m
        nearer = np.where(self.along_m <= back, self.from_place, self.to_place)
        return nearer, np.minimum(self.along_m, back)

    def place_belief(self, p: np.ndarray) -> np.ndarray:
        """Probability per place: every cell counts for the nearer end of its passage."""
        nearer, _ = self.place_distance()
        return np.bincount(nearer, weights=p, minlength=self.graph.n_cells)

    def fix(self, p: np.ndarray) -> PlaceFix:
        """The ``PlaceFix`` of probabilities ``p`` over the cells."""
        per_place = self.place_belief(p)
        best = int(np.argmax(per_place))
        cell = int(np.argmax(p))
        return PlaceFix(self.graph.places[best], float(per_place[best]), cell, self.describe(cell))

    def positions(self) -> np.ndarray:
        """(n_cells, 2): each cell drawn on the graph's layout (``PlaceGraph.layout``), in metres (read-only)."""
        if self._positions is None:
            xy = self.graph.layout()
            share = (self.along_m / self.length_m)[:, None]
            self._positions = xy[self.from_place] * (1 - share) + xy[self.to_place] * share
            self._positions.flags.writeable = False
        return self._positions

    def nearest_cell(self, x: float, y: float, heading_deg: float = 0.0) -> int:
        """The cell drawn nearest (x, y) on the layout; among cells as near, the one facing closest to the heading."""
        xy = self.positions()
        d2 = (xy[:, 0] - x) ** 2 + (xy[:, 1] - y) ** 2
        near = np.flatnonzero(d2 <= d2.min() + 1e-9)
        facing = np.abs(_wrap(np.nan_to_num(self.bearings[self.edge_of[near]]) - math.radians(heading_deg)))
        return int(near[np.argmin(facing)])

    def travel_m(self, a: int, b: int) -> float:
        """Distance along the graph between the positions of cells ``a`` and ``b`` (direction ignored)."""
        if self._distances is None:
            self._distances = self.graph.distances()
        d = self._distances
        ea, eb = self.edges[self.edge_of[a]], self.edges[self.edge_of[b]]
        if {ea[0], ea[1]} == {eb[0], eb[1]}:  # the same passage, either way
            pos_b = self.along_m[b] if ea[0] == eb[0] else self.length_m[b] - self.along_m[b]
            return float(abs(self.along_m[a] - pos_b))
        ends_a = ((ea[0], self.along_m[a]), (ea[1], self.length_m[a] - self.along_m[a]))
        ends_b = ((eb[0], self.along_m[b]), (eb[1], self.length_m[b] - self.along_m[b]))
        return float(min(da + d[pa, pb] + db for pa, da in ends_a for pb, db in ends_b))

    # ----------------------------------------------------------------- the turn rule
    def _bearings(self) -> np.ndarray:
        """Bearing (radians) of every directed passage at its start; nan where a coordinate is missing."""
        at = self.graph.at
        out = np.full(len(self.edges), np.nan)
        for e, (a, b, _) in enumerate(self.edges):
            if at[a] is not None and at[b] is not None:
                out[e] = math.atan2(at[b][1] - at[a][1], at[b][0] - at[a][0])
        return out

    def arrival_weights(self, e: int) -> tuple[list[int], np.ndarray]:
        """(onward passages at the end of ``e``, the probability of facing each on arriving by ``e``)."""
        a, b, _ = self.edges[e]
        onward = self.out_edges[b]
        heading = self.bearings[e]
        bearings = self.bearings[onward]
        if np.isfinite(heading) and np.isfinite(bearings).all():
            w = np.exp(-0.5 * (_wrap(bearings - heading) / self.tolerance) ** 2) + FLOOR
        else:
            back = np.array([self.edges[c][1] == a for c in onward])
            w = np.where(back, FLOOR if not back.all() else 1.0, 1.0)
        return onward, w / w.sum()

    def turn_weights(self, place: int, turn_rad: float, sigma_rad: float) -> tuple[np.ndarray, np.ndarray]:
        """(cells, matrix) of turning ``turn_rad`` at a place: ``cells`` are the place's cells facing its passages,
        then its arrival cells; column j of the (faced × all) matrix gives where the mass of cells[j] goes among
        the faced cells (the turn rule).  With bearings, a column sums to the turn's fit, min(1, Σ of its weights):
        a turn toward no passage of the place (90° at a dead end) keeps little of the mass that stood there, and
        the filter's normalisation moves it to the places where the turn fits."""
        onward, came = self.out_edges[place], self.in_edges[place]
        cells = np.concatenate([self.offsets[onward], self.arrival[came]])
        bearings = self.bearings[onward]
        headings = np.concatenate([bearings, self.bearings[came]]) + turn_rad  # the heading after the turn
        if np.isfinite(headings).all() and np.isfinite(bearings).all():
            w = np.exp(-0.5 * (_wrap(bearings[:, None] - headings[None, :]) / sigma_rad) ** 2) + FLOOR
        else:
            k = len(onward)
            back = np.array([[self.edges[c][1] == self.edges[e][0] for e in came] for c in onward], bool).reshape(k, -1)
            if abs(turn_rad) >= math.radians(135.0):
                arrived = np.where(back, 1.0, FLOOR)
            else:
                arrived = np.where(back, FLOOR, 1.0)
            faced = np.eye(k) if abs(turn_rad) < math.radians(45.0) or k == 1 else 1.0 - np.eye(k)
            w = np.concatenate([faced, arrived], axis=1)
            return cells, w / w.sum(axis=0, keepdims=True)
        return cells, w / np.maximum(w.sum(axis=0, keepdims=True), 1.0)

    def _turn_table(self) -> dict:
        """The places whose passages all have bearings, padded to the largest number of passages, for turning them
        all at once (``fusion.places.moves.PlaceMotion.rotate``): their cells facing each passage and arrival
        cells (padding: ``n_cells``, a cell holding nothing), the bearings faced and the arrival headings (nan);
        ``others``: the places turned one by one (``turn_weights``)."""
        degree = [len(o) for o in self.out_edges]
        full = [i for i, o in enumerate(self.out_edges) if o and np.isfinite(self.bearings[o]).all()]
        full = [i for i in full if np.isfinite(self.bearings[self.in_edges[i]]).all()]
        width = max((degree[i] for i in full), default=0)
        faced = np.full((len(full), width), self.n_cells)
        arrived = np.full((len(full), width), self.n_cells)
        faced_b = np.full((len(full), width), np.nan)
        arrived_b = np.full((len(full), width), np.nan)
        for row, place in enumerate(full):
            onward, came = self.out_edges[place], self.in_edges[place]
            faced[row, : len(onward)] = self.offsets[onward]
            faced_b[row, : len(onward)] = self.bearings[onward]
            arrived[row, : len(came)] = self.arrival[came]
            arrived_b[row, : len(came)] = self.bearings[came]
        turned_at_once = set(full)
        others = [i for i in range(self.graph.n_cells) if self.out_edges[i] and i not in turned_at_once]
        return {"faced": faced, "arrived": arrived, "faced_b": faced_b, "arrived_b": arrived_b, "others": others}

    def _snap_operator(self):
        """Sparse matrix moving the mass one step from a place onto that place (the turn rule's lag): the last step
        before a passage's end goes to its arrival cell, the first step past a place back to the cell leaving it;
        other cells stay."""
        from scipy.sparse import csr_matrix

        target = np.arange(self.n_cells)
        n = self.steps[self.edge_of]
        before_end = (self.index == n - 1) & (n >= 2)
        target[before_end] += 1
        after_start = (self.index == 1) & (n >= 3)
        target[after_start] -= 1
        return csr_matrix((np.ones(self.n_cells), (target, np.arange(self.n_cells))), shape=(self.n_cells,) * 2)

    def _step_operators(self):
        """Sparse matrices S (one step forward) and B (one step back), column c: where mass at c goes."""
        from scipy.sparse import csr_matrix

        inner = np.flatnonzero(self.index < self.steps[self.edge_of])  # every cell but the arrival cells
        rows, cols, vals = list(inner + 1), list(inner), [1.0] * len(inner)
        moving = np.flatnonzero(self.index > 0)
        back_rows, back_cols, back_vals = list(moving - 1), list(moving), [1.0] * len(moving)
        for e in range(len(self.edges)):
            onward, w = self.arrival_weights(e)
            rows += [int(self.offsets[c] + 1) for c in onward]
            cols += [int(self.arrival[e])] * len(onward)
            vals += list(w)
        for place, onward in enumerate(self.out_edges):  # back from a cell facing a passage: to the arriving ones
            came = self.in_edges[place]
            for c in onward:
                back_rows += [int(self.arrival[e] - 1) for e in came]
                back_cols += [int(self.offsets[c])] * len(came)
                back_vals += [1.0 / len(came)] * len(came)
        n = self.n_cells
        forward = csr_matrix((vals, (rows, cols)), shape=(n, n))
        backward = csr_matrix((back_vals, (back_rows, back_cols)), shape=(n, n))
        return forward, backward
