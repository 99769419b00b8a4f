"""Posterior summaries, the reliability used for discounting, and the calibration file.

The calibration file is TOML of our own: one ``[[sensors]]`` table per sensor, naming it and
giving the posterior mean of each fitted parameter and the derived reliability, with the 90%
interval in a ``[sensors.interval]`` table.  ``fusion run``/``compare``/``stream`` take it with
``--calibration FILE``; ``fusion.io.case.apply_calibration`` reads it back.

Reliability (the probability that a reading comes from a working sensor, used for Shafer
discounting) is derived conservatively as the **5% lower credible bound** of the probability
that a reading is explained by the working part of the model, as each sensor kind's ``Calibrator``
defines it (``fusion.sensors.kinds``): door: min(hit_rate, 1 − false_alarm_rate); markers:
1 − false_rate; ranging: wall_share + no_echo_share (returns that follow the map).  Odometry keeps
the case's reliability (its slip model has no counterpart in these fits), and so does a sensor whose
log leaves that share too uncertain (``RELIABILITY_MAX_WIDTH``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fusion import __version__
from fusion.sensors.kinds import sensor_kind

__all__ = ["summarise_fits", "calibration_toml", "SensorCalibration", "ParameterEstimate"]

RELIABILITY_QUANTILE = 0.05
RELIABILITY_MAX_WIDTH = 0.3
"""A reliability whose 90% interval is wider than this is not derived (the case's is kept): its lower
bound would mostly reflect the prior, not the sensor (common practice, no source)."""


@dataclass(frozen=True)
class ParameterEstimate:
    """One fitted parameter: posterior mean, 90% credible interval, and the sampler's diagnostics."""

    mean: float
    low: float
    high: float
    r_hat: float = math.nan  # NaN: the method gives none (variational fits)
    ess: float = math.nan


@dataclass
class SensorCalibration:
    """What a log taught about one sensor."""

    sensor: str
    kind: str
    methods: list[str] = field(default_factory=list)
    points: int = 0  # readings (or odometry windows) fitted
    parameters: dict[str, ParameterEstimate] = field(default_factory=dict)  # only those the log identifies
    warnings: list[str] = field(default_factory=list)
    reliability: float | None = None  # None: the case's reliability is kept


def summarise_fits(fits) -> list[SensorCalibration]:
    """One entry per sensor: kind, method, points, per parameter mean and 90% interval, reliability, warnings."""
    out: dict[str, SensorCalibration] = {}
    draws: dict[str, dict] = {}
    for fit in fits:
        entry = out.setdefault(fit.sensor, SensorCalibration(fit.sensor, fit.kind))
        entry.methods.append(fit.method)
        entry.points += fit.points
        entry.warnings += fit.warnings
        for name, why in fit.unidentified.items():
            entry.warnings.append(f"{name} is not calibrated: {why}; the case's value is kept")
        for name in sensor_kind(fit.kind).calibrator.fitted:
            if name in fit.draws and name not in fit.unidentified:
                d = np.asarray(fit.draws[name], dtype=float).reshape(-1)
                diag = fit.diagnostics.get(name, {})
                entry.parameters[name] = ParameterEstimate(
                    float(d.mean()),
                    float(np.quantile(d, 0.05)),
                    float(np.quantile(d, 0.95)),
                    diag.get("r_hat", math.nan),
                    diag.get("ess", math.nan),
                )
        draws.setdefault(fit.sensor, {}).update({k: v for k, v in fit.draws.items() if k not in fit.unidentified})
    for entry in out.values():
        _derive_reliability(entry, draws[entry.sensor])
    return list(out.values())


def _derive_reliability(entry: SensorCalibration, draws: dict) -> None:
    share = sensor_kind(entry.kind).calibrator.reliability
    try:
        rel = None if share is None else np.asarray(share(draws), dtype=float)
    except KeyError:
        rel = None  # a parameter it needs is not identified by this log
    if rel is None:
        return
    lo, hi = np.quantile(rel, [RELIABILITY_QUANTILE, 1 - RELIABILITY_QUANTILE])
    if hi - lo > RELIABILITY_MAX_WIDTH:
        entry.warnings.append(
            f"the log says little about its reliability (90% interval {lo:.2f} – {hi:.2f}); "
            "the case's reliability is kept: record more readings where this sensor should fire"
        )
    else:
        entry.reliability = float(lo)


def _renormalised_shares(entry: SensorCalibration) -> dict[str, float]:
    """The kind's shares (parameters that sum to one) rescaled to sum to 1 exactly (the case format insists)."""
    names = sensor_kind(entry.kind).calibrator.shares
    if not names or not all(n in entry.parameters for n in names):
        return {}
    total = sum(entry.parameters[n].mean for n in names)
    return {n: entry.parameters[n].mean / total for n in names}


def calibration_toml(summary: list[SensorCalibration], site: str, log: str, truth: str) -> str:
    lines = [
        f"# Sensor parameters calibrated by fusion {__version__} for {site!r}",
        f"# from {log} with true poses from {truth}.",
        "# Values are posterior means; [sensors.interval] gives each 90% credible interval.",
        "# reliability: 5% lower credible bound of the share of readings the model's working part explains.",
        "[calibration]",
        f"site = {_q(site)}",
        f"log = {_q(log)}",
        f"truth = {_q(truth)}",
        "",
    ]
    for entry in summary:
        shares = _renormalised_shares(entry)
        lines += ["[[sensors]]", f"name = {_q(entry.sensor)}", f"kind = {_q(entry.kind)}"]
        for name, est in entry.parameters.items():
            lines.append(f"{name} = {shares.get(name, est.mean):.6g}")
        if entry.reliability is not None:
            lines.append(f"reliability = {min(max(entry.reliability, 0.0), 1.0):.6g}")
        lines.append("[sensors.interval]")
        for name, est in entry.parameters.items():
            lines.append(f"{name} = [{est.low:.6g}, {est.high:.6g}]")
        lines.append("")
    return "\n".join(lines)


def _q(text: str) -> str:
    import json

    return json.dumps(text, ensure_ascii=False)  # a JSON string is a valid TOML basic string
