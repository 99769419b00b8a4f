"""A new sensor kind is one module plus one registration: a compass, registered here and nowhere else.

Everything below goes through the registry (``fusion.sensors.kinds``): the case reader checks its
fields, its parameter rule and its fault; the simulator draws its readings; log records carry them;
the localizer's sensor set builds its model.  The check of the result is Bayes' theorem: from a
uniform prior over the free cells, one reading's posterior is the normalised likelihood (Thrun,
Burgard & Fox 2005, Probabilistic Robotics, §2.4.2), so the heading marginal after one compass
reading is the compass likelihood's, weighted by the free cells of each heading.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest

from fusion.errors import InputFileError, ObservationError
from fusion.io.case import parse_case
from fusion.io.observations import from_record
from fusion.localizer import Localizer
from fusion.sensors.base import Evidence
from fusion.sensors.kinds import Calibrator, FaultKind, ModelCost, Option, SensorKind, kinds, register
from fusion.simulate import simulate
from tests.test_case import TINY


# ----------------------------------------------------------------------------- the toy kind (one module's worth)
@dataclass(frozen=True)
class CompassParams:
    sigma_deg: float = 10.0
    reliability: float = 0.9
    levels: int = 4


@dataclass(frozen=True)
class CompassReading:
    heading_deg: float


class Compass:
    odd_rate = 0.0

    def __init__(self, name, site, grid, params):
        self.name, self.grid, self.params = name, grid, params

    def contour(self, reading) -> np.ndarray:
        h = np.degrees(self.grid.heading_centres())
        off = (h - reading.heading_deg + 180.0) % 360.0 - 180.0
        per_heading = np.exp(-0.5 * (off / self.params.sigma_deg) ** 2)
        return np.broadcast_to(per_heading[:, None, None], self.grid.shape).reshape(-1)

    def encode(self, reading) -> Evidence:
        return Evidence(self.name, self.contour(reading), self.params.reliability, self.params.levels)

    def explain(self, reading, x, y, heading_deg) -> str:
        return f"heading measured {reading.heading_deg:.0f}°, expected {heading_deg:.0f}°"


def _from_record(rec, where):
    value = rec.get("heading_deg")
    if not isinstance(value, (int, float)) or isinstance(value, bool) or not math.isfinite(value):
        raise ObservationError(f"{where}: field 'heading_deg' must be a finite number")
    return CompassReading(float(value))


def _simulate(case, spec, truth, rng):
    offset = sum(float(f.options.get("offset_deg", 0.0)) for f in spec.faults if f.active(truth.t))
    return CompassReading(truth.heading_deg + offset + rng.normal(0.0, spec.params.sigma_deg))


def _from_fields(value, feed):
    from fusion.sensors.field_values import number

    heading = number(value("heading"), "heading")
    return CompassReading(heading if feed.angle_unit == "deg" else math.degrees(heading))


def _collect(case, spec, pairs, poses) -> np.ndarray:
    """Calibration data: each reading's heading error against the true heading (degrees, wrapped)."""
    return np.array([(r.heading_deg - p.heading_deg + 180.0) % 360.0 - 180.0 for p, r, _ in pairs])


def _fit(name, kind, residuals, settings):
    # Known mean 0, Jeffreys prior p(σ²) ∝ 1/σ²: σ² | data ~ Scaled-Inv-χ²(n, s²) with s² = Σr²/n (Gelman et al.
    # 2013, Bayesian Data Analysis, §3.3), drawn as n·s²/X with X ~ χ²_n.  No pyro needed for this kind.
    from fusion.calibration.models import Fit

    n = len(residuals)
    chi2 = np.random.default_rng(settings.seed).chisquare(n, 4000)
    return Fit(name, kind, "closed form", n, {"sigma_deg": np.sqrt(np.sum(residuals**2) / chi2)})


