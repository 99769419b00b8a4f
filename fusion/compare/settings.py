"""The settings a comparison sweeps (back end, rule, discount factor, fault rate), the figures it measures, and the recovery windows they are judged by."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from fusion.backends import BACKENDS, backend_kind
from fusion.case_model import Case, SweepSpec
from fusion.errors import FusionError
from fusion.sensors.kinds import sensor_kind

ENGINES = ("local", "dask")
RECOVERY_TICKS = 10
RECOVERY_M, RECOVERY_DEG = 0.5, 15.0
ALERT_GRACE_S = 2.0
"""An alert up to this long after a fault ends still counts as caused by it (common practice, no source)."""
CARRY_WINDOW_TICKS = RECOVERY_TICKS
"""Ticks after a carry during which an alert counts as a detection of it."""
P_FLOOR = 1e-12
"""Probability floor of the true cell in the negative log-likelihood (a cell with p = 0 would give ∞)."""


@dataclass(frozen=True)
class Figure:
    label: str
    better: str  # "low" or "high"
    unit: str
    explain: str
    low: float = 0.0  # the range a run's value can take (intervals over seeds stay inside it)
    high: float = math.inf


FIGURES: dict[str, Figure] = {
    "median_error_m": Figure("median error", "low", "m", "median distance of the estimate from the truth"),
    "p95_error_m": Figure("p95 error", "low", "m", "95th percentile of the distance from the truth"),
    "median_heading_error_deg": Figure("median heading error", "low", "°", "median heading error", 0.0, 180.0),
    "p95_heading_error_deg": Figure(
        "p95 heading error", "low", "°", "95th percentile of the heading error", 0.0, 180.0
    ),
    "in_region": Figure(
        "true cell in region",
        "high",
        "",
        "share of ticks with the true cell among the most probable cells holding 95%",
        0.0,
        1.0,
    ),
    "nll": Figure("NLL", "low", "nats", "mean −log p(true cell) (p floored at 1e-12)"),
    "brier": Figure("Brier", "low", "", "mean Brier score Σ(p − 1[true])² over cells", 0.0, 2.0),
    "recovery_s": Figure("recovery", "low", "s", "seconds after a carry until within 0.5 m and 15° again"),
    "recovered": Figure("recovered in 10 ticks", "high", "", "share of carries recovered within 10 ticks", 0.0, 1.0),
    "alert_precision": Figure(
        "alert precision", "high", "", "share of alert episodes that start during a fault", 0.0, 1.0
    ),
    "alert_recall": Figure("alert recall", "high", "", "share of injected faults met by an alert", 0.0, 1.0),
    "false_alerts": Figure("false alerts", "low", "", "alert episodes starting outside every fault"),
    "ms_per_step": Figure("cost", "low", "ms/step", "mean wall time of one localizer step"),
}


@dataclass(frozen=True, order=True)
class Setting:
    backend: str
    rule: str | None = None  # evidential only
    reliability: float | None = None  # None: each sensor's own, as in the case
    fault_rate: float | None = None  # None: each fault's own, as in the case
    calibrated: bool = False  # sensor parameters from the sweep's calibration file

    @property
    def key(self) -> str:
        """File-name-safe identifier, stable across runs (used to resume)."""
        parts = [self.backend] + ([self.rule] if self.rule else [])
        if self.reliability is not None:
            parts.append(f"r{self.reliability:g}")
        if self.fault_rate is not None:
            parts.append(f"f{self.fault_rate:g}")
        if self.calibrated:
            parts.append("cal")
        return "-".join(parts)

    @property
    def label(self) -> str:
        out = backend_kind(self.backend).label(self.rule)
        if self.reliability is not None:
            out += f" r={self.reliability:g}"
        if self.fault_rate is not None:
            out += f" faults={self.fault_rate:g}"
        if self.calibrated:
            out += " calibrated"
        return out

    def as_dict(self) -> dict:
        return dataclasses.asdict(self)


def check_sweep(spec: SweepSpec, where: str = "the sweep") -> None:
    """Refuse a sweep naming an unknown back end or rule, or a value out of range, listing the valid choices."""
    from fusion.backends.evidential import FILTER_RULES

    if not isinstance(spec.seeds, int) or spec.seeds < 1:
        raise FusionError(f"{where}: seeds must be a whole number ≥ 1, got {spec.seeds!r}")
    for b in spec.backends:
        if b not in BACKENDS:
            raise FusionError(f"{where}: unknown back end {b!r}; choose among: {', '.join(BACKENDS)}")
    for rule in spec.rules:
        if rule not in FILTER_RULES:
            raise FusionError(f"{where}: unknown combination rule {rule!r}; choose among: {', '.join(FILTER_RULES)}")
    for name, values in (("discount factor", spec.reliabilities), ("fault rate", spec.fault_rates)):
        for v in values:
            if not (isinstance(v, (int, float)) and math.isfinite(v) and 0 <= v <= 1):
                raise FusionError(f"{where}: {name} {v!r} is outside its range [0, 1]")
    if not spec.backends:
        raise FusionError(f"{where}: no back end to run; choose among: {', '.join(BACKENDS)}")
    for b in spec.backends:
        if BACKENDS[b].takes_rule and not spec.rules:
            raise FusionError(f"{where}: the {b} back end needs at least one rule: {', '.join(FILTER_RULES)}")


def settings_of(spec: SweepSpec, calibrated: bool = False) -> list[Setting]:
    """Every setting of the sweep; with ``calibrated``, each also with the calibrated sensor parameters."""
    check_sweep(spec)
    reliabilities = spec.reliabilities or (None,)
    fault_rates = spec.fault_rates or (None,)
    out = []
    for f in fault_rates:
        for r in reliabilities:
            for b in (b for b in BACKENDS if b in spec.backends):  # in the table's order, as tools list them
                if BACKENDS[b].takes_rule:
                    out.extend(Setting(b, rule, r, f) for rule in spec.rules)
                else:
                    out.append(Setting(b, None, r, f))
    if calibrated:
        out += [dataclasses.replace(s, calibrated=True) for s in out]
    return out


def variant(case: Case, reliability: float | None, fault_rate: float | None) -> Case:
    """The case with every sensor but the motion one's reliability and every rate-bearing fault's rate replaced."""
    sensors = []
    for s in case.sensors:
        params = s.params
        if reliability is not None and not sensor_kind(s.kind).motion:
            params = dataclasses.replace(params, reliability=float(reliability))
        faults = s.faults
        if fault_rate is not None:
            faults = tuple(
                dataclasses.replace(f, options={**f.options, "rate": float(fault_rate)}) if "rate" in f.options else f
                for f in faults
            )
        sensors.append(dataclasses.replace(s, params=params, faults=faults))
    return dataclasses.replace(case, sensors=tuple(sensors))
