"""Case files: a site, its sensors and their faults, a route, and the run settings, read from TOML into
the settings model of ``fusion.case_model`` (whose names this module also offers).

The format is ours; ``cases/README.md`` documents it with the demo case.  Loading
validates everything before anything runs, and every error names the file, the
line and the field (``InputFileError``).  Case files are data only: TOML has no
code, and the one path a case may name (a site's map image) must lie inside the
case's own folder.  The ``[site]`` table is read by ``fusion.io.site_file``.

A case without a ``[route]`` describes a site and its sensors only: it serves
``inspect``, ``stream`` and ``calibrate``, which replay recorded logs; the commands
that simulate (``run``, ``demo``, ``compare``, ``soak``, ``targets``) refuse it.
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

from fusion.budget import MEMORY_BUDGET_GIB, WORK_BUDGET_MINUTES
from fusion.case_model import (
    BACKENDS,
    CarryEvent,
    Case,
    FaultSpec,
    RouteSpec,
    RunSpec,
    SensorSpec,
    SweepSpec,
    filter_rules,
    motion_models,
    policy_defaults,
)
from fusion.io.bounded import read_text
from fusion.io.run_tables import TABLE_KEYS, settings_tables, start_covariance
from fusion.io.site_file import MAX_BOXES, MAX_ITEMS, free_point, free_segment, read_site
from fusion.io.toml_reader import TomlReader, finite_numbers, load_toml
from fusion.places.graph import PlaceGraph
from fusion.sensors.kinds import kinds, sensor_kind
from fusion.sensors.limits import problems
from fusion.site import SiteMap

__all__ = [
    "load_case",
    "apply_calibration",
    "parse_case",
    "MAX_CASE_BYTES",
    "MAX_ITEMS",
    "MAX_BOXES",
]

MAX_SENSORS = 64
"""Most sensors in a case (our choice: a robot carries a handful; each costs a likelihood per reading)."""
MAX_WAYPOINTS = 10_000
"""Most waypoints of a route."""
MAX_POLICY_COUNT = 10_000
"""Largest count of ticks or readings in ``[run.policy]`` (40 minutes of ticks at 0.25 s)."""
MAX_DESCRIPTION_CHARS = 4000
"""Longest case description."""
MAX_CASE_BYTES = 1024**2
"""Case files larger than this are refused (a real case is a few kilobytes)."""


def load_case(path) -> Case:
    """Read and validate a case file; ``InputFileError`` on any problem, before anything runs."""
    path = Path(path)
    text = read_text(path, MAX_CASE_BYTES, "case file")  # pipes and devices too: never more than the limit
    return parse_case(text, str(path))


def parse_case(text: str, path: str = "<case>") -> Case:
    """The case of TOML ``text``; ``path`` names it in errors and anchors a site's map image."""
    data = load_toml(text, path)
    r = TomlReader(path, text)
    if "places" in data:
        r.fail(
            ("places",),
            "this is a place-graph case ([places]); 'fusion run', 'check', 'compare', 'inspect', 'stream' and 'targets' take it; 'soak' and 'calibrate' do not yet",
        )
    r.only(data, (), {"case", "site", "sensors", "route", "run", "compare"})
    name, description = case_head(r, data)
    site, headings = read_site(r, r.table(data, (), "site"), path)
    sensors = _sensors(r, data, site)
    route = _route(r, data["route"], site) if "route" in data else None
    run = _run(r, r.table(data, (), "run", required=False), sensors)
    sweep = _sweep(r, r.table(data, (), "compare", required=False))
    case = Case(name, path, site, headings, sensors, route, run, description, sweep)
    from fusion.budget import case_problems

    for where, problem in case_problems(case):  # memory and time, before anything runs
        r.fail(where, problem)
    return case


def case_head(r: TomlReader, data: dict) -> tuple[str, str]:
    """The ``[case]`` table of either kind of case: its name and description, checked."""
    head = r.table(data, (), "case")
    r.only(head, ("case",), {"name", "description"})
    name = r.name(head, ("case",), "name")
    description = head.get("description", "")
    if not isinstance(description, str) or len(description) > MAX_DESCRIPTION_CHARS:
        r.fail(("case", "description"), f"must be text of at most {MAX_DESCRIPTION_CHARS:,} characters")
    return name, description


