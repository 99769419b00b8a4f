"""Drive a robot along a case's route and produce ground truth and sensor readings, with faults injected.

Every random draw comes from generators seeded by the case's seed and the
sensor's position in the case, so a run is reproducible and adding a sensor does
not change the readings of the others.  Sensors are simulated with the same
parameters their models assume (noise, detection and false-alarm rates); the
faults are what the models do *not* assume:

- ranging ``people``: short returns from people walking through the beams;
- markers ``ghost``: sightings of a marker from a place it is not (a reflection, a copied label);
- door ``stuck``: the contact reads a fixed value;
- odometry ``drift`` (heading drift, scale error) and ``slip`` (one large error);
- route ``carried``: the robot is lifted and put down elsewhere; its wheels report no motion.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fusion.case_model import Case
from fusion.io.observations import Observation
from fusion.sensors.kinds import sensor_kind

__all__ = ["Tick", "TruePose", "simulate", "tick_readings", "active_faults"]


@dataclass(frozen=True)
class TruePose:
    t: float
    x_m: float
    y_m: float
    heading_deg: float
    faults: tuple[str, ...] = ()  # "sensor: fault" active at this tick
    carried: bool = False  # the robot was put down somewhere else at this tick

    def to_record(self) -> dict:
        return {
            "t": round(self.t, 6),
            "x_m": round(self.x_m, 4),
            "y_m": round(self.y_m, 4),
            "heading_deg": round(self.heading_deg % 360, 3),
            "faults": list(self.faults),
            "carried": self.carried,
        }


@dataclass(frozen=True)
class Tick:
    truth: TruePose
    observations: tuple[Observation, ...] = field(default_factory=tuple)


def _wrap_deg(a: float) -> float:
    return (a + 180.0) % 360.0 - 180.0


class _Driver:
    """The true motion: turn on the spot towards the next waypoint, then drive straight to it."""

    def __init__(self, case: Case):
        route = case.require_route()
        self.points = list(route.waypoints)
        self.speed, self.turn_rate = route.speed_mps, route.turn_rate_deg_s
        self.x, self.y = self.points[0]
        first = self.points[1]
        self.heading = math.degrees(math.atan2(first[1] - self.y, first[0] - self.x))
        self.target = 1
        self.carries = list(route.carries)

    @property
    def done(self) -> bool:
        return self.target >= len(self.points)

    def carry_due(self, t: float, dt: float):
        if self.carries and self.carries[0].at_s < t + dt / 2:
            return self.carries.pop(0)
        return None

    def step(self, dt: float) -> tuple[float, float]:
        """Advance by ``dt``; returns the true (forward metres, turn degrees) of this tick."""
        forward = turn = 0.0
        budget = dt
        while budget > 1e-12 and not self.done:
            tx, ty = self.points[self.target]
            dist = math.hypot(tx - self.x, ty - self.y)
            if dist < 1e-9:
                self.target += 1
                continue
            want = _wrap_deg(math.degrees(math.atan2(ty - self.y, tx - self.x)) - self.heading)
            if abs(want) > 1e-6:
                step = math.copysign(min(abs(want), self.turn_rate * budget), want)
                self.heading += step
                turn += step
                budget -= abs(step) / self.turn_rate
                continue
            move = min(dist, self.speed * budget)
            rad = math.radians(self.heading)
            self.x += move * math.cos(rad)
            self.y += move * math.sin(rad)
            forward += move
            budget -= move / self.speed
            if move >= dist - 1e-12:
                self.target += 1
        return forward, turn


def _fires(index: int, tick: int, rate_hz: float, dt: float) -> bool:
    every = max(1, round(1.0 / (rate_hz * dt)))
    return (tick + index) % every == 0


def simulate(case: Case, seed: int | None = None, max_ticks: int = 100_000) -> list[Tick]:
    """The whole run as ticks of ``case.run.tick_s``; each holds the true pose and the readings of that tick."""
    seed = case.run.seed if seed is None else seed
    rngs = [np.random.default_rng([seed, i]) for i in range(len(case.sensors))]
    driver = _Driver(case)
    dt = case.run.tick_s
    ticks: list[Tick] = []
    k = 0
    while not driver.done and k < max_ticks:
        t = k * dt
        carry = driver.carry_due(t, dt)
        if carry is not None:
            driver.x, driver.y, driver.heading = carry.to
            driver.target = carry.resume_waypoint - 1 if carry.resume_waypoint > 1 else 1
            forward, turn = 0.0, 0.0
        else:
            forward, turn = driver.step(dt) if k else (0.0, 0.0)
        truth = TruePose(t, driver.x, driver.y, driver.heading, active_faults(case, t), carry is not None)
        ticks.append(Tick(truth, tick_readings(case, k, truth, forward, turn, rngs)))
        k += 1
    return ticks


def active_faults(case, t: float) -> tuple[str, ...]:
    """ "sensor: fault" of every fault active at ``t``."""
    return tuple(f"{s.name}: {f.kind}" for s in case.sensors for f in s.faults if f.active(t))


def tick_readings(case, k: int, truth, forward: float, turn: float, rngs) -> tuple[Observation, ...]:
    """The observations of tick ``k`` (at ``truth.t``): the odometry's report of the true move (``forward`` m,
    ``turn`` deg), then each sensor due at its rate; a simulated reading of None is no reading."""
    t, dt = truth.t, case.run.tick_s
    observations = []
    for i, spec in enumerate(case.sensors):
        kind = sensor_kind(spec.kind)
        if kind.motion:
            observations.append(
                Observation(t, spec.name, spec.kind, kind.simulate(spec, forward, turn, t, dt, rngs[i]))
            )
        elif _fires(i, k, spec.rate_hz, dt):
            reading = kind.simulate(case, spec, truth, rngs[i])
            if reading is not None:
                observations.append(Observation(t, spec.name, spec.kind, reading))
    observations.sort(key=lambda o: not sensor_kind(o.kind).motion)  # motion first, then the readings
    return tuple(observations)
