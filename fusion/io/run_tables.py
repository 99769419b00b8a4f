"""The parts of a case's ``[run]`` that belong to one back end or to the start: ``[run.particles]``,
``[run.gaussian]`` (each back end's settings dataclass, ``fusion.backends.BackendKind.settings_type``) and
``start_covariance``.  Every error names the file, line and field.

``start_covariance`` is the uncertainty of the known start pose, a 3 × 3 covariance in (x m, y m, heading °):
every back end then starts from that Gaussian on the grid instead of the default disc of 0.5 m and ±15°.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np

from fusion.backends import BACKENDS
from fusion.backends.tuning import problems
from fusion.errors import ObservationError

__all__ = ["settings_tables", "start_covariance", "TABLE_KEYS"]

TABLE_KEYS = tuple(name for name, kind in BACKENDS.items() if kind.settings is not None)
"""The back ends whose settings a case may set, each in ``[run.<name>]``."""


def settings_tables(r, d: dict, w: tuple, budget_gib: float) -> dict:
    """Back end -> its settings, for each ``[run.<back end>]`` table of the case."""
    out = {}
    for name in TABLE_KEYS:
        if name not in d:
            continue
        table = r.table(d, w, name)
        where = (*w, name)
        cls = BACKENDS[name].settings_type()
        r.only(table, where, {f.name for f in dataclasses.fields(cls)})
        for key in table:
            r.number(table, where, key)
        settings = cls(**table)
        for field, problem in problems(settings):
            r.fail((*where, field), problem)
        need = getattr(settings, "memory_bytes", lambda: 0)()
        if need > budget_gib * 1024**3:
            field = getattr(settings, "MEMORY_FIELD", next(iter(table)))
            r.fail(
                (*where, field),
                f"needs about {need / 1024**3:.1f} GiB while running, beyond the case's memory budget of "
                f"{budget_gib:g} GiB ([run] budget_gib); lower it or raise the budget",
            )
        out[name] = settings
    return out


def start_covariance(r, d: dict, w: tuple):
    """The ``start_covariance`` field as a 3 × 3 array in (m, m, rad), or None when absent."""
    if "start_covariance" not in d:
        return None
    value = d["start_covariance"]
    rows = value if isinstance(value, list) else None
    if rows is None or len(rows) != 3 or not all(isinstance(row, list) and len(row) == 3 for row in rows):
        r.fail((*w, "start_covariance"), "must be a 3 × 3 array of numbers, [[xx, xy, xh], [yx, yy, yh], [hx, hy, hh]]")
    for i, row in enumerate(rows):
        for v in row:
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
                r.fail((*w, "start_covariance"), f"row {i + 1} holds {v!r}, not a finite number")
    from fusion.belief.gaussian import check_covariance

    scale = np.array([1.0, 1.0, math.radians(1.0)])  # heading in degrees in the file, radians inside
    cov = np.asarray(rows, dtype=np.float64) * np.outer(scale, scale)
    try:
        check_covariance(cov, "start covariance")
    except ObservationError as err:
        r.fail((*w, "start_covariance"), str(err).replace("the start covariance ", "", 1))
    return tuple(tuple(float(v) for v in row) for row in cov)