def _params(r: TomlReader, d: dict, where: tuple, cls, skip: set) -> object:
    defaults = cls()
    values = {}
    for f in dataclasses.fields(cls):
        if f.name not in d:
            continue
        default = getattr(defaults, f.name)
        if isinstance(default, tuple):
            values[f.name] = r.numbers(d, where, f.name)
        elif isinstance(default, str):
            values[f.name] = r.name(d, where, f.name)
        elif isinstance(default, int) and not isinstance(default, bool):
            values[f.name] = r.number(d, where, f.name, whole=True, low=1)
        else:
            values[f.name] = float(r.number(d, where, f.name))
    known = {f.name for f in dataclasses.fields(cls)} | skip
    r.only(d, where, known)
    return cls(**values)


def _sensors(r: TomlReader, data: dict, site: SiteMap) -> tuple[SensorSpec, ...]:
    tables = r.tables(data, (), "sensors")
    if len(tables) > MAX_SENSORS:
        r.fail(("sensors",), f"{len(tables):,} sensors are given; the limit is {MAX_SENSORS}")
    if not tables:
        r.fail((), "no [[sensors]] are given; a case needs at least odometry and one other sensor")
    out = [_sensor(r, d, ("sensors", i), site) for i, d in enumerate(tables)]
    names = [s.name for s in out]
    for i, n in enumerate(names):
        if names.index(n) != i:
            r.fail(("sensors", i, "name"), f"sensor name {n!r} is used twice; names must be unique")
    moving = [name for name, k in kinds().items() if k.motion]
    if sum(s.kind in moving for s in out) != 1:
        said = " or ".join(repr(m) for m in moving)
        r.fail(("sensors",), f"exactly one sensor of kind {said} is needed (it drives the prediction)")
    return tuple(out)


def _sensor(r: TomlReader, d: dict, w: tuple, site: SiteMap) -> SensorSpec:
    """One ``[[sensors]]`` table, checked by what its kind declares (``fusion.sensors.kinds``)."""
    name = r.name(d, w, "name")
    kind_name = r.text(d, w, "kind", choices=tuple(kinds()))
    kind = sensor_kind(kind_name)
    on_places = isinstance(site, PlaceGraph)
    if (kind.place_model if on_places else kind.model) is None:
        fit = [k for k, v in kinds().items() if (v.place_model if on_places else v.model) is not None]
        r.fail(
            (*w, "kind"),
            f"a {kind_name} sensor reads "
            + (
                "a metric site, and this case is a place graph ([places])"
                if on_places
                else "a place graph ([places]), and this case is a metric site ([site])"
            )
            + f"; the kinds for this case: {', '.join(fit)}",
        )
    rate = r.number(d, w, "rate_hz", 10.0 if kind.motion else None, positive=True, high=100)
    door = None
    if kind.needs_door:
        door = r.name(d, w, "door")
        if door not in {x.name for x in site.doors}:
            known = ", ".join(x.name for x in site.doors) or "none"
            r.fail((*w, "door"), f"no door {door!r} on the site (doors: {known})")
    if kind.needs_markers and not site.markers:
        r.fail((*w, "kind"), "a marker sensor needs markers on the site ([[site.markers]])")
    _refuse_removed(r, d, w, kind)
    params = _params(r, d, w, kind.params, {"name", "kind", "rate_hz", "door", "faults"})
    for f, problem in problems(params):  # the sensor models' own rules: check accepts what a run can start
        r.fail((*w, f), problem)
    if kind.needs_door and not site.door_zone(site.door(door)).any():
        r.fail((*w, "door"), f"the zone of door {door!r} holds no free cell; check its position, facing and radius")
    faults = tuple(_fault(r, fd, (*w, "faults", j), kind, site) for j, fd in enumerate(r.tables(d, w, "faults")))
    return SensorSpec(name, kind_name, float(rate), params, faults, door)


def _refuse_removed(r: TomlReader, d: dict, w: tuple, kind) -> None:
    """Fields the sensor kind no longer reads (renamed or dropped), refused with what to write instead."""
    for old, why in kind.removed_fields.items():
        if old in d:
            r.fail((*w, old), f"'{old}' is no longer read: {why} (see cases/README.md)")


