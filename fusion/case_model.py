"""The case's settings model: a site, its sensors and their faults, a route, the run and the sweep settings,
as typed values, and the vocabulary they are checked against (back ends, rules, motion models, policy
fields), taken from the stages that define them; sensor and fault kinds are in the registry of
``fusion.sensors.kinds``.

``fusion.io.case`` reads it from TOML; nothing here reads a file."""

from __future__ import annotations

from dataclasses import dataclass, field

from fusion.backends import BACKENDS as _BACKEND_TABLE
from fusion.budget import MEMORY_BUDGET_GIB, WORK_BUDGET_MINUTES
from fusion.errors import InputFileError
from fusion.site import SiteMap

__all__ = [
    "Case",
    "SensorSpec",
    "FaultSpec",
    "RouteSpec",
    "CarryEvent",
    "RunSpec",
    "SweepSpec",
    "SWEEP_RULES",
    "BACKENDS",
    "filter_rules",
    "motion_models",
    "policy_defaults",
]

BACKENDS = tuple(_BACKEND_TABLE)
"""Back-end names, in the order tools list them (``fusion.backends.BACKENDS``)."""


def filter_rules() -> tuple[str, ...]:
    """The combination rules the evidential back end runs."""
    from fusion.backends.evidential import FILTER_RULES

    return FILTER_RULES


def motion_models() -> tuple[str, ...]:
    from fusion.motion import MOTION_MODELS

    return MOTION_MODELS


def policy_defaults():
    """The monitor policy with its defaults: its fields are what ``[run.policy]`` may set."""
    from fusion.monitor.policy import Policy

    return Policy()


@dataclass(frozen=True)
class FaultSpec:
    kind: str
    start_s: float
    end_s: float
    options: dict = field(default_factory=dict)

    def active(self, t: float) -> bool:
        return self.start_s <= t < self.end_s


@dataclass(frozen=True)
class SensorSpec:
    name: str
    kind: str
    rate_hz: float
    params: object
    faults: tuple[FaultSpec, ...] = ()
    door: str | None = None  # for kind = "door": which door's contact


@dataclass(frozen=True)
class CarryEvent:
    at_s: float
    to: tuple[float, float, float]  # x, y (m), heading (deg)
    resume_waypoint: int


@dataclass(frozen=True)
class RouteSpec:
    waypoints: tuple[tuple[float, float], ...]
    speed_mps: float
    turn_rate_deg_s: float
    carries: tuple[CarryEvent, ...] = ()
    start_known: bool = True  # the robot starts at the first waypoint, facing the second (a dock)


@dataclass(frozen=True)
class RunSpec:
    backends: tuple[str, ...] = BACKENDS
    rule: str = "dempster"
    max_focal: int = 32
    seed: int = 1
    tick_s: float = 0.25
    policy: dict = field(default_factory=dict)
    motion: str = "probabilistic"  # how the evidential back end applies odometry (fusion.motion.MOTION_MODELS)
    budget_gib: float = MEMORY_BUDGET_GIB  # memory a run may take (fusion.budget)
    budget_minutes: float = WORK_BUDGET_MINUTES  # processor time a run may take (fusion.budget)
    tuning: dict = field(default_factory=dict)  # back end -> its settings ([run.particles], [run.gaussian])
    start_covariance: tuple | None = None  # 3 × 3 in (m, m, rad): the known start's uncertainty; None: a disc

    def settings_of(self, backend: str):
        """The case's settings for ``backend`` (``[run.<backend>]``), or None for the back end's defaults."""
        return self.tuning.get(backend)


SWEEP_RULES = ("dempster", "conjunctive", "yager", "dubois_prade", "pcr5", "murphy")
"""Rules a comparison sweeps by default: Dempster's, the unnormalised conjunctive, Yager's,
Dubois–Prade's, PCR5 and Murphy's averaging."""


@dataclass(frozen=True)
class SweepSpec:
    """The ``[compare]`` table: which settings ``fusion compare`` runs, each on every seed.

    ``reliabilities``: discount factors applied to every sensor but odometry (empty: as in the case);
    ``fault_rates``: the ``rate`` of every people/ghost fault (empty: as in the case)."""

    seeds: int = 50
    backends: tuple[str, ...] = BACKENDS
    rules: tuple[str, ...] = SWEEP_RULES
    reliabilities: tuple[float, ...] = ()
    fault_rates: tuple[float, ...] = ()


@dataclass(frozen=True)
class Case:
    name: str
    path: str
    site: SiteMap
    headings: int
    sensors: tuple[SensorSpec, ...]
    route: RouteSpec | None  # None: a site for replaying logs only (nothing to simulate)
    run: RunSpec
    description: str = ""
    sweep: SweepSpec = field(default_factory=SweepSpec)

    def require_route(self) -> RouteSpec:
        """The route, or ``InputFileError`` saying that simulating needs one and this case has none."""
        if self.route is None:
            raise InputFileError(
                self.path,
                None,
                "route",
                "the case has no [route], and this command simulates a drive along one; add a [route] with at "
                "least two waypoints, or replay a recorded log with 'fusion inspect' or 'fusion stream'",
            )
        return self.route

    def sensor(self, name: str) -> SensorSpec:
        for s in self.sensors:
            if s.name == name:
                return s
        raise KeyError(name)
