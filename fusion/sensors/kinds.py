"""The registry of sensor kinds: one entry per kind, read by every stage that depends on the kind.

A sensor kind is one module that defines its parameters, its readings, its model (a ``SensorModel``:
likelihood and mass function from one set of parameters), how its readings are written in a log
record and read back, how the simulator draws them, and its faults; and one ``register(SensorKind(…))``
call.  Case validation (``fusion.io.case``), observation records (``fusion.io.observations``), the
sensor set of a localizer (``fusion.localizer.SensorSet``), the simulator (``fusion.simulate``) and
calibration (``fusion.calibration``, through the kind's ``Calibrator``) read this registry and nothing else
about a kind.  The built-in kinds (ranging, markers, door, odometry; on place graphs feature, place_marker, width)
register themselves when their modules are imported; ``kinds()`` imports them first.

Fault options are declared, not coded: each option names its type (``OPTION_TYPES``), and the case
reader checks them with file, line and field.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

__all__ = [
    "SensorKind",
    "FaultKind",
    "Option",
    "Calibrator",
    "lazy",
    "named",
    "register",
    "kinds",
    "sensor_kind",
    "OPTION_TYPES",
]

OPTION_TYPES = ("rate", "number", "positive", "flag", "marker", "point", "place")
"""rate: a number in [0, 1], required; number / positive: a number (positive: > 0) with a default; flag: true or
false, required; marker: the id of a marker of the site, required; point: [x, y] in metres, required; place: the
name of a place of a place graph, required."""


@dataclass(frozen=True)
class Option:
    type: str
    default: float | None = None


@dataclass(frozen=True)
class FaultKind:
    name: str
    description: str
    options: dict[str, Option] = field(default_factory=dict)
    instant: bool = False  # happens once, at start_s (no end_s)


@dataclass(frozen=True)
class Calibrator:
    """How a kind's parameters are learned from a log with true poses (``fusion calibrate``).

    ``collect(case, spec, pairs, poses)`` turns the sensor's readings, each paired with the true pose at its
    time (``pairs``: (pose, reading, t); ``poses``: every true pose), into its data set; ``fit(name, kind,
    data, settings)`` returns a ``fusion.calibration.models.Fit`` with posterior draws of ``fitted``;
    ``reliability(draws)`` gives draws of the share of readings the model's working part explains (None
    when the kind derives none); ``shares`` are fitted parameters that sum to one."""

    fitted: tuple[str, ...]
    collect: Callable
    fit: Callable
    reliability: Callable | None = None
    shares: tuple[str, ...] = ()


@dataclass(frozen=True)
class ModelCost:
    """What building a sensor's model takes, for the case's budget (``fusion.budget``): bytes and seconds by
    part (named without the sensor), and the beams of one reading (each costs a pass over the grid)."""

    memory: dict[str, float] = field(default_factory=dict)
    seconds: dict[str, float] = field(default_factory=dict)
    beams: int = 0


@dataclass(frozen=True)
class SensorKind:
    name: str
    params: type  # the parameter dataclass: the case's fields of a sensor of this kind
    model: (
        Callable | None
    )  # (spec, site, grid) -> the sensor model on a pose grid (odometry: the motion model); None: none
    to_record: Callable  # reading -> the fields of its log record (``fusion.io.observations``)
    from_record: Callable  # (record, where) -> reading; ObservationError naming the field
    # (case, spec, truth, rng) -> reading, for a sensor that fires at rate_hz; for a motion kind
    # (spec, forward_m, turn_deg, t, dt, rng) -> its report of the true move over (t, t + dt]
    simulate: Callable | None = None
    faults: dict[str, FaultKind] = field(default_factory=dict)
    motion: bool = False  # drives the prediction (odometry); exactly one per case
    needs_door: bool = False  # the case names the door whose contact it is (``door = "…"``)
    needs_markers: bool = False  # the site must have markers
    removed_fields: dict[str, str] = field(default_factory=dict)  # old case fields refused, with the reason
    settle: Callable | None = None  # params -> params after a calibration file replaced some (or ValueError)
    # A recording's values for a reading (``fusion.io.layout``): the fields a table or message names, those
    # that may hold several values (a table's cells from its column to the end of the row), the message
    # fields used when a layout names none, and (value, feed) -> reading, value(name) giving the raw value.
    fields: tuple[str, ...] = ()
    several: tuple[str, ...] = ()
    default_fields: dict[str, str] = field(default_factory=dict)
    from_fields: Callable | None = None
    # field -> rule of ``fusion.sensors.limits`` (probability, positive, non_negative, range, angle, levels) for
    # parameter fields that rules by name do not cover yet
    rules: dict[str, str] = field(default_factory=dict)
    calibrator: Calibrator | None = None  # None: calibration has no model for this kind
    cost: Callable | None = None  # (spec, site) -> ModelCost; None: the model builds nothing that grows
    # (spec, graph, frame) -> the sensor model on a place graph (``fusion.places``); None: the kind reads poses only
    place_model: Callable | None = None


def named(path: str):
    """The object ``"module:name"``, its module imported now."""
    import importlib

    module, _, name = path.partition(":")
    return getattr(importlib.import_module(module), name)


def lazy(path: str) -> Callable:
    """The function ``"module:name"``, imported when first called: a kind's registration names the code of a
    later stage (calibration needs pyro) without importing it."""

    def call(*args, **kwargs):
        return named(path)(*args, **kwargs)

    call.__name__ = call.__qualname__ = path.partition(":")[2]
    return call


_KINDS: dict[str, SensorKind] = {}
_loaded = False
_BUILTINS = (
    "fusion.sensors.ranging",
    "fusion.sensors.markers",
    "fusion.sensors.doors",
    "fusion.sensors.odometry",
    "fusion.places.kinds",
)


def register(kind: SensorKind) -> SensorKind:
    """Add (or replace) a sensor kind; returns it."""
    _KINDS[kind.name] = kind
    return kind


def kinds() -> dict[str, SensorKind]:
    """Every registered kind by name, the built-in ones first."""
    global _loaded
    if not _loaded:  # on first use: every log record and case asks, so later calls cost one test
        import importlib

        for module in _BUILTINS:
            importlib.import_module(module)
        _loaded = True
    return _KINDS


def sensor_kind(name: str) -> SensorKind:
    """The kind called ``name``; KeyError when none is registered."""
    return kinds()[name]