def _fault(r: TomlReader, fd: dict, fw: tuple, kind, site: SiteMap) -> FaultSpec:
    """One fault of a sensor: its kind among the sensor kind's, its window, its declared options."""
    fkind = r.text(fd, fw, "kind", choices=tuple(kind.faults))
    declared = kind.faults[fkind]
    start = r.number(fd, fw, "start_s", 0.0, low=0)
    end = r.number(fd, fw, "end_s", math.inf if not declared.instant else start + 1e-9, low=0)
    if end <= start and not declared.instant:
        r.fail((*fw, "end_s"), f"must be after start_s ({start} s), got {end!r}")
    options = {k: v for k, v in fd.items() if k not in ("kind", "start_s", "end_s")}
    r.only(options, fw, set(declared.options))
    for key, option in declared.options.items():
        if option.type == "rate":
            r.number(fd, fw, key, high=1, low=0)
        elif option.type == "marker":
            marker = r.name(fd, fw, key)
            if marker not in {m.marker_id for m in site.markers}:
                r.fail((*fw, key), f"no marker {marker!r} on the site")
        elif option.type == "place":
            place = r.name(fd, fw, key)
            if place not in site.places:
                r.fail((*fw, key), f"no place {place!r} on the graph")
        elif option.type == "point":
            r.numbers(fd, fw, key, length=2)
        elif option.type == "flag":
            r.flag(fd, fw, key)
        else:  # number or positive, with a default
            r.number(fd, fw, key, option.default, positive=option.type == "positive")
    return FaultSpec(fkind, float(start), float(end), options)


def _route(r: TomlReader, d, site: SiteMap) -> RouteSpec:
    w = ("route",)
    if not isinstance(d, dict):
        r.fail(w, "must be a table ([route])")
    r.only(d, w, {"waypoints", "speed_mps", "turn_rate_deg_s", "carried", "start_known"})
    raw = d.get("waypoints")
    if not isinstance(raw, list) or len(raw) < 2:
        r.fail((*w, "waypoints"), "needs at least two [x, y] waypoints in metres")
    if len(raw) > MAX_WAYPOINTS:
        r.fail((*w, "waypoints"), f"holds {len(raw):,} waypoints; the limit is {MAX_WAYPOINTS:,}")
    points = []
    for i, p in enumerate(raw):
        if not finite_numbers(p, 2):
            r.fail((*w, "waypoints"), f"waypoint {i + 1} must be [x, y] in metres, got {p!r}")
        points.append((float(p[0]), float(p[1])))
    for i, p in enumerate(points):
        free_point(r, (*w, "waypoints"), site, p, f"waypoint {i + 1}")
    for i in range(len(points) - 1):
        free_segment(r, (*w, "waypoints"), site, points[i], points[i + 1], f"route leg {i + 1}")
    speed = r.number(d, w, "speed_mps", 0.6, positive=True, high=5)
    turn_rate = r.number(d, w, "turn_rate_deg_s", 90.0, positive=True, high=720)
    carries = []
    for i, cd in enumerate(r.tables(d, w, "carried")):
        cw = (*w, "carried", i)
        r.only(cd, cw, {"at_s", "to", "resume_waypoint"})
        to = r.numbers(cd, cw, "to", length=3)
        resume = r.number(cd, cw, "resume_waypoint", whole=True, low=1, high=len(points))
        free_point(r, (*cw, "to"), site, to[:2], "the place the robot is carried to")
        free_segment(r, (*cw, "to"), site, to[:2], points[resume - 1], "the leg after the carry")
        carries.append(CarryEvent(float(r.number(cd, cw, "at_s", low=0)), to, int(resume)))
    start_known = r.flag(d, w, "start_known", True)
    return RouteSpec(
        tuple(points), float(speed), float(turn_rate), tuple(sorted(carries, key=lambda c: c.at_s)), start_known
    )


