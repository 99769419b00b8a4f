"""A place-graph case: the graph (``[places]``), its sensors, a route through named places and the run settings,
read from TOML with errors that name file, line and field (the format is in ``cases/README.md``).

The sensors, their faults and ``[run]`` are read by the metric case's own readers (``fusion.io.case``), so a
field means the same on both kinds of site; what only a graph has is read here.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

from fusion.budget import route_too_long
from fusion.case_model import RunSpec, SensorSpec
from fusion.errors import FusionError, SiteError
from fusion.io.bounded import read_text
from fusion.io.case import MAX_CASE_BYTES
from fusion.io.toml_reader import TomlReader, finite_numbers, load_toml
from fusion.places.frame import TURN_TOLERANCE_DEG, PlaceFrame, frame_size
from fusion.places.graph import Passage, PlaceGraph

__all__ = [
    "PlaceCase",
    "PlaceRoute",
    "PlaceCarry",
    "load_place_case",
    "parse_place_case",
    "is_place_case",
    "route_through",
    "route_length_m",
    "detected_features",
]

MAX_PLACES = 100_000
"""Most places in a graph (a frame of a few million cells at 1 m steps)."""
MAX_PASSAGE_M = 10_000.0
"""Longest passage, in metres."""
MAX_CELLS = 5_000_000
"""Most cells of a graph's frame (passage steps, both ways)."""
GRAPH_BACKENDS = ("bayes", "evidential")
"""The back ends built on place graphs."""


@dataclass(frozen=True)
class PlaceCarry:
    """At ``at_s`` the robot is put down at place ``to``, facing ``toward``; it then drives on to the route's next
    place not yet reached."""

    at_s: float
    to: str
    toward: str


@dataclass(frozen=True)
class PlaceRoute:
    through: tuple[str, ...]  # the places named in the case, in order
    path: tuple[str, ...]  # every place passed, the legs between named places being shortest paths
    speed_mps: float
    turn_rate_deg_s: float
    carries: tuple[PlaceCarry, ...] = ()
    start_known: bool = False


@dataclass(frozen=True)
class PlaceCase:
    name: str
    path: str
    graph: PlaceGraph
    resolution_m: float
    turn_tolerance_deg: float
    sensors: tuple[SensorSpec, ...]
    route: PlaceRoute
    run: RunSpec
    description: str = ""
    warnings: tuple[str, ...] = field(default=())

    @cached_property
    def frame(self) -> PlaceFrame:
        return PlaceFrame(self.graph, self.resolution_m, self.turn_tolerance_deg)

    def sensor_set(self):
        from fusion.sensors.sensor_set import SensorSet

        return SensorSet(self.graph, self.frame, self.sensors)


def is_place_case(path) -> bool:
    """Does the case file at ``path`` describe a place graph (a ``[places]`` table)?  False when it cannot be read
    (the case reader then says why)."""
    try:
        return "places" in load_toml(read_text(Path(path), MAX_CASE_BYTES, "case file"), str(path))
    except (FusionError, OSError):
        return False


def load_place_case(path) -> PlaceCase:
    path = Path(path)
    return parse_place_case(read_text(path, MAX_CASE_BYTES, "case file"), str(path))


def parse_place_case(text: str, path: str = "<case>") -> PlaceCase:
    from fusion.io.case import _run, _sensors, case_head

    data = load_toml(text, path)
    r = TomlReader(path, text)
    r.only(data, (), {"case", "places", "sensors", "route", "run"})
    name, description = case_head(r, data)
    places = r.table(data, (), "places")
    graph = _graph(r, places)
    resolution = float(r.number(places, ("places",), "resolution_m", 1.0, positive=True, high=100))
    tolerance = float(r.number(places, ("places",), "turn_tolerance_deg", TURN_TOLERANCE_DEG, positive=True, high=180))
    sensors = _sensors(r, data, graph)
    route = _route(r, r.table(data, (), "route"), graph)
    run_table = r.table(data, (), "run", required=False)
    run = _run(r, run_table, sensors)
    run = _graph_run(r, run_table, run)
    case = PlaceCase(name, path, graph, resolution, tolerance, sensors, route, run, description)
    frame_cells = frame_size(graph, resolution)
    if frame_cells > MAX_CELLS:
        r.fail(
            ("places", "resolution_m"),
            f"the graph needs {frame_cells:,} cells at {resolution:g} m (limit "
            f"{MAX_CELLS:,}); use a coarser resolution",
        )
    too_long = route_too_long(_route_seconds(case) / run.tick_s, run.tick_s)
    if too_long:
        r.fail(("route",), too_long)
    try:
        case.sensor_set()  # every model built now: what passes here can run
    except FusionError as err:
        r.fail(("sensors",), str(err))
    return _with_warnings(case)


