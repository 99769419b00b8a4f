"""Place-level sensors: each reading gives a likelihood over the frame's cells and, from the same
parameters, a mass function (``fusion.sensors.base.Evidence``: contour c = p(z | cell) / max p(z | cell),
discounted by the sensor's reliability r, whose Bayesian side is r · c + 1 − r).

- ``FeatureDetector``: says whether a feature (a door, a junction, …) is at the robot's place, with a hit
  rate and a false-alarm rate (Fox, Burgard & Thrun 1999 model their door sensor so);
- ``MarkerReader``: reads a marker's id at a place, misreading it as another of the site's ids with
  probability ``confusion`` (spread evenly over them) and reading an id where there is none at
  ``false_read``;
- ``WidthDetector``: measures the width of the passage the robot faces, with Gaussian noise; a passage of
  unknown width fits every reading.

A cell is *at* a place when it lies within ``reach_m`` of it along its passage.  Readings are taken as
independent given the cell, as in the histogram filter on the pose grid.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from fusion.errors import ObservationError, SiteError
from fusion.places.frame import PlaceFrame
from fusion.sensors.base import Evidence

__all__ = ["FeatureDetector", "MarkerReader", "WidthDetector", "PLACE_SENSORS"]


def _rate(name: str, value, *, low_open: bool = False) -> float:
    bad = isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.0 <= value <= 1.0
    if bad or (low_open and value == 0.0):
        raise SiteError(f"{name} must be a probability {'in (0, 1]' if low_open else 'in [0, 1]'}, got {value!r}")
    return float(value)


def _evidence(name: str, likelihood: np.ndarray, reliability: float) -> Evidence:
    top = float(likelihood.max())
    contour = likelihood / top if top > 0 else np.zeros_like(likelihood)
    return Evidence(name, contour, reliability=reliability)


@dataclass
class _PlaceSensor:
    name: str
    frame: PlaceFrame
    reliability: float = 1.0
    reach_m: float = 0.5

    def __post_init__(self):
        self.reliability = _rate(f"sensor {self.name!r}: reliability", self.reliability, low_open=True)
        if not isinstance(self.reach_m, (int, float)) or not math.isfinite(self.reach_m) or self.reach_m < 0:
            raise SiteError(f"sensor {self.name!r}: reach_m must be a distance ≥ 0 in metres, got {self.reach_m!r}")
        nearer, distance = self.frame.place_distance()
        self._place = np.where(distance <= self.reach_m, nearer, -1)  # per cell: the place it is at, or −1

    def explain(self, reading, x: float, y: float, heading_deg: float) -> str:
        """What the reading says against what the graph gives at the pose drawn at (x, y, heading), in words."""
        cell = self.frame.nearest_cell(x, y, heading_deg)
        return f"read {reading!r} {self.frame.describe(cell)}, where {self.expected(cell)}"


@dataclass
class FeatureDetector(_PlaceSensor):
    feature: str = "door"
    hit_rate: float = 0.9
    false_alarm_rate: float = 0.05

    def __post_init__(self):
        super().__post_init__()
        self.hit_rate = _rate(f"sensor {self.name!r}: hit_rate", self.hit_rate)
        self.false_alarm_rate = _rate(f"sensor {self.name!r}: false_alarm_rate", self.false_alarm_rate)
        if self.hit_rate <= self.false_alarm_rate:
            raise SiteError(
                f"sensor {self.name!r}: hit_rate ({self.hit_rate}) must exceed false_alarm_rate "
                f"({self.false_alarm_rate}), or a detection would not point to the feature"
            )
        has = np.array([self.feature in f for f in self.frame.graph.features] + [False])
        self.at_feature = has[self._place]  # index −1 picks the trailing False
        self.odd_rate = max(1.0 - self.hit_rate, self.false_alarm_rate)

    def likelihood(self, seen: bool) -> np.ndarray:
        if not isinstance(seen, (bool, np.bool_)):
            raise ObservationError(f"sensor {self.name!r} reads true or false (the {self.feature} seen), got {seen!r}")
        hit, false = (self.hit_rate, self.false_alarm_rate) if seen else (1 - self.hit_rate, 1 - self.false_alarm_rate)
        return np.where(self.at_feature, hit, false)

    def encode(self, seen: bool) -> Evidence:
        return _evidence(self.name, self.likelihood(seen), self.reliability)

    def expected(self, cell: int) -> str:
        return f"a {self.feature} is" if self.at_feature[cell] else f"no {self.feature} is"


@dataclass
class MarkerReader(_PlaceSensor):
    confusion: float = 0.05
    false_read: float = 0.01

    def __post_init__(self):
        super().__post_init__()
        self.confusion = _rate(f"sensor {self.name!r}: confusion", self.confusion)
        self.false_read = _rate(f"sensor {self.name!r}: false_read", self.false_read)
        markers = list(self.frame.graph.markers) + [None]
        self.marker_at = np.array([markers[i] for i in self._place], dtype=object)
        self.at_marker = self.marker_at != None  # noqa: E711 (elementwise on an object array)
        self.ids = sorted({m for m in self.frame.graph.markers if m is not None})
        self.odd_rate = max(self.confusion, self.false_read)

    def likelihood(self, marker: str) -> np.ndarray:
        if not isinstance(marker, str) or not marker:
            raise ObservationError(f"sensor {self.name!r} reads a marker's id (text), got {marker!r}")
        others = max(len(self.ids) - (marker in self.ids), 1)
        same = self.marker_at == marker
        return np.where(same, 1 - self.confusion, np.where(self.at_marker, self.confusion / others, self.false_read))

    def encode(self, marker: str) -> Evidence:
        return _evidence(self.name, self.likelihood(marker), self.reliability)

    def expected(self, cell: int) -> str:
        m = self.marker_at[cell]
        return f"marker {m} is" if m is not None else "no marker is"


@dataclass
class WidthDetector(_PlaceSensor):
    sigma_m: float = 0.2

    def __post_init__(self):
        super().__post_init__()
        if not isinstance(self.sigma_m, (int, float)) or not math.isfinite(self.sigma_m) or self.sigma_m <= 0:
            raise SiteError(f"sensor {self.name!r}: sigma_m must be a positive number of metres, got {self.sigma_m!r}")
        widths = np.array([np.nan if p.width_m is None else p.width_m for p in self.frame.graph.passages])
        self.width = widths[[self.frame.edges[e][2] for e in self.frame.edge_of]]
        self.odd_rate = 1.0 - math.erf(2.0 / math.sqrt(2.0))  # beyond 2σ (common practice, no source)

    def likelihood(self, width_m: float) -> np.ndarray:
        ok = not isinstance(width_m, bool) and isinstance(width_m, (int, float)) and math.isfinite(width_m)
        if not ok or width_m <= 0:
            raise ObservationError(f"sensor {self.name!r} reads a passage width in metres (> 0), got {width_m!r}")
        fit = np.exp(-0.5 * ((width_m - self.width) / self.sigma_m) ** 2)
        return np.where(np.isnan(self.width), 1.0, fit)

    def encode(self, width_m: float) -> Evidence:
        return _evidence(self.name, self.likelihood(width_m), self.reliability)

    def expected(self, cell: int) -> str:
        w = self.width[cell]
        return "the width is not known" if np.isnan(w) else f"the passage is {w:.2f} m wide"


PLACE_SENSORS = {"feature": FeatureDetector, "marker": MarkerReader, "width": WidthDetector}
"""Place-level sensor kinds, by the name a case gives them."""


def feature_detector(spec, graph, frame: PlaceFrame) -> FeatureDetector:
    """The registry's builder (``fusion.sensors.kinds.SensorKind.place_model``)."""
    return FeatureDetector(spec.name, frame, **dataclasses.asdict(spec.params))


def marker_reader(spec, graph, frame: PlaceFrame) -> MarkerReader:
    return MarkerReader(spec.name, frame, **dataclasses.asdict(spec.params))


def width_detector(spec, graph, frame: PlaceFrame) -> WidthDetector:
    return WidthDetector(spec.name, frame, **dataclasses.asdict(spec.params))
