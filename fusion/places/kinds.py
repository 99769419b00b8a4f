"""The place-level sensor kinds in the registry (``fusion.sensors.kinds``): their case fields, log records,
simulation and faults.  Their models are in ``fusion.places.sensors``; they read place graphs only, so a
case that gives one on a metric site is refused, as is a metric kind on a place graph.

Simulated readings follow the models' own parameters; the faults are what the models do not assume:

- feature ``missed``: the detector does not see the feature at ``place`` (a door left open flat to the wall);
- feature ``phantom``: it reports the feature where there is none, with probability ``rate`` per reading (a
  recess, a parked trolley).

The simulation functions take the truth of ``fusion.place_cases.simulate.PlaceTruth``; a reading of None is
no reading (a marker reader that saw nothing).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["FeatureParams", "PlaceMarkerParams", "WidthParams"]


@dataclass(frozen=True)
class FeatureParams:
    feature: str = "door"
    hit_rate: float = 0.9
    false_alarm_rate: float = 0.05
    reliability: float = 1.0
    reach_m: float = 0.5


@dataclass(frozen=True)
class PlaceMarkerParams:
    confusion: float = 0.05
    false_read: float = 0.01
    reliability: float = 1.0
    reach_m: float = 0.5


@dataclass(frozen=True)
class WidthParams:
    sigma_m: float = 0.2
    reliability: float = 1.0
    reach_m: float = 0.5


def _seen_record(seen) -> dict:
    return {"seen": bool(seen)}


def _seen_from(rec: dict, where: str) -> bool:
    from fusion.io.json_line import flag_field

    return flag_field(rec, "seen", where)


def _marker_record(marker) -> dict:
    return {"marker": str(marker)}


def _marker_from(rec: dict, where: str) -> str:
    from fusion.errors import ObservationError
    from fusion.io.json_line import shown
    from fusion.text import MAX_NAME_CHARS

    marker = rec.get("marker")
    if not isinstance(marker, str) or not marker or len(marker) > MAX_NAME_CHARS:
        raise ObservationError(
            f"{where}: field 'marker' must be a marker's id (text of at most {MAX_NAME_CHARS} characters), got "
            f"{shown(marker)}"
        )
    return marker


def _width_record(width) -> dict:
    return {"width_m": round(float(width), 4)}


def _width_from(rec: dict, where: str) -> float:
    from fusion.io.json_line import number_field

    return number_field(rec, "width_m", where)


def simulate_feature(case, spec, truth, rng) -> bool:
    p = spec.params
    place = truth.near(p.reach_m)
    has = place is not None and p.feature in case.graph.features[place]
    for fault in spec.faults:
        if not fault.active(truth.t):
            continue
        if fault.kind == "missed" and place is not None and case.graph.places[place] == fault.options["place"]:
            return False
        if fault.kind == "phantom" and not has and rng.random() < float(fault.options["rate"]):
            return True
    return bool(rng.random() < (p.hit_rate if has else p.false_alarm_rate))


def simulate_marker(case, spec, truth, rng) -> str | None:
    p = spec.params
    place = truth.near(p.reach_m)
    marker = case.graph.markers[place] if place is not None else None
    ids = sorted({m for m in case.graph.markers if m is not None})
    if marker is None:
        return str(ids[int(rng.integers(len(ids)))]) if ids and rng.random() < p.false_read else None
    others = [m for m in ids if m != marker]
    if others and rng.random() < p.confusion:
        return str(others[int(rng.integers(len(others)))])
    return marker


def simulate_width(case, spec, truth, rng) -> float | None:
    width = truth.width_m
    return None if width is None else float(max(width + rng.normal(0.0, spec.params.sigma_m), 0.05))


def _register() -> None:
    from fusion.sensors.kinds import FaultKind, Option, SensorKind, lazy, register

    register(
        SensorKind(
            "feature",
            FeatureParams,
            None,
            _seen_record,
            _seen_from,
            simulate_feature,
            {
                "missed": FaultKind("missed", "does not see the feature at place", {"place": Option("place")}),
                "phantom": FaultKind(
                    "phantom", "reports the feature where there is none at rate", {"rate": Option("rate")}
                ),
            },
            rules={"reach_m": "non_negative"},
            place_model=lazy("fusion.places.sensors:feature_detector"),
        )
    )
    register(
        SensorKind(
            "place_marker",
            PlaceMarkerParams,
            None,
            _marker_record,
            _marker_from,
            simulate_marker,
            rules={"reach_m": "non_negative", "false_read": "probability"},
            place_model=lazy("fusion.places.sensors:marker_reader"),
        )
    )
    register(
        SensorKind(
            "width",
            WidthParams,
            None,
            _width_record,
            _width_from,
            simulate_width,
            rules={"reach_m": "non_negative", "sigma_m": "positive"},
            place_model=lazy("fusion.places.sensors:width_detector"),
        )
    )


_register()
