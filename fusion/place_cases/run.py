"""Run a place-graph case: simulate it, drive one ``Localizer`` per back end on identical readings, and score
each tick against the truth along the graph.

A tick's estimate is the most probable cell; it is *right* when it lies within ``RIGHT_STEPS`` steps of the
truth along the graph (direction ignored).  A back end has *found itself* at the first right tick from which
the estimate stays right for ``HOLD_S`` (or to the end of the run or of the episode, when sooner), counted
from the start and again from each carry; ``places_needed`` counts the distinctive places (those with a
feature a sensor detects, or a marker a sensor reads) the robot was at from the start (or the carry, the
place it was put down included) until then.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from fusion.monitor.policy import ALERT, QUARANTINE, RELOCALIZE
from fusion.place_cases.case import PlaceCase, detected_features
from fusion.place_cases.simulate import simulate_places

__all__ = ["PlaceRow", "PlaceRunResult", "Episode", "run_places", "place_localizer", "RIGHT_STEPS", "HOLD_S"]

HOLD_S = 15.0
"""How long the estimate must stay at the right place, from a start or a carry, for the back end to have found
itself (our choice: about three passages' worth of readings at a courier's speed)."""
RIGHT_STEPS = 2
"""An estimate within this many passage steps of the truth is at the right place (our choice: a door's width
plus the frame's rounding)."""


@dataclass(frozen=True)
class PlaceRow:
    t: float
    backend: str
    true_cell: int
    estimate_cell: int
    place: str  # the most probable place
    share: float  # its probability
    error_m: float  # along the graph, between the estimate and the truth
    right: bool
    action: str
    reasons: tuple[str, ...]
    carried: bool
    conflict: float
    seconds: float = 0.0  # wall time of the localizer's step


@dataclass(frozen=True)
class Episode:
    """From a start (the run's, or a carry) to the next: when the back end was localized, and after how many
    distinctive places (None: not within the episode)."""

    backend: str
    start_s: float
    end_s: float
    localized_s: float | None
    places_needed: int | None
    carried: bool


@dataclass
class PlaceRunResult:
    case: PlaceCase
    ticks: list
    rows: list[PlaceRow] = field(default_factory=list)
    backends: tuple[str, ...] = ()
    final: dict = field(default_factory=dict)  # back end -> its probability per cell after the last tick

    def rows_of(self, backend: str) -> list[PlaceRow]:
        return [r for r in self.rows if r.backend == backend]

    @cached_property
    def reached(self) -> np.ndarray:
        """Per tick, the distinctive places the robot has reached so far (``_distinctive_reached``)."""
        return _distinctive_reached(self.case, self.ticks)

    def episodes(self, backend: str) -> list[Episode]:
        rows = self.rows_of(backend)
        cuts = [0] + [i for i, r in enumerate(rows) if r.carried] + [len(rows)]
        cuts = sorted(set(cuts))
        reached = self.reached
        out = []
        for lo, hi in zip(cuts, cuts[1:]):
            part = rows[lo:hi]
            first = _first_held(part)
            found = first is not None
            localized = part[first].t if found else None
            before = reached[lo - 1] if lo > 0 else 0
            needed = int(reached[lo + first] - before) if found else None
            out.append(Episode(backend, part[0].t, part[-1].t, localized, needed, rows[lo].carried))
        return out

    def summary(self) -> dict:
        out = {"case": self.case.name, "seed": self.case.run.seed, "ticks": len(self.ticks), "backends": {}}
        for b in self.backends:
            rows = self.rows_of(b)
            err = np.array([r.error_m for r in rows])
            actions = [r.action for r in rows]
            episodes = self.episodes(b)
            out["backends"][b] = {
                "median_error_m": float(np.median(err)),
                "right_share": float(np.mean([r.right for r in rows])),
                "localized": [e.localized_s is not None for e in episodes],
                "places_needed": [e.places_needed for e in episodes],
                "alerts": actions.count(ALERT),
                "relocalizations": actions.count(RELOCALIZE),
                "quarantines": actions.count(QUARANTINE),
            }
        return out


def _first_held(rows: list[PlaceRow]) -> int | None:
    """Index of the first right estimate that stays right for ``HOLD_S`` (or to the episode's end), or None."""
    start = None
    for i, r in enumerate(rows):
        if not r.right:
            start = None
            continue
        start = i if start is None else start
        if r.t - rows[start].t >= HOLD_S:
            return start
    return start


def _distinctive_reached(case: PlaceCase, ticks) -> np.ndarray:
    """Per tick, how many distinctive places the robot has reached so far (a place counts on each arrival)."""
    seen = detected_features(case)
    reads = any(s.kind == "place_marker" for s in case.sensors)
    graph = case.graph
    distinctive = [bool(seen & set(f)) or (reads and m is not None) for f, m in zip(graph.features, graph.markers)]
    count, last, out = 0, None, []
    for tick in ticks:
        at = tick.truth.near(0.5)
        if at is not None and at != last and distinctive[at]:
            count += 1
        last = at if at is not None else last if tick.truth.along_m < 1.0 else None
        out.append(count)
    return np.array(out)


def place_localizer(case: PlaceCase, backend: str, sensors=None, explain: bool = False):
    """A ``Localizer`` of ``backend`` on the case's graph, with its policy and rule (``sensors``: the case's
    sensor set to share, or None to build one; ``explain``: blame on every busy tick, for an investigation)."""
    from fusion.localizer import Localizer
    from fusion.monitor import Policy

    sensors = case.sensor_set() if sensors is None else sensors
    policy = Policy(**case.run.policy)
    run = case.run
    return Localizer(backend, sensors, policy, rule=run.rule, motion=run.motion, seed=run.seed, explain=explain)


def run_places(case: PlaceCase, backends=None, seed: int | None = None, on_tick=None) -> PlaceRunResult:
    """Simulate ``case`` and run its back ends side by side on the same readings."""
    backends = tuple(backends or case.run.backends)
    sensors = case.sensor_set()
    frame = case.frame
    localizers = {b: place_localizer(case, b, sensors) for b in backends}
    ticks = simulate_places(case, seed=seed)
    result = PlaceRunResult(case, ticks, backends=backends)
    if ticks and case.route.start_known:
        prior = np.zeros(frame.n_cells)
        prior[ticks[0].truth.cell(frame)] = 1.0
        for loc in localizers.values():
            loc.start_with(prior)
    for tick in ticks:
        odometry = next((o for o in tick.observations if o.moves), None)
        readings = [o for o in tick.observations if not o.moves]
        truth_cell = tick.truth.cell(frame)
        decisions = {}
        for name, loc in localizers.items():
            d = loc.step(odometry, readings)
            decisions[name] = d
            fix = d.place  # the decision's own: the belief after the step (``PlaceFrame.fix``)
            error = frame.travel_m(fix.cell, truth_cell)
            right = error <= RIGHT_STEPS * frame.resolution_m + 1e-9
            row = PlaceRow(
                tick.truth.t,
                name,
                truth_cell,
                fix.cell,
                fix.place,
                fix.share,
                error,
                right,
                d.action,
                tuple(d.reasons),
                tick.truth.carried,
                float(d.figures.conflict),
                d.seconds,
            )
            result.rows.append(row)
        if on_tick is not None:
            on_tick(tick, decisions, localizers)
    result.final = {name: loc.filter.distribution().copy() for name, loc in localizers.items()}
    return result
