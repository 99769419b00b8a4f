"""The sensors of a site: each sensor's model built from the registry of kinds, observations checked against
them and turned into evidence (and odometry into motion)."""

from __future__ import annotations

from fusion.errors import ObservationError
from fusion.grid import PoseGrid
from fusion.io.observations import Observation
from fusion.sensors.base import Evidence, SensorModel
from fusion.sensors.kinds import sensor_kind
from fusion.sensors.odometry import OdometrySensor
from fusion.site import SiteMap

__all__ = ["SensorSet"]


class SensorSet:
    """The sensor models of a site, by name; turns observations into evidence and motion."""

    def __init__(self, site: SiteMap, grid: PoseGrid, specs):
        """``site`` and ``grid``: a ``SiteMap`` and its ``PoseGrid``, or a ``PlaceGraph`` and its ``PlaceFrame``
        (``fusion.places``); each kind's model for that frame is built."""
        self.site, self.grid = site, grid
        self.kinds: dict[str, str] = {}
        self.models: dict[str, SensorModel] = {}
        self.odometry: OdometrySensor | None = None
        self._cache: dict[int, tuple] = {}
        on_places = not isinstance(grid, PoseGrid)
        for spec in specs:
            self.kinds[spec.name] = spec.kind
            kind = sensor_kind(spec.kind)  # the registry builds each model (fusion.sensors.kinds)
            build = kind.place_model if on_places else kind.model
            if build is None:
                where = "a place graph" if on_places else "a metric site"
                raise ObservationError(f"sensor {spec.name!r}: a {spec.kind} sensor does not read {where}")
            if kind.motion:
                self.odometry = build(spec, site, grid)
            else:
                self.models[spec.name] = build(spec, site, grid)

    @property
    def free(self):
        """The site's free plane, or None where every cell is free (a place graph)."""
        return getattr(self.site, "free", None)

    def explain(self, sensor: str, reading, x: float, y: float, heading_deg: float) -> str:
        """What ``sensor``'s ``reading`` measured against what the map gives at the pose, in words."""
        return self.models[sensor].explain(reading, x, y, heading_deg)

    def odd_rates(self) -> dict[str, float]:
        """Per sensor, the share of its readings its own error model says contradict the true pose."""
        return {name: float(model.odd_rate) for name, model in self.models.items()}

    def check(self, obs: Observation) -> None:
        kind = self.kinds.get(obs.sensor)
        if kind is None:
            raise ObservationError(f"unknown sensor {obs.sensor!r}; this site's sensors: {', '.join(self.kinds)}")
        if kind != obs.kind:
            raise ObservationError(
                f"sensor {obs.sensor!r} is a {kind} sensor, but the observation is of kind {obs.kind!r}"
            )

    def encode(self, obs: Observation) -> Evidence:
        """Evidence of one reading; the same observation object is encoded once even when several
        localizers (e.g. every back end side by side) share this sensor set."""
        hit = self._cache.get(id(obs))
        if hit is not None and hit[0] is obs:
            return hit[1]
        self.check(obs)
        evidence = self.models[obs.sensor].encode(obs.reading)
        if len(self._cache) > 64:
            self._cache.clear()
        self._cache[id(obs)] = (obs, evidence)
        return evidence
