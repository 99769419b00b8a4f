"""Rate invariance: the same route with odometry logged at 1, 4 and 10 Hz gives the same accuracy.

The route and its readings come from the fault-free ``calm`` case.  Its 4 Hz odometry is composed into
one record per second (exact pose composition in SE(2)), and each second is cut again into 1, 4 or 10
records of equal twist (the matrix root of the second's motion), so the three logs describe exactly the
same path with the same odometry error; the readings of each whole second are applied after its records.
Run as a script to print the table that docs/evidential.md quotes.
"""

from __future__ import annotations

import math
import pathlib

import numpy as np
import pytest

from fusion.io.case import load_case
from fusion.io.observations import Observation
from fusion.localizer import Localizer
from fusion.monitor import Policy
from fusion.sensors.odometry import OdometryReading, Travel
from fusion.sensors.sensor_set import SensorSet
from fusion.simulate import simulate

CASE = pathlib.Path(__file__).resolve().parents[1] / "cases" / "calm.toml"
RATES = (1, 4, 10)


def _root(motion, parts: int):
    """The motion of equal twist that, done ``parts`` times, gives ``motion`` (SE(2) log and exp maps)."""
    x, y, th = motion
    if abs(th) < 1e-12:
        return x / parts, y / parts, 0.0
    # log: translation = V(θ) · v with V(θ) = [[sin θ, −(1 − cos θ)], [1 − cos θ, sin θ]] / θ
    a, b = math.sin(th) / th, (1 - math.cos(th)) / th
    det = a * a + b * b
    vx, vy = (a * x + b * y) / det, (-b * x + a * y) / det
    t = th / parts
    a, b = math.sin(t) / t, (1 - math.cos(t)) / t
    return (a * vx - b * vy) / parts, (b * vx + a * vy) / parts, t


def seconds_of(case, seed: int):
    """Per whole second of the run: the composed odometry (x, y, θ), the readings, and the true pose at its end."""
    ticks = simulate(case, seed=seed)
    per = round(1.0 / case.run.tick_s)
    out = []
    for i in range(0, len(ticks) - per + 1, per):
        travel, readings = Travel(), []
        for tick in ticks[i : i + per]:
            for obs in tick.observations:
                if obs.kind == "odometry":
                    travel = travel.then(obs.reading)
                else:
                    readings.append(obs)
        net = travel.reading
        out.append(((net.forward_m, net.left_m, math.radians(net.turn_deg)), readings, ticks[i + per - 1].truth))
    return ticks[0].truth, out


def errors_at(case, sensors, seed: int, rate: int, backend: str, seconds: int):
    start, data = seconds_of(case, seed)
    quiet = Policy(alert_after=10**6, relocalize_after=10**6)  # the filters alone: no monitor action
    loc = Localizer(backend, sensors, quiet, rule=case.run.rule, motion=case.run.motion)
    loc.start_at(start.x_m, start.y_m, start.heading_deg)
    errors, t = [], 0.0
    odometry = next(s.name for s in case.sensors if s.kind == "odometry")
    for motion, readings, truth in data[:seconds]:
        x, y, th = _root(motion, rate)
        for k in range(rate):
            t += 1.0 / rate
            obs = Observation(t, odometry, "odometry", OdometryReading(x, y, math.degrees(th)))
            last = k == rate - 1
            stamped = [Observation(t, o.sensor, o.kind, o.reading) for o in readings] if last else []
            d = loc.step(obs, stamped)
        errors.append(math.hypot(d.x_m - truth.x_m, d.y_m - truth.y_m))
    return np.asarray(errors)


def table(seeds=(1, 2, 3), seconds: int = 80):
    case = load_case(CASE)
    sensors = SensorSet(case.site, case.site.grid(case.headings), case.sensors)
    rows = {}
    for backend in ("bayes", "evidential"):
        for rate in RATES:
            errs = np.concatenate([errors_at(case, sensors, s, rate, backend, seconds) for s in seeds])
            rows[(backend, rate)] = (float(np.median(errs)), float(np.percentile(errs, 95)))
    return rows


@pytest.mark.slow
def test_p95_error_does_not_depend_on_the_odometry_rate():
    rows = table(seeds=(1,), seconds=30)
    for backend in ("bayes", "evidential"):
        p95 = [rows[(backend, rate)][1] for rate in RATES]
        assert max(p95) <= 1.10 * min(p95), (backend, p95)


if __name__ == "__main__":
    for (backend, rate), (median, p95) in table().items():
        print(f"| {backend} | {rate} Hz | {median:.3f} | {p95:.3f} |")