def _run(r: TomlReader, d: dict, sensors) -> RunSpec:
    FILTER_RULES = filter_rules()
    w = ("run",)
    r.only(
        d,
        w,
        {
            "backends",
            "rule",
            "max_focal",
            "seed",
            "tick_s",
            "policy",
            "motion",
            "budget_gib",
            "budget_minutes",
            "start_covariance",
            *TABLE_KEYS,
        },
    )
    backends = d.get("backends", list(BACKENDS))
    if not isinstance(backends, list) or not backends or any(b not in BACKENDS for b in backends):
        r.fail((*w, "backends"), f"must be a non-empty array naming back ends among: {', '.join(BACKENDS)}")
    rule = r.text(d, w, "rule", "dempster", choices=FILTER_RULES)
    max_focal = r.number(d, w, "max_focal", 32, whole=True, low=2, high=4096)
    motion = r.text(d, w, "motion", "probabilistic", choices=motion_models())
    seed = r.number(d, w, "seed", 1, whole=True, low=0, high=2**63 - 1)
    tick = r.number(d, w, "tick_s", 0.25, positive=True, high=5)
    policy = r.table(d, w, "policy", required=False)
    defaults = policy_defaults()
    known = {f.name for f in dataclasses.fields(defaults)}
    r.only(policy, (*w, "policy"), known)
    for key in policy:
        default = getattr(defaults, key)
        if isinstance(default, bool):
            r.flag(policy, (*w, "policy"), key)
        elif isinstance(default, int):  # counts of ticks or readings; a bound keeps the binomial search short
            r.number(policy, (*w, "policy"), key, whole=True, low=0, high=MAX_POLICY_COUNT)
        elif key == "quarantine_alpha":  # a chance
            r.number(policy, (*w, "policy"), key, positive=True, high=1)
        else:
            r.number(policy, (*w, "policy"), key, low=0)
    gib = r.number(d, w, "budget_gib", MEMORY_BUDGET_GIB, positive=True, high=1024)
    minutes = r.number(d, w, "budget_minutes", WORK_BUDGET_MINUTES, positive=True, high=100_000)
    return RunSpec(
        tuple(backends),
        rule,
        int(max_focal),
        int(seed),
        float(tick),
        dict(policy),
        motion,
        float(gib),
        float(minutes),
        settings_tables(r, d, w, float(gib)),
        start_covariance(r, d, w),
    )


def _sweep(r: TomlReader, d: dict) -> SweepSpec:
    FILTER_RULES = filter_rules()
    w = ("compare",)
    r.only(d, w, {"seeds", "backends", "rules", "reliabilities", "fault_rates"})
    seeds = r.number(d, w, "seeds", 50, whole=True, low=1, high=10_000)
    out = {}
    for key, choices in (("backends", BACKENDS), ("rules", FILTER_RULES)):
        value = d.get(key, list(getattr(SweepSpec, key)))
        if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
            r.fail((*w, key), f"must be a non-empty array of names among: {', '.join(choices)}")
        for v in value:
            if v not in choices:
                r.fail((*w, key), f"unknown name {v!r}; choose among: {', '.join(choices)}")
        out[key] = tuple(dict.fromkeys(value))
    for key, what in (("reliabilities", "discount factors"), ("fault_rates", "fault rates")):
        values = r.numbers(d, w, key, default=())
        for v in values:
            if not 0 <= v <= 1:
                r.fail((*w, key), f"{what} must lie in [0, 1], got {v!r}")
        out[key] = tuple(dict.fromkeys(values))
    return SweepSpec(int(seeds), **out)


def apply_calibration(case: Case, path) -> Case:
    """The case with the sensor parameters of a calibration file (written by ``fusion calibrate``) in place
    of its own; every error names the calibration file, line and field."""
    path = Path(path)
    text = read_text(path, MAX_CASE_BYTES, "calibration file")
    data = load_toml(text, path)
    r = TomlReader(str(path), text)
    r.only(data, (), {"calibration", "sensors"})
    r.table(data, (), "calibration")
    by_name = {s.name: s for s in case.sensors}
    replaced = {}
    for i, d in enumerate(r.tables(data, (), "sensors")):
        w = ("sensors", i)
        name = r.text(d, w, "name")
        if name not in by_name:
            r.fail((*w, "name"), f"the case has no sensor {name!r} (its sensors: {', '.join(by_name)})")
        spec = by_name[name]
        kind = r.text(d, w, "kind")
        if kind != spec.kind:
            r.fail((*w, "kind"), f"sensor {name!r} is a {spec.kind} sensor in the case, not {kind}")
        interval = r.table(d, w, "interval", required=False)
        values = {k: v for k, v in d.items() if k not in ("name", "kind", "interval")}
        _refuse_removed(r, values, w, sensor_kind(kind))
        params = _params(r, values, w, sensor_kind(kind).params, set())
        for key, bounds in interval.items():
            if not finite_numbers(bounds, 2) or bounds[0] > bounds[1]:
                r.fail((*w, "interval", key), f"must be [low, high] with low ≤ high, got {bounds!r}")
        merged = dataclasses.replace(spec.params, **{k: getattr(params, k) for k in values})
        settle = sensor_kind(kind).settle
        if settle is not None:  # e.g. mixture weights the file rounded, summed to exactly 1 again
            try:
                merged = settle(merged)
            except ValueError as err:
                r.fail(w, str(err))
        for f, problem in problems(merged):
            r.fail((*w, f), problem)
        replaced[name] = dataclasses.replace(spec, params=merged)
    return dataclasses.replace(case, sensors=tuple(replaced.get(s.name, s) for s in case.sensors))