COMPASS = SensorKind(
    "compass",
    CompassParams,
    lambda spec, site, grid: Compass(spec.name, site, grid, spec.params),
    lambda reading: {"heading_deg": round(reading.heading_deg, 3)},
    _from_record,
    _simulate,
    {"magnet": FaultKind("magnet", "a magnet nearby turns the reading", {"offset_deg": Option("number", 0.0)})},
    rules={"sigma_deg": "positive"},
    fields=("heading",),
    from_fields=_from_fields,
    calibrator=Calibrator(("sigma_deg",), _collect, _fit),
    cost=lambda spec, site: ModelCost({"heading table": 8.0 * 360}),
)


@pytest.fixture
def compass():
    register(COMPASS)  # the one registration
    yield COMPASS
    kinds().pop("compass")


def _case_text(extra: str = "") -> str:
    return (
        TINY.read_text()
        + f"""
[[sensors]]
name = "yaw"
kind = "compass"
rate_hz = 4.0
sigma_deg = 8.0
{extra}
[[sensors.faults]]
kind = "magnet"
start_s = 2.0
end_s = 4.0
offset_deg = 40.0
"""
    )


def test_a_registered_kind_is_read_simulated_logged_and_localized(compass, tmp_path):
    case = parse_case(_case_text(), str(tmp_path / "case.toml"))
    spec = case.sensor("yaw")
    assert spec.kind == "compass" and spec.params == CompassParams(sigma_deg=8.0)
    assert spec.faults[0].options == {"offset_deg": 40.0}
    from fusion.budget import estimate

    assert estimate(case).memory["heading table of yaw"] == 8.0 * 360  # the case's budget counts what it declares
    ticks = simulate(case)
    seen = [o for tick in ticks for o in tick.observations if o.sensor == "yaw"]
    assert len(seen) > 10 and all(isinstance(o.reading, CompassReading) for o in seen)
    for o in seen[:5]:  # the log record round trip (the record rounds to 3 decimals)
        back = from_record(o.to_record())
        assert back.sensor == "yaw" and abs(back.reading.heading_deg - o.reading.heading_deg) <= 5e-4
    # Bayes' theorem from a uniform prior: the heading marginal is the likelihood r·c + (1 − r), normalised
    loc = Localizer.from_case(case, "bayes")
    loc.start_anywhere()
    reading = CompassReading(90.0)
    from fusion.io.observations import Observation

    loc.step(None, [Observation(0.0, "yaw", "compass", reading)])
    grid = loc.sensors.grid
    posterior = loc.filter.distribution().reshape(grid.shape).sum(axis=(1, 2))
    free = case.site.free.sum()
    likelihood = 0.9 * Compass("yaw", None, grid, CompassParams(sigma_deg=8.0)).contour(reading).reshape(grid.shape)
    expected = (likelihood[:, 0, 0] + 0.1) * free
    np.testing.assert_allclose(posterior, expected / expected.sum(), rtol=1e-9)


def test_a_registered_kind_brings_its_own_parameter_rules_and_faults(compass, tmp_path):
    with pytest.raises(InputFileError) as err:
        parse_case(_case_text().replace("sigma_deg = 8.0", "sigma_deg = -1.0"), str(tmp_path / "case.toml"))
    assert "sigma_deg" in str(err.value) and "greater than 0" in str(err.value)
    with pytest.raises(InputFileError) as err:
        parse_case(_case_text().replace('kind = "magnet"', 'kind = "lightning"'), str(tmp_path / "case.toml"))
    assert "magnet" in str(err.value)


def test_without_its_registration_the_kind_is_refused_by_name(tmp_path):
    with pytest.raises(InputFileError) as err:
        parse_case(_case_text(), str(tmp_path / "case.toml"))
    assert "compass" in str(err.value) and "ranging" in str(err.value)


