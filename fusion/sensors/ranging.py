"""Range returns: a few beams at fixed bearings, scored with a likelihood field.

For a beam of measured range z from the pose (x, y, θ) at bearing φ, the end point
is (x + z cos(θ + φ), y + z sin(θ + φ)); d is the distance from that end point to
the nearest obstacle (the site's distance field).  The beam's density is a mixture
of four kinds of return, after Thrun, Burgard & Fox (2005), §6.3–6.4, with R the
maximum range:

    p(z | x) = wall_share · N(d; 0, s) + early_share · k e^{−k z} / (1 − e^{−k R}) + stray_share / R

where s is ``wall_spread_m`` and k is ``early_decay_per_m``.  A *wall* return ends on
the mapped wall give or take s; an *early* return is cut short by something not on
the map (a person, a pallet), more likely near the sensor; a *stray* return can be
anywhere in range; a *no-echo* return reads the maximum range (share
``no_echo_share``).  The four shares sum to one.  In the book's notation the shares
are z_hit, z_short, z_rand and z_max, s is σ_hit and k is λ_short (kept here only to
match the maths).

A no-echo return (z ≥ R) carries no position information in a likelihood field (its
probability does not depend on the pose), so it is skipped.  Beams multiply
(independent given the pose).  The early and stray terms do not depend on the pose,
so they act as a floor that keeps a person walking through a beam from ruling out
the true pose.

End points are snapped to the grid per heading (an error of at most half a cell).
A pose cell stands for every pose inside it, so the wall spread used on the grid is
widened by the spread of those poses' end points: σ² = s² + res²/6 + z²·Δθ²/12
(uniform position error in a cell of side res, uniform heading error in a bin of
width Δθ).  Without it a 10° heading bin would make an 8 m return look wrong by up
to 0.7 m from the very cell that holds the true pose (common practice, no source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from fusion import compiled
from fusion.errors import ObservationError
from fusion.grid import PoseGrid
from fusion.sensors.base import Evidence, contour_from_log
from fusion.sensors.limits import require_valid
from fusion.sensors.linearised import ScanPoint, SignedField
from fusion.site import SiteMap

__all__ = ["RangeParams", "RangeScan", "RangeSensor"]


@dataclass(frozen=True)
class RangeParams:
    bearings_deg: tuple[float, ...] = (0.0, 90.0, 180.0, 270.0)
    max_range_m: float = 8.0
    wall_spread_m: float = 0.2
    wall_share: float = 0.8
    early_share: float = 0.1
    no_echo_share: float = 0.05
    stray_share: float = 0.05
    early_decay_per_m: float = 0.5
    reliability: float = 0.95
    levels: int = 6


@dataclass(frozen=True)
class RangeScan:
    """Measured ranges in metres, one per beam, in the order of ``RangeParams.bearings_deg``."""

    ranges_m: tuple[float, ...]


class RangeSensor:
    """A range sensor on a site; ``encode(scan)`` gives the scan's evidence over the pose grid."""

    def __init__(self, name: str, site: SiteMap, grid: PoseGrid, params: RangeParams = RangeParams()):
        self.name, self.site, self.grid, self.params = name, site, grid, params
        p = params
        require_valid(p, name)
        # Distance field padded so that any end point within max range lands inside the array; past
        # the map's edge it is the distance to the nearest obstacle on the map.  Distances on a grid
        # take few distinct values, so the field is stored as indices into the sorted distinct
        # values and each beam's log-density is computed once per distinct value (a table).
        self._pad = int(math.ceil(p.max_range_m / grid.resolution_m)) + 1
        field = site.distance_beyond(self._pad)
        self._distances, index = np.unique(field, return_inverse=True)
        self._field_index = index.reshape(field.shape).astype(np.int32)

    def grid_sigma(self, z: float) -> float:
        """Hit noise of a beam of range ``z`` on this grid (see the module docstring)."""
        g = self.grid
        return math.sqrt(self.params.wall_spread_m**2 + g.resolution_m**2 / 6 + (z * g.heading_step) ** 2 / 12)

    def beam_density(self, z: float, d: np.ndarray, sigma: float | None = None) -> np.ndarray:
        """Mixture density of one beam of range ``z`` below the maximum range whose end point lies ``d`` from an obstacle.

        ``sigma`` is the wall spread (default: the sensor's own ``wall_spread_m``)."""
        p = self.params
        sigma = p.wall_spread_m if sigma is None else sigma
        hit = np.exp(-0.5 * (d / sigma) ** 2) / (math.sqrt(2 * math.pi) * sigma)
        short = (
            p.early_decay_per_m
            * math.exp(-p.early_decay_per_m * z)
            / (1 - math.exp(-p.early_decay_per_m * p.max_range_m))
        )
        return p.wall_share * hit + p.early_share * short + p.stray_share / p.max_range_m

    def _ranges(self, scan) -> np.ndarray:
        ranges = getattr(scan, "ranges_m", scan)
        try:
            z = np.asarray(ranges, dtype=np.float64).reshape(-1)
        except (TypeError, ValueError):
            raise ObservationError(f"sensor {self.name!r}: ranges must be numbers in metres, got {ranges!r}") from None
        if z.size != len(self.params.bearings_deg):
            raise ObservationError(
                f"sensor {self.name!r}: expected {len(self.params.bearings_deg)} ranges (one per beam), got {z.size}"
            )
        bad = np.isnan(z) | (z < 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise ObservationError(
                f"sensor {self.name!r}: beam {i + 1} has range {float(z[i])!r}; ranges must be ≥ 0 m (use the "
                "maximum range, or inf, for no return)"
            )
        return z

    def log_likelihood(self, scan) -> np.ndarray:
        """log p(scan | x) for every cell, shape (headings, ny, nx), up to a constant."""
        z = self._ranges(scan)
        g, pad, res = self.grid, self._pad, self.grid.resolution_m
        out = np.zeros(g.shape)
        beams = [b for b in range(z.size) if z[b] < self.params.max_range_m]  # no return: no position information
        if not beams:
            return out
        bearings = np.radians(self.params.bearings_deg)
        tables = np.stack([np.log(self.beam_density(z[b], self._distances, self.grid_sigma(z[b]))) for b in beams])
        # Where each heading's window of the padded field starts, per beam (cells; halves round to even).
        angle = g.heading_centres()[None, :] + bearings[beams][:, None]
        sx = np.rint(z[beams][:, None] * np.cos(angle) / res).astype(np.int64)
        sy = np.rint(z[beams][:, None] * np.sin(angle) / res).astype(np.int64)
        loops = compiled.kernels()
        if loops is not None:
            loops.scan_log_likelihood(tables, self._field_index, sx, sy, pad, out)
            return out
        # When the padded field is smaller than the windows the headings read, the beam's log density is gathered
        # at every cell of it once and each heading reads a window of that (a view); otherwise (a long range on a
        # fine grid) each heading gathers its own window from the table.
        whole = gathers_whole_field(self._field_index.size, g.n_cells)
        for table, row_x, row_y in zip(tables, sx, sy):
            field = table[self._field_index] if whole else None
            for h in range(g.headings):
                window = (slice(pad + row_y[h], pad + row_y[h] + g.ny), slice(pad + row_x[h], pad + row_x[h] + g.nx))
                out[h] += field[window] if whole else table[self._field_index[window]]
        return out

    # Its short and random returns are floors of the density, not contradictions: a working ranger
    # whose beam a person blocks still allows the true pose, so its model declares no odd readings.
    odd_rate = 0.0

    def explain(self, scan, x: float, y: float, heading_deg: float, beams: int = 2) -> str:
        """The ``beams`` returns furthest from what the map gives at the pose (x, y, heading)."""
        z, p = self._ranges(scan), self.params
        rows = []
        for measured, bearing in zip(z, p.bearings_deg):
            expected = self.site.ray_range(x, y, math.radians(heading_deg + bearing), p.max_range_m)
            rows.append((abs(min(measured, p.max_range_m) - expected), bearing, measured, expected))
        rows.sort(key=lambda row: -row[0])

        def said(m: float) -> str:
            return "no return" if m >= p.max_range_m else f"{m:.2f} m"

        return "; ".join(
            f"beam at {bearing:+.0f}° measured {said(m)}, expected {said(e)}" for _, bearing, m, e in rows[:beams]
        )

    def encode(self, scan) -> Evidence:
        z = self._ranges(scan)
        returned = z < self.params.max_range_m  # max-range returns carry no position information
        point = None
        if returned.any() and self.signed_field.finite:
            point = ScanPoint(
                self.signed_field, z[returned], np.radians(self.params.bearings_deg)[returned], self.params
            )
        return Evidence(
            self.name,
            contour_from_log(self.log_likelihood(z)),
            self.params.reliability,
            self.params.levels,
            dof=int(np.sum(returned)),
            point=point,
        )

    @cached_property
    def signed_field(self) -> SignedField:
        """The site's signed distance field for the Gaussian filter's scan matching (built on first use)."""
        return SignedField(self.site, self._pad)


# ----------------------------------------------------------------------------- the kind
RENAMED_FIELDS = {
    old: f"it is now called '{new}'; rename it"
    for old, new in (
        ("sigma_hit_m", "wall_spread_m"),
        ("z_hit", "wall_share"),
        ("z_short", "early_share"),
        ("z_max", "no_echo_share"),
        ("z_rand", "stray_share"),
        ("lambda_short", "early_decay_per_m"),
    )
}
"""Older case files' names for the beam model's parameters, with their new names."""


def _record(scan: RangeScan) -> dict:
    return {"ranges_m": [round(float(z), 4) for z in scan.ranges_m]}


def _from_record(rec: dict, where: str) -> RangeScan:
    from fusion.io.json_line import finite_number, shown

    ranges = rec.get("ranges_m")
    if not isinstance(ranges, list) or not ranges:
        raise ObservationError(f"{where}: field 'ranges_m' must be a non-empty array of numbers")
    values = []
    for i, z in enumerate(ranges):
        # +inf is allowed: a beam with no return
        value = math.inf if isinstance(z, float) and z == math.inf else finite_number(z)
        if value is None or value < 0:
            raise ObservationError(f"{where}: ranges_m[{i}] must be a number ≥ 0, got {shown(z)}")
        values.append(value)
    return RangeScan(tuple(values))


def _from_fields(value, feed) -> RangeScan:
    """A scan from a recording's ranges (one cell with ``;`` between beams, or one column per beam), in the feed's
    length unit."""
    from fusion.sensors.field_values import values

    ranges = []
    for i, part in enumerate(values(value("ranges"), "ranges")):
        try:
            z = float(part) * feed.length_unit
        except (TypeError, ValueError):
            raise ObservationError(f"beam {i + 1} must be a range, got {part!r}") from None
        if math.isnan(z) or z < 0:
            raise ObservationError(f"beam {i + 1} has range {part!r}; ranges must be ≥ 0")
        ranges.append(z)
    return RangeScan(tuple(ranges))


def _simulate(case, spec, truth, rng) -> RangeScan:
    """A scan from the true pose: the map's ranges with Gaussian noise; people in the beams (fault)."""
    p = spec.params
    people = [f for f in spec.faults if f.kind == "people" and f.active(truth.t)]
    ranges = []
    for bearing in p.bearings_deg:
        z = case.site.ray_range(truth.x_m, truth.y_m, math.radians(truth.heading_deg + bearing), p.max_range_m)
        if z < p.max_range_m:
            z = max(0.0, z + rng.normal(0.0, p.wall_spread_m))
        for f in people:
            if rng.random() < float(f.options["rate"]):
                z = float(rng.uniform(0.3, max(0.31, min(z, p.max_range_m))))
        ranges.append(min(z, p.max_range_m))
    return RangeScan(tuple(ranges))


def _settle(params: RangeParams) -> RangeParams:
    """The mixture weights summed to exactly 1 (a calibration file rounds them to 6 digits)."""
    import dataclasses

    total = params.wall_share + params.early_share + params.no_echo_share + params.stray_share
    if abs(total - 1.0) > 1e-6:
        raise ValueError(f"wall_share + early_share + no_echo_share + stray_share must sum to 1, got {total:.6g}")
    return dataclasses.replace(
        params, **{k: getattr(params, k) / total for k in ("wall_share", "early_share", "no_echo_share", "stray_share")}
    )


def _cost(spec, site):
    """The padded distance field (values and indices; measured bytes per cell, no source), and one pass per beam."""
    from fusion.sensors.kinds import ModelCost

    res = site.resolution_m
    pad = 2 * (spec.params.max_range_m / res + 1)
    field_bytes = (site.width_m / res + pad) * (site.height_m / res + pad) * 20
    return ModelCost({"distance field": field_bytes}, beams=len(spec.params.bearings_deg))


def _register() -> None:
    from fusion.sensors.kinds import Calibrator, FaultKind, Option, SensorKind, lazy, register

    people = FaultKind(
        "people",
        "short returns from people walking through the beams (rate: chance per beam)",
        {"rate": Option("rate")},
    )
    register(
        SensorKind(
            "ranging",
            RangeParams,
            lambda spec, site, grid: RangeSensor(spec.name, site, grid, spec.params),
            _record,
            _from_record,
            _simulate,
            {"people": people},
            settle=_settle,
            removed_fields=RENAMED_FIELDS,
            fields=("ranges",),
            several=("ranges",),
            from_fields=_from_fields,
            cost=_cost,
            calibrator=Calibrator(
                ("wall_spread_m", "wall_share", "early_share", "no_echo_share", "stray_share", "early_decay_per_m"),
                lazy("fusion.calibration.data:collect_ranging"),
                lazy("fusion.calibration.models:fit_ranging"),
                lambda draws: draws["wall_share"] + draws["no_echo_share"],  # returns that follow the map
                shares=("wall_share", "early_share", "no_echo_share", "stray_share"),
            ),
        )
    )


_register()


def gathers_whole_field(field_cells: int, grid_cells: int) -> bool:
    """Is gathering a beam's density over the whole padded field (``field_cells``) less work than the windows every
    heading reads (``grid_cells`` together)?  (``RangeSensor.log_likelihood``.)"""
    return field_cells <= grid_cells
