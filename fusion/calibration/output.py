"""Posterior summaries, the reliability used for discounting, and the calibration file.

The calibration file is TOML of our own: one ``[[sensors]]`` table per sensor, naming it and
giving the posterior mean of each fitted parameter and the derived reliability, with the 90%
interval in a ``[sensors.interval]`` table.  ``fusion run``/``compare``/``stream`` take it with
``--calibration FILE``; ``fusion.io.case.apply_calibration`` reads it back.

Reliability (the probability that a reading comes from a working sensor, used for Shafer
discounting) is derived conservatively as the **5% lower credible bound** of the probability
that a reading is explained by the working part of the model:
door: min(hit_rate, 1 − false_alarm_rate); markers: 1 − false_rate; ranging: wall_share + no_echo_share
(returns that follow the map).  Odometry keeps the case's reliability (its slip model has no
counterpart in these fits), and so does a sensor whose log leaves that share too uncertain
(``RELIABILITY_MAX_WIDTH``).
"""

from __future__ import annotations

import math

import numpy as np

from fusion import __version__

__all__ = ["summarise_fits", "reliability_draws", "calibration_toml", "FITTED"]

FITTED = {
    "door": ("hit_rate", "false_alarm_rate"),
    "markers": ("p_detect", "false_rate", "sigma_range_m", "sigma_bearing_deg"),
    "ranging": ("wall_spread_m", "wall_share", "early_share", "no_echo_share", "stray_share", "early_decay_per_m"),
    "odometry": ("sigma_per_m", "turn_sigma_per_m_deg", "turn_sigma_per_turn"),
}
RELIABILITY_QUANTILE = 0.05
RELIABILITY_MAX_WIDTH = 0.3
"""A reliability whose 90% interval is wider than this is not derived (the case's is kept): its lower
bound would mostly reflect the prior, not the sensor (common practice, no source)."""


def reliability_draws(kind: str, draws: dict) -> np.ndarray | None:
    if kind == "door" and {"hit_rate", "false_alarm_rate"} <= draws.keys():
        return np.minimum(draws["hit_rate"], 1 - draws["false_alarm_rate"])
    if kind == "markers" and "false_rate" in draws:
        return 1 - draws["false_rate"]
    if kind == "ranging" and {"wall_share", "no_echo_share"} <= draws.keys():
        return draws["wall_share"] + draws["no_echo_share"]
    return None


def summarise_fits(fits) -> list[dict]:
    """One entry per sensor: kind, method, points, per parameter mean and 90% interval, reliability, warnings."""
    out: dict[str, dict] = {}
    for fit in fits:
        entry = out.setdefault(
            fit.sensor,
            {"sensor": fit.sensor, "kind": fit.kind, "methods": [], "points": 0, "parameters": {}, "warnings": []},
        )
        entry["methods"].append(fit.method)
        entry["points"] += fit.points
        entry["warnings"] += fit.warnings
        for name, why in fit.unidentified.items():
            entry["warnings"].append(f"{name} is not calibrated: {why}; the case's value is kept")
        for name in FITTED[fit.kind]:
            if name in fit.draws and name not in fit.unidentified:
                d = np.asarray(fit.draws[name], dtype=float).reshape(-1)
                diag = fit.diagnostics.get(name, {})
                entry["parameters"][name] = {
                    "mean": float(d.mean()),
                    "low": float(np.quantile(d, 0.05)),
                    "high": float(np.quantile(d, 0.95)),
                    "r_hat": diag.get("r_hat", math.nan),
                    "ess": diag.get("ess", math.nan),
                }
        entry["_draws"] = {
            **entry.get("_draws", {}),
            **{k: v for k, v in fit.draws.items() if k not in fit.unidentified},
        }
    for entry in out.values():
        rel = reliability_draws(entry["kind"], entry.pop("_draws"))
        entry["reliability"] = None
        if rel is None:
            continue
        lo, hi = np.quantile(rel, [RELIABILITY_QUANTILE, 1 - RELIABILITY_QUANTILE])
        if hi - lo > RELIABILITY_MAX_WIDTH:
            entry["warnings"].append(
                f"the log says little about its reliability (90% interval {lo:.2f} – {hi:.2f}); "
                "the case's reliability is kept: record more readings where this sensor should fire"
            )
        else:
            entry["reliability"] = float(lo)
    return list(out.values())


def _renormalised_weights(params: dict) -> dict:
    """The four beam-model weights rescaled to sum to 1 exactly (the case format insists on it)."""
    names = ("wall_share", "early_share", "no_echo_share", "stray_share")
    if not all(n in params for n in names):
        return {}
    total = sum(params[n]["mean"] for n in names)
    return {n: params[n]["mean"] / total for n in names}


def calibration_toml(summary: list[dict], site: str, log: str, truth: str) -> str:
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
        params = entry["parameters"]
        weights = _renormalised_weights(params)
        lines += ["[[sensors]]", f"name = {_q(entry['sensor'])}", f"kind = {_q(entry['kind'])}"]
        for name, s in params.items():
            lines.append(f"{name} = {weights.get(name, s['mean']):.6g}")
        if entry["reliability"] is not None:
            lines.append(f"reliability = {min(max(entry['reliability'], 0.0), 1.0):.6g}")
        lines.append("[sensors.interval]")
        for name, s in params.items():
            lines.append(f"{name} = [{s['low']:.6g}, {s['high']:.6g}]")
        lines.append("")
    return "\n".join(lines)


def _q(text: str) -> str:
    import json

    return json.dumps(text, ensure_ascii=False)  # a JSON string is a valid TOML basic string