def _graph(r: TomlReader, d: dict) -> PlaceGraph:
    w = ("places",)
    r.only(d, w, {"name", "resolution_m", "turn_tolerance_deg", "place", "passage"})
    tables = r.tables(d, w, "place")
    if not tables:
        r.fail(w, "a place graph needs at least two [[places.place]] tables")
    if len(tables) > MAX_PLACES:
        r.fail((*w, "place"), f"{len(tables):,} places are given; the limit is {MAX_PLACES:,}")
    names, features, markers, at = [], [], [], []
    for i, pd in enumerate(tables):
        pw = (*w, "place", i)
        r.only(pd, pw, {"name", "at", "features", "marker"})
        names.append(r.name(pd, pw, "name"))
        if names.index(names[-1]) != i:
            r.fail((*pw, "name"), f"place {names[-1]!r} is named twice; names must be unique")
        found = pd.get("features", [])
        if not isinstance(found, list) or not all(isinstance(f, str) and f for f in found):
            r.fail((*pw, "features"), f"must be an array of feature names (text), got {found!r}")
        features.append(tuple(found))
        markers.append(r.name(pd, pw, "marker") if "marker" in pd else None)
        if "at" in pd and not finite_numbers(pd["at"], 2):
            r.fail((*pw, "at"), f"must be [x, y] in metres, got {pd['at']!r}")
        at.append(tuple(float(v) for v in pd["at"]) if "at" in pd else None)
    if any(a is not None for a in at) and any(a is None for a in at):
        missing = names[at.index(None)]
        r.fail(
            (*w, "place"), f"some places give 'at' and {missing!r} does not: give coordinates to every place or none"
        )
    passages = [_passage(r, pd, (*w, "passage", i), set(names)) for i, pd in enumerate(r.tables(d, w, "passage"))]
    if not passages:
        r.fail(w, "a place graph needs at least one [[places.passage]]: the robot moves along passages")
    try:
        return PlaceGraph(tuple(names), tuple(passages), tuple(features), tuple(markers), tuple(at))
    except SiteError as err:
        r.fail((*w, "passage"), str(err))


def _passage(r: TomlReader, d: dict, w: tuple, known: set) -> Passage:
    r.only(d, w, {"between", "length_m", "width_m"})
    ends = d.get("between")
    if not isinstance(ends, list) or len(ends) != 2 or not all(isinstance(e, str) for e in ends):
        r.fail((*w, "between"), f'must name the two places it joins, e.g. ["lobby", "lift"], got {ends!r}')
    for end in ends:
        if end not in known:
            r.fail((*w, "between"), f"names the unknown place {end!r}; add a [[places.place]] with that name")
    if ends[0] == ends[1]:
        r.fail((*w, "between"), f"joins {ends[0]!r} to itself; a passage joins two different places")
    length = r.number(d, w, "length_m", positive=True, high=MAX_PASSAGE_M)
    width = r.number(d, w, "width_m", None, positive=True, high=100) if "width_m" in d else None
    return Passage(ends[0], ends[1], float(length), None if width is None else float(width))