def test_every_back_end_and_sensor_model_satisfies_its_protocol(compass):
    # The protocols are what the localizer, the monitor's recovery and the jobs use; checked structurally
    # (typing.runtime_checkable) for every back end and rule family and every registered sensor kind.
    from fusion.backends import BACKENDS, build
    from fusion.backends.base import Backend
    from fusion.sensors.base import SensorModel
    from fusion.sensors.sensor_set import SensorSet

    case = parse_case(_case_text(), str(TINY))
    grid = case.site.grid(case.headings)
    for name in BACKENDS:
        for rule in ("dempster", "yager"):
            assert isinstance(build(name, grid, case.site.free, rule=rule), Backend), (name, rule)
    sensors = SensorSet(case.site, grid, case.sensors)
    metric = {name for name, kind in kinds().items() if kind.model is not None}
    assert {s.kind for s in case.sensors} == metric  # every kind that reads a metric site is in this case
    for model in sensors.models.values():
        assert isinstance(model, SensorModel), model
    # The place-graph kinds and back ends, on the shipped basement.
    from pathlib import Path

    from fusion.place_cases.case import load_place_case

    basement = load_place_case(Path(__file__).parent.parent / "cases" / "basement.toml")
    places = {name for name, kind in kinds().items() if kind.place_model is not None}
    assert {s.kind for s in basement.sensors} == places and metric | places == set(kinds())
    for model in basement.sensor_set().models.values():
        assert isinstance(model, SensorModel), model
    for name in ("bayes", "evidential"):
        assert isinstance(build(name, basement.frame), Backend), name


def test_a_registered_kind_is_read_from_a_robots_table_through_a_layout(compass, tmp_path):
    # The layout reader and the table reader ask the registry which values a compass row holds.
    from fusion.io.layout import load_layout
    from fusion.io.recording import observations

    case = parse_case(_case_text(), str(tmp_path / "case.toml"))
    (tmp_path / "wheels.csv").write_text("t,v,w\n" + "".join(f"{k / 10},0.2,0.0\n" for k in range(11)))
    (tmp_path / "yaw.csv").write_text("t,rad\n0.25,1.5707963\n0.75,oops\n")
    (tmp_path / "layout.toml").write_text(
        """[[feeds]]
sensor = "wheels"
file = "wheels.csv"
header = true
odometry = "velocities"
columns = {t = "t", forward = "v", turn = "w"}
[[feeds]]
sensor = "yaw"
file = "yaw.csv"
header = true
angle_unit = "rad"
columns = {t = "t", heading = "rad"}
"""
    )
    layout = load_layout(tmp_path / "layout.toml", case)
    aside = []
    got = [obs for _, obs in observations(None, layout, aside.append) if obs.sensor == "yaw"]
    assert [o.kind for o in got] == ["compass"] and abs(got[0].reading.heading_deg - 90.0) < 1e-5
    assert len(aside) == 1 and "'heading' must be a number" in aside[0].reason and aside[0].file == "yaw.csv"


def test_a_registered_kind_is_calibrated_through_its_registration(compass, tmp_path):
    # Calibration asks the registry how to pair a compass's readings with the truth and how to fit them; the
    # calibration file it writes is read back by the case reader.  The simulator draws the compass with
    # σ = 8°, so the 90% credible interval of the fit should hold 8° (Gelman et al. 2013, §3.3 posterior).
    from fusion.calibration.data import datasets
    from fusion.calibration.models import FitSettings
    from fusion.calibration.output import calibration_toml, summarise_fits
    from fusion.io.case import apply_calibration
    from fusion.io.logs import TruthPose

    case = parse_case(_case_text().replace("offset_deg = 40.0", "offset_deg = 0.0"), str(tmp_path / "case.toml"))
    ticks = simulate(case, seed=4)
    observations = [(i, o) for i, o in enumerate(o for tick in ticks for o in tick.observations)]
    truth = [(i, TruthPose(t.truth.t, t.truth.x_m, t.truth.y_m, t.truth.heading_deg)) for i, t in enumerate(ticks)]
    data = datasets(case, observations, truth)
    residuals = data.by_sensor["yaw"]
    assert len(residuals) > 20
    fit = COMPASS.calibrator.fit("yaw", "compass", residuals, FitSettings(seed=1))
    (entry,) = [e for e in summarise_fits([fit]) if e.sensor == "yaw"]
    estimate = entry.parameters["sigma_deg"]
    assert estimate.low <= 8.0 <= estimate.high and entry.reliability is None
    path = tmp_path / "cal.toml"
    path.write_text(calibration_toml([entry], case.site.name, "log", "truth"))
    calibrated = apply_calibration(case, path)
    assert calibrated.sensor("yaw").params.sigma_deg == pytest.approx(estimate.mean, rel=1e-5)
