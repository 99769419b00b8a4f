"""What a case will cost before it runs: memory and processor time, each refused with its figure when over budget.

``fusion check`` and every command that loads a case call ``case_problems`` (through the case
loader), so a case that passes ``check`` can start, and one that cannot fit is refused at once
instead of after minutes of work or an exhausted machine.

The estimate counts every array that grows with the case: the pose grid and each back end's
working copies, the focal sets of the focal-set filter, each reading's evidence, what each sensor
model builds (its kind's ``cost``, ``fusion.sensors.kinds``: the range sensor's padded distance
field, the marker sensor's tables and the temporary arrays of its line-of-sight test, the door
zones), and the simulated log and the per-tick rows of a run.  Time
is counted per tick from coefficients measured on the development machine (one core of a shared
2-core machine; ``docs/reliability.md``): they are rough, and a budget exists to refuse cases that
are off by orders of magnitude, not to predict a run to the second.

Budgets: ``MEMORY_BUDGET_GIB`` and ``WORK_BUDGET_MINUTES`` by default; a case may raise them
knowingly with ``[run] budget_gib`` and ``[run] budget_minutes``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

__all__ = [
    "Estimate",
    "estimate",
    "case_problems",
    "route_too_long",
    "MEMORY_BUDGET_GIB",
    "WORK_BUDGET_MINUTES",
    "MAX_TICKS",
]

MEMORY_BUDGET_GIB = 4.0
"""Default memory budget of one run (our choice: a robot's computer or a laptop runs it beside other work)."""
WORK_BUDGET_MINUTES = 5.0
"""Default processor-time budget of one run, all its back ends together (our choice)."""
MAX_TICKS = 100_000
"""Most ticks a simulated route may take (the simulator's bound; 7 hours at 0.25 s a tick)."""

# Seconds per cell and tick, measured on the demo case (345,600 cells; the focal-set terms on a 216,000-cell
# grid at 256 and 1,024 focal sets) as CPU time on one core, rounded up (measured, no source).
_TICK_S_PER_CELL = 100e-9  # predict, estimate and monitor of one back end
_READING_S_PER_CELL = 15e-9  # encode and absorb one reading
_BEAM_S_PER_CELL = 2e-9  # each beam of a range scan
_FOCAL_S_PER_CELL = 3.5e-9  # each focal set kept by the focal-set filter, per reading
_FOCAL_BYTES_PER_CELL = 6  # each focal set kept: the bitsets of the belief, the pair products and their merge
_READING_BYTES_PER_CELL = 24  # contour, likelihood and plausibility of one reading
_TICK_BYTES = 1500  # one row of per-tick results and its log records, per back end
_READING_BYTES = 400  # one simulated reading (a beam adds 8 more)


@dataclass
class Estimate:
    """Figures of one run of a case: bytes by part, seconds by part, ticks."""

    memory: dict[str, float] = field(default_factory=dict)
    seconds: dict[str, float] = field(default_factory=dict)
    ticks: float = 0.0

    @property
    def bytes(self) -> float:
        return sum(self.memory.values())

    @property
    def total_seconds(self) -> float:
        return sum(self.seconds.values())

    def largest(self, parts: dict[str, float]) -> str:
        return max(parts, key=parts.get) if parts else "nothing"


def route_seconds(case) -> float:
    """Time the simulated robot takes for the route: driving, turning on the spot, the legs after carries."""
    r = case.route
    if r is None:  # a replay-only site: nothing is simulated
        return 0.0
    pts = list(r.waypoints)
    length = sum(math.dist(a, b) for a, b in zip(pts, pts[1:]))
    turned = 0.0
    for a, b, c in zip(pts, pts[1:], pts[2:]):
        h1, h2 = math.atan2(b[1] - a[1], b[0] - a[0]), math.atan2(c[1] - b[1], c[0] - b[0])
        turned += abs((math.degrees(h2 - h1) + 180.0) % 360.0 - 180.0)
    for carry in r.carries:
        length += math.dist(carry.to[:2], pts[carry.resume_waypoint - 1])
        turned += 180.0
    return length / r.speed_mps + (turned + 180.0 * len(r.carries)) / r.turn_rate_deg_s


def estimate(case, backends=None, rule: str | None = None) -> Estimate:
    """The memory and time one run of ``case`` needs (see the module docstring for what is counted)."""
    from fusion.backends import BACKENDS
    from fusion.backends.contour import CONTOUR_RULES
    from fusion.sensors.kinds import ModelCost, sensor_kind

    site, run = case.site, case.run
    backends = tuple(backends or run.backends)
    rule = rule or run.rule
    res = site.resolution_m
    plane = (site.width_m / res) * (site.height_m / res)
    cells = plane * case.headings
    est = Estimate()
    est.ticks = route_seconds(case) / run.tick_s + 1
    readings_per_tick, beams_per_tick = 0.0, 0.0
    for s in case.sensors:
        kind = sensor_kind(s.kind)
        if kind.motion:
            continue
        per_tick = 1.0 / max(1, round(1.0 / (s.rate_hz * run.tick_s)))
        readings_per_tick += per_tick
        model = kind.cost(s, site) if kind.cost is not None else ModelCost()
        beams_per_tick += per_tick * model.beams
        est.memory.update({f"{part} of {s.name}": v for part, v in model.memory.items()})
        est.seconds.update({f"{part} of {s.name}": v for part, v in model.seconds.items()})
    focal = run.max_focal if rule not in CONTOUR_RULES else 0
    for b in backends:
        kind = BACKENDS[b]  # bytes per cell of its working arrays: belief and the copies of one step (measured)
        est.memory[f"{b} back end"] = cells * kind.bytes_per_cell
        if kind.focal_sets and focal:
            est.memory[f"{b} back end"] += cells * focal * _FOCAL_BYTES_PER_CELL
        per_tick = cells * (
            _TICK_S_PER_CELL
            + readings_per_tick * _READING_S_PER_CELL
            + beams_per_tick * _BEAM_S_PER_CELL
            + (readings_per_tick * focal * _FOCAL_S_PER_CELL if kind.focal_sets else 0.0)
        )
        est.seconds[f"{b} back end"] = per_tick * est.ticks
    est.memory["readings of one tick"] = cells * _READING_BYTES_PER_CELL * max(1.0, readings_per_tick)
    est.memory["simulated log and results"] = est.ticks * (
        _TICK_BYTES * len(backends) + _READING_BYTES * readings_per_tick + 8 * beams_per_tick
    )
    return est


def route_too_long(ticks: float, tick_s: float) -> str | None:
    """Why a route of ``ticks`` ticks of ``tick_s`` is refused (more than ``MAX_TICKS``: the simulator stops there),
    or None."""
    if ticks <= MAX_TICKS:
        return None
    return (
        f"the route takes about {ticks * tick_s:,.0f} s, {ticks:,.0f} ticks of {tick_s:g} s; the limit is "
        f"{MAX_TICKS:,} ticks: shorten the route or raise its speed"
    )


def case_problems(case) -> list[tuple[tuple, str]]:
    """``(where, what)`` for each budget the case exceeds; ``where`` is a key path for the loader's error."""
    out = []
    est = estimate(case)
    too_long = route_too_long(est.ticks, case.run.tick_s)
    if too_long:
        out.append((("route",), too_long))
        return out
    checks = (
        ("budget_gib", est.memory, 1024**3, "GiB", "coarsen the grid, shorten the sensors' range"),
        (
            "budget_minutes",
            est.seconds,
            60.0,
            "min",
            "shorten the route, coarsen the grid, use fewer beams or focal sets",
        ),
    )
    for key, parts, unit, name, advice in checks:
        need, budget = sum(parts.values()) / unit, getattr(case.run, key)
        if need > budget:
            part = est.largest(parts)
            out.append(
                (
                    ("run", key),
                    f"a run of this case needs about {need:,.3g} {name} ({est.ticks:,.0f} ticks; most for the {part}: "
                    f"{parts[part] / unit:,.3g} {name}); the budget is {budget:g} {name}: {advice}, or raise "
                    f"[run] {key} if the machine allows",
                )
            )
    return out