def _route(r: TomlReader, d: dict, graph: PlaceGraph) -> PlaceRoute:
    w = ("route",)
    r.only(d, w, {"through", "speed_mps", "turn_rate_deg_s", "start_known", "carried"})
    through = d.get("through")
    if not isinstance(through, list) or len(through) < 2 or not all(isinstance(p, str) for p in through):
        r.fail((*w, "through"), "must name at least two places in the order the robot visits them")
    for p in through:
        if p not in graph.places:
            r.fail((*w, "through"), f"names the unknown place {p!r}")
    try:
        path = route_through(graph, through)
    except SiteError as err:
        r.fail((*w, "through"), f"the route cannot be driven: {err}")
    speed = r.number(d, w, "speed_mps", 0.8, positive=True, high=5)
    turn_rate = r.number(d, w, "turn_rate_deg_s", 60.0, positive=True, high=720)
    carries = []
    for i, cd in enumerate(r.tables(d, w, "carried")):
        cw = (*w, "carried", i)
        r.only(cd, cw, {"at_s", "to", "toward"})
        to = r.name(cd, cw, "to", choices=graph.places)
        toward = r.name(cd, cw, "toward", graph.neighbours(to)[0] if graph.neighbours(to) else None)
        if toward not in graph.neighbours(to):
            r.fail(
                (*cw, "toward"),
                f"no passage joins {to!r} to {toward!r}; it neighbours: {', '.join(graph.neighbours(to))}",
            )
        carries.append(PlaceCarry(float(r.number(cd, cw, "at_s", low=0)), to, toward))
    start_known = r.flag(d, w, "start_known", False)
    return PlaceRoute(
        tuple(through),
        tuple(path),
        float(speed),
        float(turn_rate),
        tuple(sorted(carries, key=lambda c: c.at_s)),
        start_known,
    )


def route_length_m(case: PlaceCase) -> float:
    """Metres of passage the route drives."""
    path = case.route.path
    return sum(case.graph.passage(a, b).length_m for a, b in zip(path, path[1:]))


def detected_features(case: PlaceCase) -> set[str]:
    """The features some sensor of the case looks for."""
    return {s.params.feature for s in case.sensors if s.kind == "feature"}


def _route_seconds(case: PlaceCase) -> float:
    """The drive's length in seconds: its passages at the route's speed, and a half turn at every place (an
    upper bound of the turning)."""
    return route_length_m(case) / case.route.speed_mps + len(case.route.path) * 180.0 / case.route.turn_rate_deg_s


def route_through(graph: PlaceGraph, through) -> tuple[str, ...]:
    """Every place passed driving through ``through`` in order, each leg a shortest path; ``SiteError`` when a leg
    crosses between pieces of the graph."""
    path = [through[0]]
    for a, b in zip(through, through[1:]):
        path += graph.route(a, b)[1:]
    return tuple(path)


def _graph_run(r: TomlReader, d: dict, run: RunSpec) -> RunSpec:
    import dataclasses

    w = ("run",)
    if "backends" not in d:
        run = dataclasses.replace(run, backends=GRAPH_BACKENDS)
    for b in run.backends:
        if b not in GRAPH_BACKENDS:
            r.fail(
                (*w, "backends"),
                f"the {b!r} back end does not run on a place graph; choose among {', '.join(GRAPH_BACKENDS)}",
            )
    if run.rule not in ("dempster", "conjunctive"):
        r.fail((*w, "rule"), f"on a place graph the evidential back end runs dempster or conjunctive, not {run.rule!r}")
    if run.motion != "probabilistic":
        r.fail(
            (*w, "motion"),
            "on a place graph the evidential back end moves by the odometry error model: 'probabilistic'",
        )
    if run.start_covariance is not None or run.tuning:
        r.fail(w, "start_covariance and back-end settings tables are for metric sites")
    return run


def _with_warnings(case: PlaceCase) -> PlaceCase:
    """A feature the site gives that no sensor looks for: allowed (a plan shows more than a robot senses), said."""
    import dataclasses

    unseen = sorted(case.graph.feature_names() - detected_features(case))
    out = [f"no sensor detects the feature {f!r}: it is drawn, not used" for f in unseen]
    if all(m is None for m in case.graph.markers) and any(s.kind == "place_marker" for s in case.sensors):
        out.append("a place_marker sensor is given but no place carries a marker")
    return dataclasses.replace(case, warnings=tuple(out))
