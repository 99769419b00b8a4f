"""What ``fusion check`` says about a valid case: the site, its sensors, the route, and what a run needs."""

from __future__ import annotations

from fusion.budget import estimate
from fusion.case_model import Case
from fusion.text import plain

__all__ = ["describe"]


def describe(case: Case, path) -> str:
    """One paragraph on the case at ``path``: extent and origin, grid size, sensors, route, estimated needs."""
    site, run = case.site, case.run
    sensors = ", ".join(
        f"{plain(s.name)} ({s.kind}{f', {len(s.faults)} fault' + 's' * (len(s.faults) > 1) if s.faults else ''})"
        for s in case.sensors
    )
    grid = site.grid(case.headings)
    need = estimate(case)
    if case.route is not None:
        route = f"route of {len(case.route.waypoints)} waypoints. A run needs about"
    else:
        route = "no route: the case replays recorded logs only (inspect, stream, calibrate). A replay needs about"
    return (
        f"{plain(str(path))}: valid. {plain(case.name)}: {site.width_m:g} m × {site.height_m:g} m "
        f"({grid.spans()}) at {site.resolution_m:g} m, {case.headings} headings ({grid.n_cells:,} cells); "
        f"sensors: {sensors}; {route} {need.bytes / 1024**2:,.0f} MiB beside the program and "
        f"{need.total_seconds:,.3g} s of processor time{'' if case.route else ' per tick'} (rough estimates; "
        f"budgets {run.budget_gib:g} GiB and {run.budget_minutes:g} min)."
    )
