"""Drive a robot along a place-graph case's route and produce the truth and the sensors' readings.

The robot drives along each passage at the route's speed and, at a place where its route changes
direction, stops and turns on the spot (at the route's turn rate) to face the next passage, as a courier
does at a junction; it drives straight through places where the route goes on.  Headings are those of
the graph as drawn (``PlaceGraph.layout``).  A carry puts the robot down at another place (its wheels
report nothing) and it drives on, by the shortest way, to the next place of the route it had not reached.
Readings come from the sensor kinds' own simulation (``fusion.places.kinds``, odometry's
``simulate_odometry``), seeded per sensor as on a metric site (``fusion.simulate``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fusion.place_cases.case import PlaceCase
from fusion.simulate import Tick, active_faults, tick_readings

__all__ = ["PlaceTruth", "simulate_places"]


@dataclass(frozen=True)
class PlaceTruth:
    """Where the robot truly is: ``along_m`` metres from place ``a`` toward place ``b`` (graph indices);
    (x, y, heading) as drawn on the layout."""

    t: float
    a: int
    b: int
    along_m: float
    length_m: float
    x_m: float
    y_m: float
    heading_deg: float
    width_m: float | None
    faults: tuple[str, ...] = ()
    carried: bool = False

    def near(self, reach_m: float) -> int | None:
        """The place within ``reach_m`` of the robot along its passage, or None."""
        if self.along_m <= reach_m:
            return self.a
        if self.length_m - self.along_m <= reach_m:
            return self.b
        return None

    def cell(self, frame) -> int:
        """The frame's cell holding the robot."""
        e = frame.edge_between(frame.graph.places[self.a], frame.graph.places[self.b])
        return frame.cell_on(e, self.along_m)

    def to_record(self, graph) -> dict:
        """The truth file's record (``fusion.place_cases.inspect.read_truth`` reads it back): places by name."""
        return {
            "t": round(self.t, 6),
            "from": graph.places[self.a],
            "to": graph.places[self.b],
            "along_m": round(self.along_m, 4),
            "x_m": round(self.x_m, 4),
            "y_m": round(self.y_m, 4),
            "heading_deg": round(self.heading_deg % 360, 3),
            "faults": list(self.faults),
            "carried": self.carried,
        }


class _GraphDriver:
    def __init__(self, case: PlaceCase):
        self.case, self.graph = case, case.graph
        self.xy = self.graph.layout()
        self.plan = [self.graph.cell_of(p) for p in case.route.path]  # places still to pass, the current first
        self.named = [self.graph.cell_of(p) for p in case.route.through[1:]]  # named places not yet reached
        self.along = 0.0
        self.heading = self._bearing(self.plan[0], self.plan[1])
        self.carries = list(case.route.carries)

    @property
    def done(self) -> bool:
        return len(self.plan) < 2

    def _bearing(self, a: int, b: int) -> float:
        (xa, ya), (xb, yb) = self.xy[a], self.xy[b]
        return math.degrees(math.atan2(yb - ya, xb - xa))

    def _length(self) -> float:
        a, b = self.graph.places[self.plan[0]], self.graph.places[self.plan[1]]
        return self.graph.passage(a, b).length_m

    def carry(self, t: float, dt: float) -> bool:
        if not self.carries or self.carries[0].at_s >= t + dt / 2:
            return False
        c = self.carries.pop(0)
        to, toward = self.graph.cell_of(c.to), self.graph.cell_of(c.toward)
        self.heading = self._bearing(to, toward)
        onward = [p for p in self.named if p != to] or [toward]
        route = [self.graph.cell_of(p) for p in self.graph.route(c.to, self.graph.places[onward[0]])]
        self.plan = route + self._after(onward)
        self.named = onward
        self.along = 0.0
        return True

    def _after(self, onward: list[int]) -> list[int]:
        rest = []
        for a, b in zip(onward, onward[1:]):
            rest += [self.graph.cell_of(p) for p in self.graph.route(self.graph.places[a], self.graph.places[b])][1:]
        return rest

    def step(self, dt: float) -> tuple[float, float]:
        """Advance by ``dt``: (metres driven, degrees turned)."""
        forward = turn = 0.0
        budget = dt
        speed, rate = self.case.route.speed_mps, self.case.route.turn_rate_deg_s
        while budget > 1e-12 and not self.done:
            if self.along <= 1e-9:  # at a place: face the next passage first
                want = (self._bearing(self.plan[0], self.plan[1]) - self.heading + 180.0) % 360.0 - 180.0
                if abs(want) > 1e-6:
                    step = math.copysign(min(abs(want), rate * budget), want)
                    self.heading += step
                    turn += step
                    budget -= abs(step) / rate
                    continue
            move = min(self._length() - self.along, speed * budget)
            self.along += move
            forward += move
            budget -= move / speed
            if self.along >= self._length() - 1e-9:
                if self.named and self.plan[1] == self.named[0]:
                    self.named.pop(0)
                self.plan.pop(0)
                self.along = 0.0
        return forward, turn

    def truth(self, t: float, faults, carried: bool) -> PlaceTruth:
        a, b = (self.plan[0], self.plan[1]) if not self.done else (self.plan[0], self._any_neighbour(self.plan[0]))
        length = self.graph.passage(self.graph.places[a], self.graph.places[b]).length_m
        share = self.along / length
        x, y = self.xy[a] * (1 - share) + self.xy[b] * share
        width = self.graph.passage(self.graph.places[a], self.graph.places[b]).width_m
        return PlaceTruth(t, a, b, self.along, length, float(x), float(y), self.heading, width, faults, carried)

    def _any_neighbour(self, place: int) -> int:
        return self.graph.cell_of(self.graph.neighbours(self.graph.places[place])[0])


def simulate_places(case: PlaceCase, seed: int | None = None, max_ticks: int = 100_000) -> list[Tick]:
    """The whole drive as ticks of ``case.run.tick_s``: each holds a ``PlaceTruth`` and the readings of that tick."""
    seed = case.run.seed if seed is None else seed
    rngs = [np.random.default_rng([seed, i]) for i in range(len(case.sensors))]
    driver = _GraphDriver(case)
    dt = case.run.tick_s
    ticks = []
    k = 0
    while not driver.done and k < max_ticks:
        t = k * dt
        carried = driver.carry(t, dt)
        forward, turn = (0.0, 0.0) if carried or k == 0 else driver.step(dt)
        truth = driver.truth(t, active_faults(case, t), carried)
        ticks.append(Tick(truth, tick_readings(case, k, truth, forward, turn, rngs)))
        k += 1
    return ticks
